#!/usr/bin/env bash
# Installs everything the test suite needs on a fresh machine, then runs it.
# The tests start their own PostgreSQL server (initdb + pg_ctl on a free loopback port).
set -euo pipefail
cd "$(dirname "$0")/.."

need=()
have() { command -v "$1" >/dev/null 2>&1; }
ls /usr/lib/postgresql/*/bin/initdb >/dev/null 2>&1 || have initdb || need+=(postgresql)
have gcc || need+=(gcc)
have valgrind || need+=(valgrind)
have chromium || need+=(chromium)
have arm-none-eabi-gcc || need+=(gcc-arm-none-eabi)
dpkg -s libnewlib-arm-none-eabi >/dev/null 2>&1 || need+=(libnewlib-arm-none-eabi)
have qemu-system-arm || need+=(qemu-system-arm)
have java || need+=(openjdk-17-jre-headless)  # the local Spark session of the Spark tests
have javac || need+=(openjdk-17-jdk-headless)  # the Java target: javac builds each artifact
have sqlite3 || need+=(sqlite3)  # the sqlite3 shell: its .import loads a CSV as TEXT columns
if [ ${#need[@]} -gt 0 ]; then
  echo "installing system packages: ${need[*]}"
  export DEBIAN_FRONTEND=noninteractive
  apt-get update -qq
  apt-get install -y -qq --no-install-recommends "${need[@]}" >/dev/null
fi

python3 -m pip install --quiet --disable-pip-version-check -e '.[test]'
# torch, for the PyTorch freeze tests: the CPU build (no GPU libraries)
python3 -c "import torch" 2>/dev/null || python3 -m pip install --quiet \
  --disable-pip-version-check --index-url https://download.pytorch.org/whl/cpu torch==2.13.0
# two worker processes (the 2-core machine the 15-minute budget is set on); tests of one
# xdist_group (the Spark ones, tests/conftest.py) stay on one worker
python3 -m pytest -q --durations=15 -n 2 --dist loadgroup "$@"
