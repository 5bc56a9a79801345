"""Promise 3: every user mistake gives a one-line error, a documented exit code, no traceback.

Each case runs the real CLI (``python -m attrib ...``) in a subprocess. The exit codes are the ones
`attrib --help` documents: 2 usage, 3 input, 4 store. Usage errors found by click (an unknown option,
a bad choice) print click's usage lines first; their last line is the ``Error:`` line.
"""

from __future__ import annotations

import errno
import json
import os
import resource
import shutil
import signal
import subprocess
import sys
from pathlib import Path

import duckdb
import pytest

from attrib import store as _store

ROOT = Path(__file__).resolve().parent.parent
LOGS = ROOT / "fixtures" / "logs"
REQUESTS = LOGS / "requests-jsonl" / "001_basic.log"
NAIVE = LOGS / "requests-jsonl" / "004_naive_times.log"
SLOW = LOGS / "mysql-slow" / "001_mariadb_hut_booking.log"
ENV = {**os.environ, "PYTHONPATH": str(ROOT), "ATTRIB_SALT": "e" * 32}


def attrib_cli(*args: str, preexec=None) -> subprocess.CompletedProcess:
    return subprocess.run(
        [sys.executable, "-m", "attrib", *map(str, args)],
        env=ENV,
        capture_output=True,
        text=True,
        timeout=300,
        preexec_fn=preexec,
    )


@pytest.fixture(scope="module")
def work(tmp_path_factory):
    """A folder with a good store, a store from a newer attrib, junk files and a budgets file."""
    d = tmp_path_factory.mktemp("errors")
    good = d / "good.duckdb"
    con = _store.connect(good)
    con.close()
    newer = d / "newer.duckdb"
    con = _store.connect(newer)
    con.execute("UPDATE meta SET value = '99' WHERE key = 'schema_version'")
    con.close()
    (d / "junk.log").write_text("hello\nworld\n")
    (d / "not-a-store.duckdb").write_text("just text\n")
    (d / "bad.toml").write_text("[routes.'/a'\nqueries_p95 = \n")
    (d / "folder").mkdir()
    return d


def cases(d: Path) -> dict[str, tuple[list[str], int, list[str]]]:
    """name -> (arguments, exit code, words the one error line must contain)."""
    s = ["--store", d / "fresh.duckdb"]
    return {
        "missing file": (["ingest", *s, "--queries", d / "nope.log"], 3, ["nope.log", "no such"]),
        "missing glob": (["ingest", *s, "--requests", d / "*.gz"], 3, ["*.gz", "no such"]),
        "directory": (["ingest", *s, "--queries", d / "folder"], 3, ["folder", "directory"]),
        "unknown format": (
            ["ingest", *s, "--queries", d / "junk.log", "--queries-format", "xml"],
            3,
            ["'xml'", "known formats", "pg-stderr"],
        ),
        "undetectable format": (
            ["ingest", *s, "--queries", d / "junk.log"],
            3,
            ["junk.log", "--queries-format", "pg-stderr"],
        ),
        "format of the other kind": (
            ["ingest", *s, "--requests", REQUESTS, "--requests-format", "pg-stderr"],
            3,
            ["pg-stderr", "--queries"],
        ),
        "wrong column mapping": (
            ["ingest", *s, "--requests", REQUESTS, "--request-field", "route=handler_name"],
            3,
            [REQUESTS.name, "handler_name", "--request-field"],
        ),
        "malformed mapping": (
            ["ingest", *s, "--requests", REQUESTS, "--request-field", "route"],
            2,
            ["--request-field", "OURS=THEIRS"],
        ),
        "naive timestamps without --tz": (
            ["ingest", *s, "--requests", NAIVE],
            3,
            [NAIVE.name, "--tz"],
        ),
        "unknown time zone": (
            ["ingest", *s, "--requests", NAIVE, "--tz", "Mars/Olympus"],
            3,
            ["Mars/Olympus", "IANA"],
        ),
        "store from a newer attrib (read)": (
            ["routes", "--store", d / "newer.duckdb"],
            4,
            ["newer.duckdb", "99", "upgrade attrib"],
        ),
        "store from a newer attrib (ingest)": (
            ["ingest", "--store", d / "newer.duckdb", "--queries", SLOW],
            4,
            ["newer.duckdb", "upgrade attrib"],
        ),
        "no such store": (["templates", "--store", d / "absent.duckdb"], 4, ["absent.duckdb"]),
        "not a store": (
            ["coverage", "--store", d / "not-a-store.duckdb"],
            4,
            ["not-a-store.duckdb"],
        ),
        "malformed budgets": (
            ["check", "--store", d / "good.duckdb", "--budgets", d / "bad.toml"],
            3,
            ["bad.toml"],
        ),
        "unknown option": (["routes", "--store", d / "good.duckdb", "--bogus"], 2, ["--bogus"]),
        "bad choice": (
            ["routes", "--store", d / "good.duckdb", "--format", "xml"],
            2,
            ["xml", "--format"],
        ),
        "no input at all": (["ingest", *s], 2, ["--requests", "--queries"]),
    }


# The cases run in children forked from one Python that has imported attrib (start-up takes seconds
# on a loaded machine). A child runs attrib.cli.main(argv) as `python -m attrib` does
# (attrib/__main__.py), with its stdout and stderr sent to files; an exception escaping main() is
# printed as the interpreter prints it (a traceback) and exits 1. A few tests below run
# `python -m attrib` itself.
FORK_SERVER = """
import importlib, json, os, sys, traceback
import attrib.cli
for target in set(attrib.cli._COMMANDS.values()):  # load every command once, before forking
    importlib.import_module("attrib.cli." + target.split(":")[0])
import attrib.api, attrib.ingest, attrib.budgets
for line in sys.stdin:
    job = json.loads(line)
    pid = os.fork()
    if pid == 0:
        out = os.open(job["out"], os.O_WRONLY | os.O_CREAT | os.O_TRUNC)
        err = os.open(job["err"], os.O_WRONLY | os.O_CREAT | os.O_TRUNC)
        os.dup2(out, 1)
        os.dup2(err, 2)
        try:
            attrib.cli.main(job["argv"])
            code = 0
        except SystemExit as exc:
            code = exc.code if isinstance(exc.code, int) else (0 if exc.code is None else 1)
        except BaseException:
            traceback.print_exc()
            code = 1
        sys.stdout.flush()
        sys.stderr.flush()
        os._exit(code)
    _, status = os.waitpid(pid, 0)
    print(os.waitstatus_to_exitcode(status), flush=True)
"""


@pytest.fixture(scope="module")
def outcomes(work):
    """Run every case through the fork server; name -> CompletedProcess."""
    table = cases(work)
    server = subprocess.Popen(
        [sys.executable, "-c", FORK_SERVER],
        env=ENV,
        stdin=subprocess.PIPE,
        stdout=subprocess.PIPE,
        text=True,
    )
    done = {}
    try:
        for i, (name, (args, _, _)) in enumerate(table.items()):
            out, err = work / f"{i}.out", work / f"{i}.err"
            argv = [str(a) for a in args]
            job = {"argv": argv, "out": str(out), "err": str(err)}
            server.stdin.write(json.dumps(job) + "\n")
            server.stdin.flush()
            code = int(server.stdout.readline())
            done[name] = subprocess.CompletedProcess(argv, code, out.read_text(), err.read_text())
    finally:
        server.stdin.close()
        server.wait(timeout=60)
    return table, done


def error_line(stderr: str, usage: bool) -> str:
    lines = [line for line in stderr.strip().splitlines() if line.strip()]
    assert lines, "nothing on stderr"
    if not usage:
        assert len(lines) == 1, f"expected one line, got:\n{stderr}"
    return lines[-1]


@pytest.mark.parametrize("name", list(cases(Path("/x"))))
def test_cli_user_mistake_gives_one_error_line_and_documented_exit_code(outcomes, name):
    table, done = outcomes
    _, code, words = table[name]
    proc = done[name]
    assert "Traceback" not in proc.stderr, proc.stderr
    assert proc.returncode == code, (proc.returncode, proc.stderr)
    line = error_line(proc.stderr, usage=code == 2)
    assert line.startswith("Error: "), proc.stderr
    for word in words:
        assert str(word) in line, (word, line)


def test_cli_debug_flag_shows_the_traceback(work):
    proc = attrib_cli("--debug", "ingest", "--store", work / "s.duckdb", "--queries", work / "nope")
    assert proc.returncode != 0 and "Traceback" in proc.stderr, proc.stderr


def test_cli_help_documents_the_exit_codes():
    proc = attrib_cli("--help")
    text = " ".join(proc.stdout.split())
    for code, word in ((2, "usage"), (3, "input"), (4, "store")):
        assert f"{code} {word}" in text.replace(" wrong usage", " usage"), text


# -- a full disk --------------------------------------------------------------------------------


def _mount_tmpfs(folder: Path) -> bool:
    if os.geteuid() != 0 or not shutil.which("mount"):
        return False
    done = subprocess.run(
        ["mount", "-t", "tmpfs", "-o", "size=8m", "tmpfs", str(folder)], capture_output=True
    )
    return done.returncode == 0


def _fill(folder: Path) -> Path:
    """Write a file until the file system is full."""
    filler = folder / "filler"
    with open(filler, "wb") as f:
        try:
            while True:
                f.write(b"\0" * 65536)
                f.flush()
        except OSError as exc:
            assert exc.errno == errno.ENOSPC, exc
    return filler


def test_cli_ingest_on_a_full_disk_is_a_one_line_store_error_and_store_survives(tmp_path):
    folder = tmp_path / "small"
    folder.mkdir()
    mounted = _mount_tmpfs(folder)
    limit = None
    try:
        store = folder / "s.duckdb"
        first = attrib_cli("ingest", "--store", store, "--requests", REQUESTS)
        assert first.returncode == 0, first.stderr
        if mounted:  # a real full file system
            filler = _fill(folder)
            how = "tmpfs filled to the last byte"
        else:  # no mount here: the kernel's file size limit stops DuckDB's writes instead
            filler = None
            limit = store.stat().st_size + 4096

            def preexec():
                signal.signal(signal.SIGXFSZ, signal.SIG_IGN)
                resource.setrlimit(resource.RLIMIT_FSIZE, (limit, limit))

            how = f"RLIMIT_FSIZE {limit} bytes"
        proc = attrib_cli(
            "ingest",
            "--store",
            store,
            "--queries",
            SLOW,
            preexec=None if mounted else preexec,
        )
        print(f"\nfull disk by {how}: exit {proc.returncode}, {proc.stderr.strip()!r}")
        assert "Traceback" not in proc.stderr, proc.stderr
        assert proc.returncode == 4, proc.stderr
        line = error_line(proc.stderr, usage=False)
        assert line.startswith("Error: ") and SLOW.name in line and "run the same ingest" in line
        if filler is not None:
            filler.unlink()
        # the store is intact: the first file whole, nothing of the failed one
        con = duckdb.connect(str(store), read_only=True)
        try:
            rows = con.execute(
                "SELECT path, lines_read, lines_ingested + lines_skipped + lines_rejected, "
                "requests FROM sources"
            ).fetchall()
            n_stmt = con.execute("SELECT count(*) FROM statements").fetchone()[0]
        finally:
            con.close()
        assert len(rows) == 1 and rows[0][1] == rows[0][2] and rows[0][3] > 0, rows
        assert n_stmt == 0
        again = attrib_cli("ingest", "--store", store, "--queries", SLOW)
        assert again.returncode == 0, again.stderr
    finally:
        if mounted:
            subprocess.run(["umount", "-l", str(folder)], capture_output=True)
    if os.environ.get("CI") == "true":
        assert mounted, "CI runs as root: the tmpfs mount must work there"
