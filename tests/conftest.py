"""Shared fixtures: the test models and a real PostgreSQL server for the session."""

from __future__ import annotations

import pytest


def pytest_addoption(parser):
    parser.addoption("--runslow", action="store_true", help="run the long opt-in checks")


def pytest_collection_modifyitems(config, items):
    if config.getoption("--runslow"):
        return
    skip = pytest.mark.skip(reason="opt-in long run: pass --runslow")
    for item in items:
        if "slow" in item.keywords:
            item.add_marker(skip)


@pytest.fixture(scope="session")
def postgres_dsn(tmp_path_factory):
    """A real PostgreSQL server started for this test session on a free loopback port.

    It fails (never skips) when the server cannot start, with the reason.
    """
    from scorewright.verify.postgres import TemporaryServer

    server = TemporaryServer(tmp_path_factory.mktemp("pg"))
    server.start()
    try:
        yield server.dsn
    finally:
        server.stop()


def pytest_terminal_summary(terminalreporter):
    from tally import COUNTS

    if COUNTS:
        terminalreporter.section("what the fault suites tried")
        for what, n in sorted(COUNTS.items()):
            terminalreporter.write_line(f"{n:>8}  {what}")
