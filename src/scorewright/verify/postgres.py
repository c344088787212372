"""A throwaway PostgreSQL server: initdb + pg_ctl in a temporary directory.

The server listens on a free loopback port and on a unix socket inside the
directory, with fsync off (the data is disposable). initdb refuses to run as
root, so under root the cluster is created and run as the `postgres` user, in a private
directory of its own under the system temp directory (the given directory may
sit below directories only root can enter, which pytest re-locks at every
session start); it is removed again by `stop()`.
"""

from __future__ import annotations

import glob
import os
import pwd
import shutil
import socket
import subprocess
import tempfile
from pathlib import Path

from ..errors import ScorewrightError

START_TIMEOUT_S = 60


def _binary(name: str) -> str:
    candidates = sorted(glob.glob(f"/usr/lib/postgresql/*/bin/{name}"),
                        key=lambda p: int(Path(p).parts[-3]) if Path(p).parts[-3].isdigit() else 0)
    if candidates:
        return candidates[-1]
    found = shutil.which(name)
    if found:
        return found
    raise ScorewrightError(f"postgres: {name} not found (looked in /usr/lib/postgresql/*/bin "
                           "and PATH); install the PostgreSQL server package")


def _free_port() -> int:
    with socket.socket(socket.AF_INET, socket.SOCK_STREAM) as sock:
        sock.bind(("127.0.0.1", 0))
        return sock.getsockname()[1]


class TemporaryServer:
    """A PostgreSQL server owned by this process; `start()`, then `dsn`, then `stop()`."""

    def __init__(self, directory):
        self.directory = Path(directory)
        self.home = self.directory  # where the cluster lives; see start()
        self.data = self.home / "data"
        self.log = self.home / "server.log"
        self.port: int | None = None
        self._user: pwd.struct_passwd | None = None
        self._running = False

    @property
    def dsn(self) -> str:
        if not self._running:
            raise ScorewrightError("postgres: the temporary server is not running")
        user = self._user.pw_name if self._user else pwd.getpwuid(os.getuid()).pw_name
        return f"host=127.0.0.1 port={self.port} dbname=postgres user={user}"

    def _run(self, argv: list[str], what: str) -> None:
        kwargs = {}
        if self._user is not None:
            uid, gid = self._user.pw_uid, self._user.pw_gid

            def demote():
                os.setgid(gid)
                os.setuid(uid)
            kwargs["preexec_fn"] = demote
        env = dict(os.environ, LC_ALL="C", LANG="C")
        try:
            proc = subprocess.run(argv, capture_output=True, text=True, env=env,
                                  cwd=self.home, timeout=START_TIMEOUT_S, **kwargs)
        except subprocess.TimeoutExpired:
            raise ScorewrightError(f"postgres: {what} timed out{self._log_tail()}") from None
        if proc.returncode != 0:
            detail = (proc.stderr or proc.stdout).strip().splitlines()
            last = detail[-1] if detail else f"exit status {proc.returncode}"
            raise ScorewrightError(f"postgres: {what} failed: {last}{self._log_tail()}")

    def _log_tail(self) -> str:
        try:
            lines = self.log.read_text(errors="replace").strip().splitlines()
        except OSError:
            return ""
        return "; server log: " + " | ".join(lines[-3:]) if lines else ""

    def start(self) -> None:
        self.directory.mkdir(parents=True, exist_ok=True)
        if os.geteuid() == 0:
            try:
                self._user = pwd.getpwnam("postgres")
            except KeyError:
                raise ScorewrightError("postgres: running as root and there is no 'postgres' "
                                       "user to run the server as") from None
            self.home = Path(tempfile.mkdtemp(prefix="scorewright-pg-"))
            os.chown(self.home, self._user.pw_uid, self._user.pw_gid)
            self.data, self.log = self.home / "data", self.home / "server.log"
            (self.directory / "cluster-location").write_text(f"{self.home}\n")
        self._run([_binary("initdb"), "-D", str(self.data), "-A", "trust", "-E", "UTF8",
                   "--no-locale", "--no-sync"], "initdb")
        self.port = _free_port()
        options = (f"-c port={self.port} -c listen_addresses=127.0.0.1 "
                   f"-c unix_socket_directories='{self.home}' -c fsync=off "
                   "-c synchronous_commit=off -c full_page_writes=off")
        self._run([_binary("pg_ctl"), "-D", str(self.data), "-l", str(self.log), "-o", options,
                   "-w", "-t", str(START_TIMEOUT_S), "start"], "pg_ctl start")
        self._running = True

    def stop(self) -> None:
        if not self._running:
            return
        self._running = False
        try:
            self._run([_binary("pg_ctl"), "-D", str(self.data), "-m", "immediate", "-w",
                       "stop"], "pg_ctl stop")
        finally:
            if self.home != self.directory:
                shutil.rmtree(self.home, ignore_errors=True)

    def __enter__(self) -> "TemporaryServer":
        self.start()
        return self

    def __exit__(self, *exc) -> None:
        self.stop()
