"""Throw-away PostgreSQL cluster for tests, on loopback, in a temporary folder.

Usage (e.g. in a session-scoped pytest fixture)::

    server = PgServer.start()          # raises PgUnavailableError when the machine has none
    url = server.url("postgres")       # postgresql+psycopg://postgres@127.0.0.1:PORT/postgres
    ...
    server.stop()

The cluster is initialised with ``initdb --auth=trust`` and started with ``pg_ctl``
(binaries under ``/usr/lib/postgresql/*/bin`` or on PATH). When the tests run as root
the server runs as the ``postgres`` user (``runuser -u postgres --``), whose temporary
data folder is made and owned by that user.
"""
from __future__ import annotations

import contextlib
import glob
import os
import pwd
import shutil
import socket
import subprocess
import tempfile
from dataclasses import dataclass
from pathlib import Path

__all__ = ["PgServer", "PgUnavailableError", "find_pg_bin"]


class PgUnavailableError(RuntimeError):
    """No usable PostgreSQL on this machine (message says why)."""


def find_pg_bin() -> Path:
    """Folder holding initdb and pg_ctl, newest version first."""
    candidates = sorted(glob.glob("/usr/lib/postgresql/*/bin/initdb"),
                        key=lambda p: int(Path(p).parts[-3]) if Path(p).parts[-3].isdigit() else 0,
                        reverse=True)
    on_path = shutil.which("initdb")
    if on_path:
        candidates.append(on_path)
    for initdb in candidates:
        folder = Path(initdb).parent
        if (folder / "pg_ctl").exists():
            return folder
    raise PgUnavailableError("PostgreSQL server binaries (initdb, pg_ctl) not found; "
                        "install the 'postgresql' package")


def _free_port() -> int:
    with socket.socket(socket.AF_INET, socket.SOCK_STREAM) as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


@dataclass
class PgServer:
    """A running throw-away cluster."""

    bin_dir: Path
    data_dir: Path
    port: int
    run_as: str | None
    _tmp_root: Path

    def _cmd(self, *args: str) -> list[str]:
        if self.run_as:
            return ["runuser", "-u", self.run_as, "--", *args]
        return list(args)

    def _run(self, *args: str, timeout: float = 60.0) -> None:
        proc = subprocess.run(self._cmd(*args), capture_output=True, text=True,
                              timeout=timeout, stdin=subprocess.DEVNULL, check=False)
        if proc.returncode != 0:
            raise PgUnavailableError(f"{' '.join(args[:2])} failed ({proc.returncode}): "
                                f"{proc.stderr.strip() or proc.stdout.strip()}")

    @classmethod
    def start(cls) -> PgServer:
        """initdb + pg_ctl start on a free loopback port; raises PgUnavailableError."""
        bin_dir = find_pg_bin()
        run_as = None
        if os.geteuid() == 0:
            if shutil.which("runuser") is None:
                raise PgUnavailableError("running as root but 'runuser' is missing")
            try:
                user = pwd.getpwnam("postgres")
            except KeyError as exc:
                raise PgUnavailableError("running as root and there is no 'postgres' user") from exc
            run_as = "postgres"
        tmp_root = Path(tempfile.mkdtemp(prefix="fishway-pg-"))
        data_dir = tmp_root / "data"
        data_dir.mkdir()
        if run_as:
            os.chmod(tmp_root, 0o755)
            os.chown(data_dir, user.pw_uid, user.pw_gid)
        os.chmod(data_dir, 0o700)
        server = cls(bin_dir, data_dir, _free_port(), run_as, tmp_root)
        try:
            server._run(str(bin_dir / "initdb"), "-D", str(data_dir), "-U", "postgres",
                        "--auth=trust", "-E", "UTF8", "--locale=C.UTF-8", "--no-sync")
            opts = (f"-c listen_addresses=127.0.0.1 -p {server.port} -k {data_dir} "
                    "-c fsync=off -c synchronous_commit=off -c full_page_writes=off")
            server._run(str(bin_dir / "pg_ctl"), "-D", str(data_dir), "-o", opts,
                        "-l", str(data_dir / "server.log"), "-w", "-t", "60", "start")
        except BaseException:
            server._cleanup()
            raise
        return server

    def url(self, database: str = "postgres") -> str:
        """SQLAlchemy URL (psycopg 3 driver) of a database on this server."""
        return f"postgresql+psycopg://postgres@127.0.0.1:{self.port}/{database}"

    def stop(self) -> None:
        """Fast shutdown and removal of the data folder."""
        with contextlib.suppress(PgUnavailableError, subprocess.TimeoutExpired):
            self._run(str(self.bin_dir / "pg_ctl"), "-D", str(self.data_dir),
                      "-m", "fast", "-w", "stop")
        self._cleanup()

    def _cleanup(self) -> None:
        shutil.rmtree(self._tmp_root, ignore_errors=True)
