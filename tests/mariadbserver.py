"""A throwaway MariaDB server for tests that need real slow-log output.

``mariadb_server()`` initialises a data directory in a temporary folder, starts ``mariadbd`` on a free
TCP port of 127.0.0.1 with a private socket and the slow query log on for every statement
(``long_query_time = 0``), waits until it accepts connections and shuts it down cleanly afterwards.
When the binaries are missing the test is skipped, unless ``CI=true``, where it fails.

Started as root, the server runs as the unprivileged ``mysql`` user (``--user=mysql``) and the temporary
folder is handed to that user.
"""

from __future__ import annotations

import os
import shutil
import signal
import socket
import subprocess
import tempfile
import time
from collections.abc import Iterator
from contextlib import contextmanager
from dataclasses import dataclass
from pathlib import Path

import pytest

_START_TIMEOUT_S = 30.0
_STOP_TIMEOUT_S = 20.0


@dataclass
class MariaDBServer:
    """Where a running throwaway server listens and writes its slow log."""

    host: str
    port: int
    socket: Path
    slow_log: Path
    error_log: Path
    version: str
    proc: subprocess.Popen[bytes]

    def connect_kwargs(self) -> dict[str, object]:
        """Keyword arguments for ``pymysql.connect`` as the password-less root user."""
        return {"host": self.host, "port": self.port, "user": "root", "password": ""}

    def stop(self) -> Path:
        """Shut the server down cleanly (so every slow-log entry is written); return the log path."""
        _stop(self.proc)
        return self.slow_log


def _stop(proc: subprocess.Popen[bytes]) -> None:
    if proc.poll() is None:
        proc.send_signal(signal.SIGTERM)  # clean shutdown: mariadbd finishes its threads and exits
        try:
            proc.wait(timeout=_STOP_TIMEOUT_S)
        except subprocess.TimeoutExpired:
            proc.kill()
            proc.wait()


def _unavailable(reason: str) -> None:
    if os.environ.get("CI") == "true":
        pytest.fail(f"MariaDB server tests cannot run in CI: {reason}")
    pytest.skip(reason)


def _binary(*names: str) -> str | None:
    for name in names:
        for folder in (None, "/usr/sbin", "/usr/local/sbin", "/usr/libexec"):
            found = shutil.which(name, path=folder) if folder else shutil.which(name)
            if found:
                return found
    return None


def _free_port() -> int:
    with socket.socket(socket.AF_INET, socket.SOCK_STREAM) as probe:
        probe.bind(("127.0.0.1", 0))
        return probe.getsockname()[1]


def _accepts_connections(port: int) -> bool:
    """True once the server answers on TCP with its handshake packet."""
    try:
        with socket.create_connection(("127.0.0.1", port), timeout=1.0) as conn:
            conn.settimeout(1.0)
            return len(conn.recv(4)) == 4
    except OSError:
        return False


@contextmanager
def mariadb_server(timezone: str | None = None) -> Iterator[MariaDBServer]:
    """Run a private MariaDB server for the duration of the ``with`` block.

    Args:
        timezone: an IANA zone for the server process (``TZ``); its slow-log ``# Time:`` lines are
            written in that local time. None keeps the machine's zone.

    Yields:
        A :class:`MariaDBServer`; its ``slow_log`` collects every statement the server runs. Call
        its ``stop()`` before reading the log to be sure the last entries are written. The folder
        is removed when the block ends.
    """
    server_bin = _binary("mariadbd", "mysqld")
    install_bin = _binary("mariadb-install-db", "mysql_install_db")
    if server_bin is None or install_bin is None:
        _unavailable("mariadbd / mariadb-install-db not found on PATH or in /usr/sbin")
    as_root = os.geteuid() == 0
    if as_root:
        try:
            import pwd

            mysql_user = pwd.getpwnam("mysql")
        except KeyError:
            _unavailable("running as root but there is no 'mysql' user to run mariadbd as")
    # A short folder name keeps the socket path under the 108-byte limit of AF_UNIX.
    base = Path(tempfile.mkdtemp(prefix="attrib-mdb-"))
    proc: subprocess.Popen[bytes] | None = None
    try:
        datadir = base / "data"
        user_args: list[str] = []
        if as_root:
            os.chown(base, mysql_user.pw_uid, mysql_user.pw_gid)
            user_args = ["--user=mysql"]
        install = subprocess.run(
            [
                install_bin,
                "--no-defaults",
                f"--datadir={datadir}",
                "--auth-root-authentication-method=normal",
                "--skip-test-db",
                *user_args,
            ],
            capture_output=True,
            timeout=120,
        )
        if install.returncode != 0:
            tail = install.stderr.decode(errors="replace").strip().splitlines()[-3:]
            raise RuntimeError(f"{install_bin} failed: {' | '.join(tail)}")
        port = _free_port()
        sock = base / "mysqld.sock"
        slow_log = base / "slow.log"
        error_log = base / "error.log"
        proc = subprocess.Popen(
            [
                server_bin,
                "--no-defaults",
                f"--datadir={datadir}",
                *user_args,
                "--bind-address=127.0.0.1",
                f"--port={port}",
                f"--socket={sock}",
                f"--pid-file={base / 'mysqld.pid'}",
                f"--log-error={error_log}",
                "--skip-name-resolve",
                "--skip-log-bin",
                "--innodb-buffer-pool-size=16M",
                "--slow-query-log=1",
                "--long-query-time=0",
                f"--slow-query-log-file={slow_log}",
                # query_plan adds the "# Full_scan:" / "# Filesort:" lines (MariaDB manual,
                # "Slow Query Log Extended Statistics"), so the reader sees them for real.
                "--log-slow-verbosity=query_plan",
            ],
            stdout=subprocess.DEVNULL,
            stderr=subprocess.DEVNULL,
            env={**os.environ, "TZ": timezone} if timezone else None,
        )
        deadline = time.monotonic() + _START_TIMEOUT_S
        while not _accepts_connections(port):
            if proc.poll() is not None or time.monotonic() > deadline:
                log = error_log.read_text(errors="replace") if error_log.exists() else ""
                raise RuntimeError(
                    f"mariadbd did not start (exit {proc.poll()}): {log.strip()[-500:]}"
                )
            time.sleep(0.1)
        version = subprocess.run(
            [server_bin, "--version"], capture_output=True, text=True
        ).stdout.strip()
        yield MariaDBServer("127.0.0.1", port, sock, slow_log, error_log, version, proc)
    finally:
        if proc is not None:
            _stop(proc)
        shutil.rmtree(base, ignore_errors=True)
