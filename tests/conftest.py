"""Shared set-up, made once per test process: a real PostgreSQL server (postgres_dsn) and
a local Spark session (spark). The test tiers: the default run, and --runslow for the
tests marked slow (DEVELOPERS.md, Tests).

`scripts/test.sh` runs the tests in two worker processes (pytest-xdist, `--dist
loadgroup`): every test whose id names Spark is in one group, so one worker starts the
one Spark JVM; each worker that needs PostgreSQL starts its own server. The counts of
what the fault suites tried are sent from each worker to the process that prints them."""

from __future__ import annotations

import pytest


def pytest_addoption(parser):
    parser.addoption("--runslow", action="store_true", help="run the long opt-in checks")


def pytest_collection_modifyitems(config, items):
    for item in items:
        if "spark" in item.nodeid.lower():
            item.add_marker(pytest.mark.xdist_group("spark"))  # one worker, one JVM
    if config.getoption("--runslow"):
        return
    skip = pytest.mark.skip(reason="opt-in long run: pass --runslow")
    for item in items:
        if "slow" in item.keywords:
            item.add_marker(skip)


def pytest_configure(config):
    """Count the PostgreSQL servers this process starts: one is expected (postgres_dsn); a
    runner given no dsn would start its own for every query."""
    import tally
    from scorewright.verify.postgres import TemporaryServer

    start = TemporaryServer.start
    if getattr(start, "counted", False):
        return

    def counted_start(self, *args, **kwargs):
        tally.add("PostgreSQL servers started by the test processes (one a worker expected)",
                  1)
        return start(self, *args, **kwargs)

    counted_start.counted = True
    TemporaryServer.start = counted_start


@pytest.fixture(scope="session")
def spark():
    """The local Spark session (local[2], 4 GB driver heap) the spark dialect's runner uses;
    one JVM serves the whole run."""
    from scorewright.verify.runners.sql import Spark

    return Spark.session()


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


def pytest_sessionfinish(session):
    """In a worker: hand its counts to the controlling process."""
    from tally import COUNTS

    if hasattr(session.config, "workeroutput"):
        session.config.workeroutput["tally"] = dict(COUNTS)


@pytest.hookimpl(optionalhook=True)
def pytest_testnodedown(node, error):
    """In the controlling process: add a finished worker's counts to its own."""
    from tally import COUNTS

    COUNTS.update(getattr(node, "workeroutput", {}).get("tally", {}))


def pytest_terminal_summary(terminalreporter):
    from tally import COUNTS

    if COUNTS:
        terminalreporter.section("what the fault suites tried")
        for what, n in sorted(COUNTS.items()):
            terminalreporter.write_line(f"{n:>8}  {what}")
