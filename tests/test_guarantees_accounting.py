"""Promise 1: nothing lost, nothing doubled — under normal runs, SIGKILL and concurrent use.

Counts are checked against reference counters written here (regular expressions and json.loads over
the raw files), not against the ingest code. The kill test runs ``python -m attrib ingest`` in a
subprocess and kills it with SIGKILL at seeded random moments.
"""

from __future__ import annotations

import contextlib
import json
import os
import random
import re
import select
import signal
import subprocess
import sys
import time
from pathlib import Path

import duckdb
import pytest

from attrib import ingest, join
from attrib import store as _store
from attrib.demo import generate
from attrib.errors import StoreLockedError

ROOT = Path(__file__).resolve().parent.parent
LOGS = ROOT / "fixtures" / "logs"
SALT = "5a17" * 8
KILL_TRIALS = 20
ENV = {**os.environ, "ATTRIB_SALT": SALT, "PYTHONPATH": str(ROOT)}

# Reference counters. PostgreSQL docs 20.8 "Error Reporting and Logging": with
# log_min_duration_statement = 0 every completed statement is one "duration: N ms  statement: SQL"
# message; a failed statement is an ERROR message followed by a "STATEMENT:  SQL" line.
PG_STATEMENT = re.compile(r"^\S+ \S+ \S+ \[\d+\] \S+ LOG:  duration: [0-9.]+ ms  statement: ")
PG_FAILED = re.compile(r"^\S+ \S+ \S+ \[\d+\] \S+ STATEMENT:  ")
# MariaDB Knowledge Base, "Slow Query Log Overview": each entry has one "# Query_time:" line.
SLOW_ENTRY = re.compile(r"^# Query_time: ")


def count_pg_statements(path: Path) -> int:
    """Statements in a demo-style pg-stderr log (one message per statement), counted by regex."""
    n = 0
    with open(path, encoding="utf-8", errors="replace") as f:
        for line in f:
            n += bool(PG_STATEMENT.match(line)) + bool(PG_FAILED.match(line))
    return n


def count_json_objects(path: Path) -> int:
    """Lines of a JSON-lines file that json.loads reads as an object."""
    n = 0
    with open(path, encoding="utf-8", errors="replace") as f:
        for line in f:
            try:
                n += isinstance(json.loads(line), dict)
            except ValueError:
                pass
    return n


def physical_lines(path: Path) -> int:
    """Lines as `wc -l` counts them, plus a last line without its newline."""
    data = path.read_bytes()
    return data.count(b"\n") + (1 if data and not data.endswith(b"\n") else 0)


def dump(path: Path) -> dict[str, list[tuple]]:
    """Every row of every table, sorted; sources without its wall-clock column."""
    con = duckdb.connect(str(path), read_only=True)
    try:
        tables = [
            r[0]
            for r in con.execute(
                "SELECT table_name FROM information_schema.tables ORDER BY table_name"
            ).fetchall()
        ]
        out = {}
        for t in tables:
            cols = [
                r[0]
                for r in con.execute(
                    "SELECT column_name FROM information_schema.columns WHERE table_name = ? "
                    "ORDER BY ordinal_position",
                    [t],
                ).fetchall()
                if not (t == "sources" and r[0] == "ingested_at")
            ]
            rows = con.execute(f"SELECT {', '.join(cols)} FROM {t}").fetchall()
            out[t] = sorted(rows, key=repr)
        return out
    finally:
        con.close()


def check_consistent(path: Path, expected: dict[str, tuple[int, int]]) -> int:
    """Assert each stored source is whole: accounting adds up, rows equal the reference counts.

    ``expected`` maps a file name to its reference (lines, records). Returns the sources stored.
    """
    con = _store.connect(path)  # replays DuckDB's write-ahead log after a kill
    try:
        rows = con.execute(
            """SELECT source_id, path, lines_read, lines_ingested, lines_skipped, lines_rejected,
                      requests, statements FROM sources"""
        ).fetchall()
        for sid, name, read, ing, skip, rej, nreq, nstmt in rows:
            assert ing + skip + rej == read, f"{name}: {ing}+{skip}+{rej} != {read}"
            lines, records = expected[name]
            assert read == lines, f"{name}: lines_read {read}, wc -l {lines}"
            assert nreq + nstmt == records, f"{name}: {nreq}+{nstmt} records, reference {records}"
            got = con.execute(
                "SELECT (SELECT count(*) FROM requests WHERE source_id = $1)"
                " + (SELECT count(*) FROM statements WHERE source_id = $1)",
                [sid],
            ).fetchone()[0]
            assert got == records, f"{name}: {got} rows stored, reference {records}"
            skipped = con.execute(
                "SELECT coalesce(sum(lines), 0) FROM skipped WHERE source_id = ?", [sid]
            ).fetchone()[0]
            rejected = con.execute(
                "SELECT coalesce(sum(lines), 0) FROM rejects WHERE source_id = ?", [sid]
            ).fetchone()[0]
            assert (skipped, rejected) == (skip, rej), name
        orphans = con.execute(
            "SELECT count(*) FROM statements WHERE source_id NOT IN (SELECT source_id FROM sources)"
        ).fetchone()[0]
        assert orphans == 0, "statements of a file whose ingest did not finish"
        return len(rows)
    finally:
        con.close()


# A fork server: imports attrib once, then runs each `attrib ingest` in a forked child whose pid it
# prints, so that a trial costs the ingest and not Python's start-up (seconds on a loaded machine).
# The child is a separate process; SIGKILL ends it exactly as it ends a fresh `python -m attrib`.
FORK_SERVER = """
import os, sys
import attrib.cli, attrib.cli.ingest, attrib.ingest, attrib.api
for line in sys.stdin:
    argv = line.split("\\t")
    argv[-1] = argv[-1].rstrip("\\n")
    pid = os.fork()
    if pid == 0:
        devnull = os.open(os.devnull, os.O_WRONLY)
        os.dup2(devnull, 1)
        os.dup2(devnull, 2)
        try:
            attrib.cli.main(argv)
            code = 0
        except SystemExit as exc:
            code = exc.code if isinstance(exc.code, int) else 1
        except BaseException:
            code = 1
        os._exit(code)
    print(pid, flush=True)
    _, status = os.waitpid(pid, 0)
    print(status, flush=True)
"""


def run_ingest(store: Path, requests: Path, queries: Path, **kw) -> subprocess.Popen:
    cmd = [sys.executable, "-m", "attrib", "ingest", "--store", str(store)]
    cmd += ["--requests", str(requests), "--queries", str(queries)]
    return subprocess.Popen(
        cmd, env=ENV, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True, **kw
    )


@pytest.fixture(scope="module")
def demo_logs(tmp_path_factory):
    """A small demo workload (80 requests, about 1,800 log lines) and its reference counts."""
    folder = tmp_path_factory.mktemp("demo")
    truth = generate(folder, requests=80, seed=11)
    req, qry = truth.requests_path, truth.queries_path
    expected = {
        str(req): (physical_lines(req), count_json_objects(req)),
        str(qry): (physical_lines(qry), count_pg_statements(qry)),
    }
    return req, qry, expected


@pytest.fixture(scope="module")
def clean_store(demo_logs, tmp_path_factory):
    """One uninterrupted CLI ingest of the demo logs, and how long it took."""
    req, qry, _ = demo_logs
    path = tmp_path_factory.mktemp("clean") / "clean.duckdb"
    started = time.monotonic()
    proc = run_ingest(path, req, qry)
    out, err = proc.communicate(timeout=300)
    assert proc.returncode == 0, err
    return path, time.monotonic() - started


def test_ingest_demo_logs_counts_match_reference_counters(demo_logs, clean_store):
    req, qry, expected = demo_logs
    path, _ = clean_store
    assert check_consistent(path, expected) == 2
    con = duckdb.connect(str(path), read_only=True)
    try:
        n_req, n_stmt = con.execute(
            "SELECT (SELECT count(*) FROM requests), (SELECT count(*) FROM statements)"
        ).fetchone()
    finally:
        con.close()
    assert n_req == expected[str(req)][1] and n_stmt == expected[str(qry)][1]
    print(f"\nreference counts: {n_req} requests, {n_stmt} statements")


@pytest.mark.parametrize(
    ("fmt", "rel", "counter"),
    [
        ("mysql-slow", "mysql-slow/001_mariadb_hut_booking.log", "slow"),
        ("mysql-slow", "mysql-slow/903_garbage_lines.log", "slow"),
        ("sql-jsonl", "sql-jsonl/001_app_logger_defaults.log", "json"),
        ("requests-jsonl", "requests-jsonl/001_basic.log", "json"),
        ("requests-jsonl", "requests-jsonl/900_invalid_json.log", "json"),
    ],
)
def test_ingest_fixture_lines_add_up_and_records_match_reference(con, fmt, rel, counter):
    path = LOGS / rel
    kind = "requests" if fmt.startswith("requests") else "queries"
    options = ingest.IngestOptions(tz="UTC", **{f"{kind}_format": fmt})
    ingest.ingest(con, **{kind: [path]}, options=options)
    read, ing, skip, rej, nreq, nstmt = con.execute(
        """SELECT lines_read, lines_ingested, lines_skipped, lines_rejected, requests, statements
           FROM sources"""
    ).fetchone()
    assert read == physical_lines(path)
    assert ing + skip + rej == read
    if counter == "slow":
        # an entry without a statement or time is rejected: count entries the reader kept or
        # rejected; kept + rejected entries = reference entries
        ref = sum(
            1 for line in path.read_text(errors="replace").splitlines() if SLOW_ENTRY.match(line)
        )
        entry_rejects = con.execute(
            "SELECT count(*) FROM rejects WHERE reason NOT IN ('not part of a slow-log entry', "
            "'text after the end of a statement')"
        ).fetchone()[0]
        assert nstmt + entry_rejects == ref, (nstmt, entry_rejects, ref)
    else:
        ref = count_json_objects(path)
        object_rejects = con.execute(
            "SELECT count(*) FROM rejects WHERE reason NOT IN ('invalid JSON', 'not a JSON object')"
        ).fetchone()[0]
        assert nreq + nstmt + object_rejects == ref, (nreq, nstmt, object_rejects, ref)


def test_ingest_same_file_twice_stores_it_once(demo_logs, tmp_path):
    req, _, expected = demo_logs
    path = tmp_path / "twice.duckdb"
    with _store.connect(path) as con:
        ingest.ingest(con, requests=[req])
        copy = tmp_path / "copy.jsonl"
        copy.write_bytes(req.read_bytes())
        second = ingest.ingest(con, requests=[req, copy])
        n = con.execute("SELECT count(*) FROM requests").fetchone()[0]
        sources = con.execute("SELECT count(*) FROM sources").fetchone()[0]
    assert [f.status for f in second.files] == [ingest.ALREADY, ingest.ALREADY]
    assert (n, sources) == (expected[str(req)][1], 1)


def test_ingest_crash_between_commit_and_link_is_linked_on_rerun(demo_logs, tmp_path, monkeypatch):
    req, qry, _ = demo_logs
    monkeypatch.setenv("ATTRIB_SALT", SALT)
    crashed, whole = tmp_path / "crashed.duckdb", tmp_path / "whole.duckdb"
    with _store.connect(whole) as con:
        ingest.ingest(con, [req], [qry])

    def crash(con):
        raise KeyboardInterrupt  # the process dies after both files were committed

    with _store.connect(crashed) as con:
        monkeypatch.setattr(join, "link", crash)
        with pytest.raises(KeyboardInterrupt):
            ingest.ingest(con, [req], [qry])
        monkeypatch.undo()
        monkeypatch.setenv("ATTRIB_SALT", SALT)
        ingest.ingest(con, [req], [qry])  # both files are already stored: the re-run must link
    assert dump(crashed)["links"] == dump(whole)["links"]


def test_ingest_killed_at_random_points_then_rerun_equals_clean_run(
    demo_logs, clean_store, tmp_path, monkeypatch
):
    req, qry, expected = demo_logs
    monkeypatch.setenv("ATTRIB_SALT", SALT)  # a kill before the store existed: we create it
    clean, _ = clean_store
    want = dump(clean)
    rng = random.Random(20261201)
    store = tmp_path / "killed.duckdb"
    landed = dict.fromkeys(
        ["before any file", "between files", "after both (linking)", "finished first"], 0
    )
    compared = 0
    server = subprocess.Popen(
        [sys.executable, "-c", FORK_SERVER],
        env=ENV,
        stdin=subprocess.PIPE,
        stdout=subprocess.PIPE,
        text=True,
    )
    argv = ["ingest", "--store", str(store), "--requests", str(req), "--queries", str(qry)]
    # the run's time without interpreter start-up (the shorter of two: the first is colder)
    times = []
    for n in range(2):
        started = time.monotonic()
        timing = ["ingest", "--store", str(tmp_path / f"timing{n}.duckdb"), *argv[3:]]
        server.stdin.write("\t".join(timing) + "\n")
        server.stdin.flush()
        server.stdout.readline()
        assert server.stdout.readline().strip() == "0"
        times.append(time.monotonic() - started)
    seconds = min(times)
    for trial in range(KILL_TRIALS):
        server.stdin.write("\t".join(argv) + "\n")
        server.stdin.flush()
        pid = int(server.stdout.readline())
        delay = rng.uniform(0.0, 0.7 * seconds)
        if not select.select([server.stdout], [], [], delay)[0]:  # still running: kill it
            with contextlib.suppress(ProcessLookupError):  # it may finish between select and kill
                os.kill(pid, signal.SIGKILL)
        status = server.stdout.readline().strip()  # its wait status: "0" when it finished
        stored = check_consistent(store, expected)
        where = ["before any file", "between files", "after both (linking)"][stored]
        landed["finished first" if status == "0" else where] += 1
        if trial % 10 == 9:  # re-run to the end and compare every table with the clean run
            proc = run_ingest(store, req, qry)
            _, err = proc.communicate(timeout=300)
            assert proc.returncode == 0, err
            got = dump(store)
            for table, rows in want.items():
                assert got[table] == rows, f"trial {trial}: table {table} differs from clean run"
            compared += 1
        if stored == 2 or trial % 10 == 9:  # start again so that later kills land mid-file
            store.unlink()
            Path(f"{store}.wal").unlink(missing_ok=True)
    server.stdin.close()
    server.wait(timeout=60)
    print(
        f"\n{KILL_TRIALS} SIGKILL trials within {0.7 * seconds:.1f} s of the start (forked run "
        f"{seconds:.1f} s); kills landed: {landed}; {compared} re-runs equal to the clean run"
    )
    assert compared == KILL_TRIALS // 10
    assert landed["before any file"] + landed["between files"] > 0, landed


def test_ingest_store_held_by_another_process_stops_with_exit_4(demo_logs, tmp_path):
    req, qry, expected = demo_logs
    store = tmp_path / "held.duckdb"
    holder = subprocess.Popen(
        [
            sys.executable,
            "-c",
            "import sys, time; from attrib import store; c = store.connect(sys.argv[1]);"
            " print('ready', flush=True); time.sleep(120)",
            str(store),
        ],
        env=ENV,
        stdout=subprocess.PIPE,
        text=True,
    )
    try:
        assert holder.stdout.readline().strip() == "ready"
        proc = run_ingest(store, req, qry)
        out, err = proc.communicate(timeout=120)
    finally:
        holder.kill()
        holder.wait()
    assert proc.returncode == StoreLockedError.exit_code == 4, err
    lines = err.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith("Error: ") and str(store) in lines[0], err
    assert "another attrib process" in lines[0]
    assert check_consistent(store, expected) == 0  # the store opens, nothing half-written


def test_ingest_two_concurrent_ingests_one_waits_or_stops_store_stays_whole(demo_logs, tmp_path):
    req, qry, expected = demo_logs
    store = tmp_path / "race.duckdb"
    first = run_ingest(store, req, qry)
    deadline = time.monotonic() + 60
    while not store.exists() and time.monotonic() < deadline:
        time.sleep(0.02)
    second = run_ingest(store, req, qry)
    _, err2 = second.communicate(timeout=300)
    _, err1 = first.communicate(timeout=300)
    assert first.returncode == 0, err1
    # the second either found the store locked (exit 4, one line) or ran after the first finished
    assert second.returncode in (0, 4), err2
    if second.returncode == 4:
        assert err2.strip().startswith("Error: ") and len(err2.strip().splitlines()) == 1
    assert check_consistent(store, expected) == 2
