"""A throwaway PostgreSQL cluster for the scale-out tests.

``initdb`` into a fresh temporary directory (as the ``postgres`` system user when the
tests run as root, since the server refuses to run as root), listening on 127.0.0.1 on
a free port with trust authentication for the local test role only. Where no server
binaries exist the tests skip with a loud reason — except under ``CI=true``, where
``.ci/run`` installs them and a missing server is a failure.
"""

from __future__ import annotations

import glob
import os
import pwd
import shutil
import socket
import subprocess
import tempfile
import time
from pathlib import Path

import pytest

ROLE = "tunnelsmith"
DATABASE = "campaigns"


def server_bindir() -> Path | None:
    """Directory holding initdb and pg_ctl, or None."""
    candidates = sorted(glob.glob("/usr/lib/postgresql/*/bin/initdb"), reverse=True)
    found = shutil.which("initdb")
    for path in ([found] if found else []) + candidates:
        if path and os.access(path, os.X_OK):
            return Path(os.path.realpath(path)).parent
    return None


def free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


class Cluster:
    """A running throwaway server; ``url`` is an Optuna RDB URL for the test database."""

    def __init__(self) -> None:
        bindir = server_bindir()
        if bindir is None:
            message = "PostgreSQL server binaries (initdb, pg_ctl) not found: scale-out tests cannot run here"
            if os.environ.get("CI") == "true":
                pytest.fail(message + " (CI=true: .ci/run should have installed Debian's postgresql package)")
            pytest.skip("LOUD SKIP: " + message)
        self.bindir = bindir
        self.root = Path(tempfile.mkdtemp(prefix="tunnelsmith-pg-"))
        self.data = self.root / "data"
        self.port = free_port()
        self.as_user: list[str] = []
        if os.geteuid() == 0:
            # The server will not run as root; hand the directory to the postgres user.
            try:
                pwd.getpwnam("postgres")
            except KeyError:
                pytest.fail("running as root but no 'postgres' system user exists to own the test cluster")
            os.chmod(self.root, 0o755)
            shutil.chown(self.root, "postgres")
            self.as_user = ["runuser", "-u", "postgres", "--"]
        self._run("initdb", "-D", str(self.data), "-U", ROLE, "--auth=trust", "--no-sync", "-E", "UTF8")
        self.start_server()
        self._run("createdb", "-h", "127.0.0.1", "-p", str(self.port), "-U", ROLE, DATABASE)
        self.url = f"postgresql+psycopg://{ROLE}@127.0.0.1:{self.port}/{DATABASE}"

    def _run(self, tool: str, *args: str) -> None:
        subprocess.run([*self.as_user, str(self.bindir / tool), *args], check=True,
                       stdout=subprocess.PIPE, stderr=subprocess.STDOUT, cwd=self.root)

    def start_server(self) -> None:
        """Start the server on the cluster's port and wait until it accepts connections."""
        self._run(
            "pg_ctl", "-D", str(self.data), "-l", str(self.root / "server.log"), "-w", "-t", "60",
            "-o", f"-h 127.0.0.1 -p {self.port} -k {self.root} -c fsync=off -c max_connections=60",
            "start",
        )

    def stop_server(self) -> None:
        """Stop the server the way an administrator's restart does (``pg_ctl stop -m fast``).

        Every open session is ended with "terminating connection due to administrator
        command" and every new connection is refused until :meth:`start_server`.
        """
        self._run("pg_ctl", "-D", str(self.data), "-m", "fast", "-w", "-t", "60", "stop")

    def restart(self, down_s: float) -> None:
        """Stop the server, keep it down for ``down_s`` seconds, start it again."""
        self.stop_server()
        time.sleep(down_s)
        self.start_server()

    def stop(self) -> None:
        try:
            self._run("pg_ctl", "-D", str(self.data), "-m", "immediate", "-w", "stop")
        finally:
            shutil.rmtree(self.root, ignore_errors=True)
