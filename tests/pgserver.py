"""A throwaway PostgreSQL 15 server for tests: private data directory, port and socket, all log formats.

Usage::

    with PgServer() as server:            # copy an initdb'd directory, start
        run_something(server.conninfo)
        logs = server.stop()              # pg_ctl stop -m fast; logs.stderr / .csvlog / .jsonlog
        read(logs.stderr)
    # the temporary directory is removed here

PostgreSQL refuses to run as root, so when the tests run as root the server binaries run as the
unprivileged ``postgres`` system user (``subprocess`` ``user=``/``group=``) and the temporary directory is
handed to that user. Use :func:`require_postgres` in tests: it skips when the binaries are missing,
except on CI (``CI=true``) where a missing server is a failure.
"""

from __future__ import annotations

import atexit
import os
import pwd
import shutil
import socket
import subprocess
import tempfile
from dataclasses import dataclass
from pathlib import Path

BIN_DIR = Path(os.environ.get("ATTRIB_PG_BIN", "/usr/lib/postgresql/15/bin"))
DEBIAN_PREFIX = "%m [%p] %q%u@%d "
SUPERUSER = "attrib"
DATABASE = "huts"


@dataclass(frozen=True)
class LogFiles:
    """The three log files the server wrote (same messages in three formats)."""

    stderr: Path
    csvlog: Path
    jsonlog: Path


def missing_reason() -> str | None:
    """Why no server can be started here (None when it can)."""
    for name in ("initdb", "pg_ctl", "postgres"):
        if not (BIN_DIR / name).exists():
            return f"PostgreSQL binaries not found in {BIN_DIR} (set ATTRIB_PG_BIN)"
    if os.geteuid() == 0:
        try:
            pwd.getpwnam("postgres")
        except KeyError:
            return "running as root and there is no 'postgres' user to run the server as"
    try:
        import psycopg  # noqa: F401
    except ImportError:
        return "psycopg is not installed"
    return None


def require_postgres() -> None:
    """Skip the calling test when no server can be started; on CI (CI=true) fail instead."""
    import pytest

    reason = missing_reason()
    if reason is None:
        return
    if os.environ.get("CI", "").lower() in ("1", "true", "yes"):
        pytest.fail(f"CI=true but no PostgreSQL server can be started: {reason}")
    pytest.skip(reason)


def free_port() -> int:
    """A TCP port on 127.0.0.1 that nothing listens on right now."""
    with socket.socket(socket.AF_INET, socket.SOCK_STREAM) as sock:
        sock.bind(("127.0.0.1", 0))
        return sock.getsockname()[1]


class PgServer:
    """A private PostgreSQL server in a temporary directory.

    Args:
        log_line_prefix: the stderr ``log_line_prefix`` (default Debian's).
        mode: ``"duration"`` (``log_min_duration_statement = 0``) or ``"statement"``
            (``log_statement = all`` + ``log_duration = on``, no duration threshold).
        log_timezone: the server's ``log_timezone``.
        settings: further ``postgresql.conf`` settings (values written as given).
    """

    def __init__(
        self,
        *,
        log_line_prefix: str = DEBIAN_PREFIX,
        mode: str = "duration",
        log_timezone: str = "UTC",
        settings: dict[str, str] | None = None,
    ) -> None:
        if mode not in ("duration", "statement"):
            raise ValueError(f"mode must be 'duration' or 'statement', not {mode!r}")
        self.log_line_prefix = log_line_prefix
        self.mode = mode
        self.log_timezone = log_timezone
        self.settings = dict(settings or {})
        self.port = 0
        self.base: Path | None = None
        self.logs: LogFiles | None = None
        self._running = False
        self._as_postgres = os.geteuid() == 0

    # -- lifecycle -----------------------------------------------------------------------------

    def __enter__(self) -> PgServer:
        try:
            self.start()
        except BaseException:
            self.cleanup()
            raise
        return self

    def __exit__(self, *exc: object) -> None:
        try:
            self.stop()
        finally:
            self.cleanup()

    def start(self) -> None:
        """Copy the initialised data directory, write the settings, start and wait for the server."""
        reason = missing_reason()
        if reason is not None:
            raise RuntimeError(reason)
        self.base = Path(tempfile.mkdtemp(prefix="attrib-pg-"))
        if self._as_postgres:
            entry = pwd.getpwnam("postgres")
            os.chown(self.base, entry.pw_uid, entry.pw_gid)
        data = self.base / "data"
        shutil.copytree(_template(), data, symlinks=True)
        if self._as_postgres:
            _give_to_postgres(self.base)
        self.port = free_port()
        conf = {
            "listen_addresses": "'127.0.0.1'",
            "port": str(self.port),
            "unix_socket_directories": f"'{self.base}'",
            "fsync": "off",
            "synchronous_commit": "off",
            "full_page_writes": "off",
            "shared_buffers": "'32MB'",
            "max_connections": "20",
            "logging_collector": "on",
            "log_destination": "'stderr,csvlog,jsonlog'",
            "log_directory": f"'{self.base / 'log'}'",
            "log_filename": "'postgresql.log'",
            "log_rotation_age": "0",
            "log_rotation_size": "0",
            "lc_messages": "'C'",
            "log_timezone": f"'{self.log_timezone}'",
            "log_line_prefix": "'" + self.log_line_prefix.replace("'", "''") + "'",
            "log_connections": "on",
            "log_disconnections": "on",
            "log_checkpoints": "on",
        }
        if self.mode == "duration":
            conf |= {"log_min_duration_statement": "0"}
        else:
            conf |= {
                "log_statement": "'all'",
                "log_duration": "on",
                "log_min_duration_statement": "-1",
            }
        conf |= self.settings
        with open(data / "postgresql.conf", "a", encoding="utf-8") as fh:
            fh.write("\n# attrib test settings\n")
            for key, value in conf.items():
                fh.write(f"{key} = {value}\n")
        self._run(
            [
                str(BIN_DIR / "pg_ctl"),
                "-D",
                str(data),
                "-l",
                str(self.base / "startup.log"),
                "-w",
                "-t",
                "30",
                "start",
            ]
        )
        self._running = True

    def stop(self) -> LogFiles:
        """Stop the server (fast shutdown) and return its log files."""
        if self.base is None:
            raise RuntimeError("server was never started")
        if self._running:
            self._run(
                [str(BIN_DIR / "pg_ctl"), "-D", str(self.base / "data"), "-m", "fast", "-w", "stop"]
            )
            self._running = False
        log_dir = self.base / "log"
        self.logs = LogFiles(
            stderr=log_dir / "postgresql.log",
            csvlog=log_dir / "postgresql.csv",
            jsonlog=log_dir / "postgresql.json",
        )
        return self.logs

    def cleanup(self) -> None:
        """Remove the temporary directory (the server must be stopped)."""
        if self.base is not None and not self._running:
            shutil.rmtree(self.base, ignore_errors=True)
            self.base = None

    # -- connecting ----------------------------------------------------------------------------

    @property
    def conninfo(self) -> str:
        """A libpq connection string for the test database over TCP."""
        return f"host=127.0.0.1 port={self.port} user={SUPERUSER} dbname={DATABASE}"

    def _run(self, cmd: list[str]) -> None:
        _run(cmd, cwd=self.base, startup=self.base / "startup.log" if self.base else None)


_TEMPLATE: Path | None = None


def _template() -> Path:
    """A data directory made by initdb (plus the test database), once per process; servers copy it.

    initdb takes seconds on a busy machine; copying its result takes a fraction of that.
    """
    global _TEMPLATE
    if _TEMPLATE is None:
        base = Path(tempfile.mkdtemp(prefix="attrib-pg-template-"))
        atexit.register(shutil.rmtree, base, True)
        if os.geteuid() == 0:
            _give_to_postgres(base)
        data = base / "data"
        _run(
            [str(BIN_DIR / "initdb"), "-D", str(data), "-U", SUPERUSER, "--auth=trust"]
            + ["--encoding=UTF8", "--locale=C", "--no-sync", "--wal-segsize=1"],
            cwd=base,
        )
        # single-user mode creates the database without starting a server
        _run(
            [str(BIN_DIR / "postgres"), "--single", "-D", str(data), "-c", "fsync=off", "postgres"],
            cwd=base,
            stdin=f"CREATE DATABASE {DATABASE};\n",
        )
        _TEMPLATE = data
    return _TEMPLATE


def _give_to_postgres(path: Path) -> None:
    entry = pwd.getpwnam("postgres")
    os.chown(path, entry.pw_uid, entry.pw_gid)
    for root, dirs, files in os.walk(path):
        for name in dirs + files:
            os.chown(os.path.join(root, name), entry.pw_uid, entry.pw_gid, follow_symlinks=False)


def _run(
    cmd: list[str], *, cwd: Path | None, stdin: str | None = None, startup: Path | None = None
) -> None:
    kwargs: dict[str, object] = {}
    if os.geteuid() == 0:
        kwargs = {"user": "postgres", "group": "postgres", "extra_groups": []}
    env = dict(os.environ, LC_ALL="C", LANG="C")
    proc = subprocess.run(
        cmd,
        cwd=cwd,
        env=env,
        input=stdin,
        capture_output=True,
        text=True,
        timeout=60,
        **kwargs,
    )
    if proc.returncode != 0:
        tail = ""
        if startup is not None and startup.exists():
            tail = startup.read_text(errors="replace")[-2000:]
        raise RuntimeError(
            f"{Path(cmd[0]).name} failed ({proc.returncode}): {proc.stderr.strip()}\n{tail}"
        )
