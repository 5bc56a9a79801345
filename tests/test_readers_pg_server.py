"""PostgreSQL readers against a real PostgreSQL 15 server running our own workload.

Each module fixture starts a throwaway server (tests/pgserver.py), runs the hut-booking workload
(tests/workload.py) over both protocols, stops the server and reads its stderr, csvlog and jsonlog files.
The workload's ground truth (statements sent per request) must equal what the readers find, exactly.
Without PostgreSQL binaries these tests skip, except on CI (CI=true) where they fail.
"""

from __future__ import annotations

import json
from collections import Counter

import pytest

from attrib.comments import request_keys
from attrib.readers import pg_csvlog, pg_jsonlog, pg_stderr
from attrib.records import ReadOptions, Reject, Statement
from attrib.sources import decode_lines
from tests.pgserver import PgServer, require_postgres
from tests.workload import Truth, run_workload, write_request_log

pytestmark = pytest.mark.server

READERS = {"stderr": pg_stderr, "csvlog": pg_csvlog, "jsonlog": pg_jsonlog}
STATEMENT_MODE_PREFIX = "%m %c %e [%p] %q%u@%d app=%a "


def _run(mode: str, prefix: str, tmp_path_factory, settings: dict | None = None) -> dict:
    require_postgres()
    with PgServer(mode=mode, log_line_prefix=prefix, settings=settings) as server:
        truth = run_workload(server.conninfo, protocol="extended", requests=18, loop=7)
        simple = run_workload(
            server.conninfo, protocol="simple", requests=12, first=101, do_setup=False
        )
        batched = run_workload(
            server.conninfo,
            protocol="extended",
            requests=6,
            first=201,
            do_setup=False,
            batched=True,
        )
        logs = server.stop()
        result: dict = {"truth": _merge(truth, simple, batched), "records": {}, "lines": {}}
        for fmt, reader in READERS.items():
            path = getattr(logs, fmt)
            with open(path, "rb") as fh:
                lines = list(enumerate(decode_lines(fh), 1))
            result["lines"][fmt] = len(lines)
            options = ReadOptions(log_line_prefix=prefix)
            result["records"][fmt] = list(reader.read(iter(lines), options))
        result["request_log"] = write_request_log(
            result["truth"], tmp_path_factory.mktemp("requests") / "requests.jsonl"
        )
    return result


def _merge(*truths: Truth) -> Truth:
    merged = Truth()
    for truth in truths:
        merged.requests += truth.requests
        merged.control.update(truth.control)
    return merged


@pytest.fixture(scope="module")
def duration_run(tmp_path_factory):
    """log_min_duration_statement = 0, Debian's prefix."""
    return _run("duration", "%m [%p] %q%u@%d ", tmp_path_factory)


@pytest.fixture(scope="module")
def statement_run(tmp_path_factory):
    """log_statement = all + log_duration = on, a prefix with %c, %e and %a."""
    return _run("statement", STATEMENT_MODE_PREFIX, tmp_path_factory)


@pytest.fixture(scope="module")
def combined_run(tmp_path_factory):
    """log_min_duration_statement = 0 together with log_statement = all (durations lose their text)."""
    return _run("duration", "%m [%p] %q%u@%d ", tmp_path_factory, {"log_statement": "'all'"})


def _per_request(records: list) -> Counter:
    counts: Counter = Counter()
    for record in records:
        if isinstance(record, Statement):
            rid, _ = request_keys(record.sql)
            if rid:
                counts[rid] += 1
    return counts


@pytest.mark.parametrize("fmt", READERS)
@pytest.mark.parametrize("run", ["duration_run", "statement_run", "combined_run"])
def test_server_logs_statement_counts_equal_workload_truth_for_every_request(fmt, run, request):
    # source: real PostgreSQL 15 server output
    result = request.getfixturevalue(run)
    truth = result["truth"]
    assert len(truth.counts) == 36
    assert dict(_per_request(result["records"][fmt])) == truth.counts
    bunks = [r for r in truth.requests if r.route == "/huts/{id}/bunks"]
    # the N+1 loop: 1 + 7 bunks per request; the batched run: 1 + 1
    assert sorted({r.statements for r in bunks}) == [2, 8]


@pytest.mark.parametrize("fmt", READERS)
@pytest.mark.parametrize("run", ["duration_run", "statement_run", "combined_run"])
def test_server_logs_every_line_accounted_and_nothing_rejected(fmt, run, request):
    # source: real PostgreSQL 15 server output
    result = request.getfixturevalue(run)
    records = result["records"][fmt]
    assert sum(r.lines for r in records) == result["lines"][fmt]
    assert [r for r in records if isinstance(r, Reject)] == []


@pytest.mark.parametrize("fmt", READERS)
@pytest.mark.parametrize("run", ["duration_run", "statement_run"])
def test_server_logs_untagged_statements_are_the_transaction_control_sent(fmt, run, request):
    # source: real PostgreSQL 15 server output; psycopg sends DEALLOCATE ALL after a rollback when
    # it holds prepared statements (the extended run's N+1 loops prepare them)
    result = request.getfixturevalue(run)
    untagged = Counter(
        r.sql
        for r in result["records"][fmt]
        if isinstance(r, Statement) and request_keys(r.sql)[0] is None
    )
    assert untagged["BEGIN"] == result["truth"].control["BEGIN"] > 0
    assert untagged["ROLLBACK"] == result["truth"].control["ROLLBACK"] > 0
    assert untagged["DEALLOCATE ALL"] >= 1


@pytest.mark.parametrize("fmt", READERS)
@pytest.mark.parametrize("run", ["duration_run", "statement_run"])
def test_server_logs_failed_insert_is_a_statement_with_its_sqlstate(fmt, run, request):
    # source: real PostgreSQL 15 server output; 23505 = unique_violation (PostgreSQL docs, Appendix A)
    result = request.getfixturevalue(run)
    failed = {
        request_keys(r.sql)[0]: r
        for r in result["records"][fmt]
        if isinstance(r, Statement) and r.error
    }
    expected = {r.request_id for r in result["truth"].requests if r.failed}
    assert set(failed) == expected and len(expected) == 3  # one per workload run
    plain_stderr = fmt == "stderr" and run == "duration_run"  # Debian's prefix has no %e
    assert {s.error for s in failed.values()} == {"ERROR" if plain_stderr else "23505"}
    assert all(s.duration_ms is None for s in failed.values())


@pytest.mark.parametrize("run", ["duration_run", "statement_run"])
def test_server_logs_three_formats_agree_on_statements(run, request):
    # source: real PostgreSQL 15 server output, one run written in three formats
    result = request.getfixturevalue(run)
    shapes = [
        [
            (r.sql, r.duration_ms, r.params, r.session, r.user, r.database)
            for r in result["records"][fmt]
            if isinstance(r, Statement)
        ]
        for fmt in ("csvlog", "jsonlog")
    ]
    assert shapes[0] == shapes[1]
    stderr = [
        (r.sql, r.duration_ms, r.params)
        for r in result["records"]["stderr"]
        if isinstance(r, Statement)
    ]
    assert stderr == [shape[:3] for shape in shapes[0]]


def test_server_extended_statements_carry_parameters_and_positive_durations(duration_run):
    # source: real PostgreSQL 15 server output
    loop = [
        r
        for r in duration_run["records"]["stderr"]
        if isinstance(r, Statement) and "bookings WHERE bunk_id = $1" in r.sql
    ]
    assert len(loop) == 3 * 7  # three /huts/{id}/bunks requests in the extended run, 7 bunks each
    assert all(r.params and len(r.params) == 1 for r in loop)
    assert all(r.duration_ms and r.duration_ms > 0 for r in loop)


def test_server_request_log_has_one_line_per_request(duration_run):
    path = duration_run["request_log"]
    rows = [json.loads(line) for line in path.read_text().splitlines()]
    truth = duration_run["truth"]
    assert [row["request_id"] for row in rows] == [r.request_id for r in truth.requests]
    assert {row["route"] for row in rows} == set(truth.routes.values())
    assert all(row["elapsed_ms"] >= 0 and row["timestamp"].endswith("Z") for row in rows)
