#!/usr/bin/env bash
# Installs everything the test suite needs on a fresh machine, then runs it.
# The tests start their own PostgreSQL server (initdb + pg_ctl on a free loopback port).
set -euo pipefail
cd "$(dirname "$0")/.."

python3 -m pip install --quiet --disable-pip-version-check -e '.[test]'
python3 -m pytest -q "$@"
