"""PostgreSQL statement-log readers (stderr, csvlog, jsonlog) on fixture files and inline lines.

Fixtures live in fixtures/logs/pg-*/ (README.md there says how each was made): 0xx files are real
PostgreSQL 15 server output of our own workload, with the workload's ground truth beside them; 9xx files
are hostile inputs derived from them. Files are read the way ingest reads them (attrib.sources).
Inline log lines below are copied from those real files unless a comment says they were constructed.
"""

from __future__ import annotations

import io
import json
from collections import Counter
from datetime import UTC, datetime
from pathlib import Path
from zoneinfo import ZoneInfo

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from attrib.comments import request_keys
from attrib.errors import FormatError, MappingError, TimezoneError
from attrib.readers import detect, pg_common, pg_csvlog, pg_jsonlog, pg_stderr
from attrib.records import ReadOptions, Reject, Skip, Statement
from attrib.sources import decode_lines

LOGS = Path(__file__).resolve().parent.parent / "fixtures" / "logs"
READERS = {"pg-stderr": pg_stderr, "pg-csvlog": pg_csvlog, "pg-jsonlog": pg_jsonlog}
SUFFIX = {"pg-stderr": ".log", "pg-csvlog": ".csv", "pg-jsonlog": ".json"}
VIENNA_PREFIX = "%t [%p]: [%l-1] user=%u,db=%d,app=%a,client=%h "
EVENTS_PREFIX = "%m %c %e [%p] %q%u@%d "
PREFIXES = {"003_custom_prefix_vienna": VIENNA_PREFIX, "004_events": EVENTS_PREFIX}
WORKLOADS = ("001_workload_duration", "002_workload_log_statement", "003_custom_prefix_vienna")
ALL_FIXTURES = sorted(
    (fmt, path.name)
    for fmt in READERS
    for path in (LOGS / fmt).iterdir()
    if path.suffix == SUFFIX[fmt] and not path.name.endswith(".truth.json")
)


def options_for(fmt: str, stem: str, **kw) -> ReadOptions:
    if fmt == "pg-stderr" and stem in PREFIXES:
        kw.setdefault("log_line_prefix", PREFIXES[stem])
    return ReadOptions(**kw)


def file_lines(path: Path) -> list[tuple[int, str]]:
    with open(path, "rb") as fh:
        return list(enumerate(decode_lines(fh), 1))


def read_fixture(fmt: str, name: str, **kw) -> list:
    path = LOGS / fmt / name
    stem = path.name.split(".")[0]
    return list(READERS[fmt].read(iter(file_lines(path)), options_for(fmt, stem, **kw)))


def read_text(text: str, fmt: str = "pg-stderr", **kw) -> list:
    lines = list(enumerate(decode_lines(io.BytesIO(text.encode())), 1))
    return list(READERS[fmt].read(iter(lines), ReadOptions(**kw)))


def statements(records: list) -> list[Statement]:
    return [r for r in records if isinstance(r, Statement)]


def per_request(records: list) -> Counter:
    counts: Counter = Counter()
    for s in statements(records):
        rid, _ = request_keys(s.sql)
        if rid:
            counts[rid] += 1
    return counts


def us(text: str) -> int:
    """ISO time with offset -> epoch microseconds (the expected values below)."""
    stamp = datetime.fromisoformat(text)
    return int(stamp.timestamp()) * 1_000_000 + stamp.microsecond


# -- every fixture -----------------------------------------------------------------------------------


@pytest.mark.parametrize(("fmt", "name"), ALL_FIXTURES)
def test_read_every_fixture_accounts_for_every_line_in_file_order(fmt, name):
    path = LOGS / fmt / name
    records = read_fixture(fmt, name)
    assert sum(r.lines for r in records) == len(file_lines(path))
    starts = [r.line for r in records]
    assert starts == sorted(starts)
    assert all(r.lines >= 1 for r in records)


@pytest.mark.parametrize("fmt", READERS)
@pytest.mark.parametrize("stem", WORKLOADS)
def test_read_workload_fixture_counts_match_ground_truth_per_request(fmt, stem):
    # source: real PostgreSQL 15 server output; truth reported by tests/workload.py during that run
    truth = json.loads((LOGS / fmt / f"{stem}.truth.json").read_text())
    records = read_fixture(fmt, stem + SUFFIX[fmt])
    assert dict(per_request(records)) == truth["counts"]
    untagged = Counter(s.sql for s in statements(records) if request_keys(s.sql)[0] is None)
    assert untagged["BEGIN"] == truth["control"].get("BEGIN", 0)
    assert untagged["ROLLBACK"] == truth["control"].get("ROLLBACK", 0)
    assert not [r for r in records if isinstance(r, Reject)]


@pytest.mark.parametrize("stem", [*WORKLOADS, "004_events"])
def test_read_three_formats_of_one_server_agree_statement_by_statement(stem):
    # source: real PostgreSQL 15 server output, one run written as stderr, csvlog and jsonlog
    seen = []
    for fmt in READERS:
        found = statements(read_fixture(fmt, stem + SUFFIX[fmt]))
        seen.append(
            [(s.sql, s.duration_ms, s.params, s.error is None, s.user, s.database) for s in found]
        )
    assert seen[0] == seen[1] == seen[2]
    assert len(seen[0]) > 20


def test_read_stderr_workload_sums_parse_bind_execute_and_reads_parameters():
    # source: real PostgreSQL 15 server output (001_workload_duration.log, lines 35-39)
    text = (
        "2026-12-01 23:11:43.371 UTC [21120] attrib@huts LOG:  duration: 0.301 ms  parse <unnamed>: "
        "SELECT id, name, altitude_m FROM huts ORDER BY name LIMIT $1 "
        "/*request_id='req-0001',route='%2Fhuts'*/\n"
        "2026-12-01 23:11:43.375 UTC [21120] attrib@huts LOG:  duration: 0.234 ms  bind <unnamed>: "
        "SELECT id, name, altitude_m FROM huts ORDER BY name LIMIT $1 "
        "/*request_id='req-0001',route='%2Fhuts'*/\n"
        "2026-12-01 23:11:43.375 UTC [21120] attrib@huts DETAIL:  parameters: $1 = '20'\n"
        "2026-12-01 23:11:43.376 UTC [21120] attrib@huts LOG:  duration: 0.030 ms  execute <unnamed>: "
        "SELECT id, name, altitude_m FROM huts ORDER BY name LIMIT $1 "
        "/*request_id='req-0001',route='%2Fhuts'*/\n"
        "2026-12-01 23:11:43.376 UTC [21120] attrib@huts DETAIL:  parameters: $1 = '20'\n"
    )
    records = read_text(text)
    assert len(records) == 1
    (s,) = records
    assert s.duration_ms == pytest.approx(0.301 + 0.234 + 0.030)
    assert s.start_us == us("2026-12-01T23:11:43.371+00:00") - 301
    assert s.params == ("20",)
    assert (s.line, s.lines, s.session, s.user, s.database) == (1, 5, "21120", "attrib", "huts")
    assert s.rows is None and s.error is None


def test_read_stderr_named_statement_reused_after_deallocate_all_pairs_by_session_and_text():
    # constructed from real line shapes: a driver that restarts names at S_1 after DEALLOCATE ALL,
    # while another connection uses the same name for a different statement between the steps
    p = "2026-12-01 23:11:43.{ms:03d} UTC [{pid}] attrib@huts "
    rows = [
        (1, 100, "LOG:  duration: 0.100 ms  parse S_1: SELECT 1 FROM huts WHERE id = $1"),
        (2, 200, "LOG:  duration: 0.500 ms  parse S_1: SELECT 2 FROM bunks WHERE id = $1"),
        (3, 100, "LOG:  duration: 0.020 ms  bind S_1: SELECT 1 FROM huts WHERE id = $1"),
        (4, 200, "LOG:  duration: 0.050 ms  bind S_1: SELECT 2 FROM bunks WHERE id = $1"),
        (5, 100, "LOG:  duration: 0.003 ms  execute S_1: SELECT 1 FROM huts WHERE id = $1"),
        (6, 100, "LOG:  duration: 0.010 ms  statement: ROLLBACK"),
        (7, 100, "LOG:  duration: 0.010 ms  statement: DEALLOCATE ALL"),
        (8, 100, "LOG:  duration: 0.200 ms  parse S_1: SELECT 3 FROM trails WHERE id = $1"),
        (9, 200, "LOG:  duration: 0.005 ms  execute S_1: SELECT 2 FROM bunks WHERE id = $1"),
        (10, 100, "LOG:  duration: 0.040 ms  bind S_1: SELECT 3 FROM trails WHERE id = $1"),
        (11, 100, "LOG:  duration: 0.004 ms  execute S_1: SELECT 3 FROM trails WHERE id = $1"),
        (12, 100, "LOG:  duration: 0.030 ms  bind S_1: SELECT 3 FROM trails WHERE id = $1"),
        (13, 100, "LOG:  duration: 0.002 ms  execute S_1: SELECT 3 FROM trails WHERE id = $1"),
    ]
    text = "".join(p.format(ms=ms, pid=pid) + rest + "\n" for ms, pid, rest in rows)
    records = read_text(text)
    assert sum(r.lines for r in records) == 13
    got = [(s.line, s.sql.split(" FROM")[0], round(s.duration_ms, 3), s.lines) for s in records]
    assert got == [
        (1, "SELECT 1", 0.123, 3),
        (2, "SELECT 2", 0.555, 3),
        (6, "ROLLBACK", 0.01, 1),
        (7, "DEALLOCATE ALL", 0.01, 1),
        (8, "SELECT 3", 0.244, 3),
        (12, "SELECT 3", 0.032, 2),
    ]


def test_read_stderr_log_statement_mode_adds_bare_durations_before_execute():
    # source: real PostgreSQL 15 server output (002_workload_log_statement.log, lines 56-60)
    text = (
        "2026-12-01 23:11:51.203 UTC [12059] attrib@huts LOG:  duration: 0.271 ms\n"
        "2026-12-01 23:11:51.203 UTC [12059] attrib@huts LOG:  duration: 0.158 ms\n"
        "2026-12-01 23:11:51.203 UTC [12059] attrib@huts LOG:  execute <unnamed>: SELECT id, name, "
        "altitude_m FROM huts ORDER BY name LIMIT $1 /*request_id='req-0001',route='%2Fhuts'*/\n"
        "2026-12-01 23:11:51.203 UTC [12059] attrib@huts DETAIL:  parameters: $1 = '20'\n"
        "2026-12-01 23:11:51.204 UTC [12060] attrib@huts LOG:  duration: 0.844 ms\n"
        "2026-12-01 23:11:51.204 UTC [12059] attrib@huts LOG:  duration: 0.072 ms\n"
    )
    records = read_text(text)
    assert sum(r.lines for r in records) == 6
    first = records[0]
    assert isinstance(first, Statement)
    assert first.duration_ms == pytest.approx(0.271 + 0.158 + 0.072)
    assert first.start_us == us("2026-12-01T23:11:51.203+00:00") - 271
    assert first.params == ("20",) and first.lines == 5
    # the other session's bare duration never met its statement: protocol steps, skipped
    assert isinstance(records[1], Skip) and records[1].category == "protocol"


def test_read_stderr_log_statement_without_duration_closes_at_disconnection():
    # constructed from real line shapes: log_statement = all, log_duration = off
    text = (
        "2026-12-01 23:11:51.100 UTC [7] attrib@huts LOG:  statement: SELECT 1\n"
        "2026-12-01 23:11:51.200 UTC [7] attrib@huts LOG:  statement: SELECT 2\n"
        "2026-12-01 23:11:51.300 UTC [7] attrib@huts LOG:  disconnection: session time: 0:00:00.3\n"
    )
    records = read_text(text)
    assert [(type(r).__name__, r.line) for r in records] == [
        ("Statement", 1),
        ("Statement", 2),
        ("Skip", 3),
    ]
    assert records[0].duration_ms is None and records[0].start_us == us(
        "2026-12-01T23:11:51.100+00:00"
    )


def test_read_stderr_failed_extended_statement_is_one_statement_with_error():
    # source: real PostgreSQL 15 server output (an earlier run of the same workload)
    text = (
        "2026-12-01 23:04:46.535 UTC [10509] attrib@huts LOG:  duration: 0.042 ms  parse <unnamed>: "
        "insert into t values ($1, $2)\n"
        "2026-12-01 23:04:46.535 UTC [10509] attrib@huts LOG:  duration: 0.023 ms  bind <unnamed>: "
        "insert into t values ($1, $2)\n"
        "2026-12-01 23:04:46.535 UTC [10509] attrib@huts DETAIL:  parameters: $1 = '1', $2 = 'dup'\n"
        "2026-12-01 23:04:46.536 UTC [10509] attrib@huts ERROR:  duplicate key value violates unique "
        'constraint "t_pkey"\n'
        "2026-12-01 23:04:46.536 UTC [10509] attrib@huts DETAIL:  Key (id)=(1) already exists.\n"
        "2026-12-01 23:04:46.536 UTC [10509] attrib@huts STATEMENT:  insert into t values ($1, $2)\n"
    )
    (s,) = read_text(text)
    assert (s.error, s.duration_ms, s.params, s.lines) == ("ERROR", None, ("1", "dup"), 6)
    assert s.start_us == us("2026-12-01T23:04:46.535+00:00") - 42


def test_read_stderr_log_statement_error_attaches_to_the_logged_statement():
    # source: real PostgreSQL 15 server output (002_workload_log_statement.log, failing insert)
    records = read_fixture("pg-stderr", "002_workload_log_statement.log")
    failed = [s for s in statements(records) if s.error]
    assert [request_keys(s.sql)[0] for s in failed] == ["req-0004", "req-0104"]
    assert all(s.error == "ERROR" and s.duration_ms is None for s in failed)
    assert failed[0].params is not None and failed[1].params is None  # extended vs simple protocol


@pytest.mark.parametrize("fmt", READERS)
def test_read_events_fixture_counts_executions_not_error_lock_or_tempfile_lines(fmt):
    # source: real PostgreSQL 15 server output (004_events)
    records = read_fixture(fmt, "004_events" + SUFFIX[fmt])
    found = statements(records)
    by_request = per_request(records)
    assert by_request == {f"req-e0{i}": 1 for i in range(1, 8)}
    errors = {request_keys(s.sql)[0]: s.error for s in found if s.error}
    assert errors == {"req-e02": "42601", "req-e03": "57014"}
    update = next(s for s in found if request_keys(s.sql)[0] == "req-e05")
    assert update.duration_ms == pytest.approx(396.644)
    skipped = Counter(r.category for r in records if isinstance(r, Skip))
    assert skipped["tempfile"] >= 2 and skipped["lock"] >= 2 and skipped["auto_explain"] >= 1
    multi = next(s for s in found if request_keys(s.sql)[0] == "req-e01")
    assert multi.sql.startswith("SELECT name\n  FROM huts\n WHERE id = 2")


def test_read_stderr_multi_line_statement_joins_continuations_and_counts_lines():
    # source: real PostgreSQL 15 server output (004_events.log)
    records = read_fixture("pg-stderr", "004_events.log")
    multi = next(s for s in statements(records) if "req-e01" in s.sql)
    assert multi.lines == 3
    assert multi.sql.count("\n") == 2
    assert multi.session == "6b0f5444.5450"  # %c wins over %p


def test_read_stderr_interleaved_backends_are_paired_by_process():
    # source: real PostgreSQL 15 server output (001_workload_duration.log): two runs of two connections
    # each, whose lines alternate; the N+1 loop of /huts/{id}/bunks runs on both
    records = read_fixture("pg-stderr", "001_workload_duration.log")
    truth = json.loads((LOGS / "pg-stderr" / "001_workload_duration.truth.json").read_text())
    sessions = {s.session for s in statements(records) if request_keys(s.sql)[0]}
    assert len(sessions) == 4
    loops = [rid for rid, route in truth["routes"].items() if route == "/huts/{id}/bunks"]
    expected = sum(truth["counts"][rid] - 1 for rid in loops)
    assert len([s for s in statements(records) if "bookings WHERE bunk_id" in s.sql]) == expected
    assert expected >= 12


def test_read_stderr_custom_prefix_converts_cet_and_maps_application_name_on_request():
    # source: real PostgreSQL 15 server output, log_timezone = 'Europe/Vienna' (CET = UTC+1 in December)
    plain = read_fixture("pg-stderr", "003_custom_prefix_vienna.log")
    mapped = read_fixture(
        "pg-stderr",
        "003_custom_prefix_vienna.log",
        statement_fields={"request_id": "application_name"},
    )
    first = statements(plain)[0]
    # "2026-12-02 00:11:57 CET ... duration: 20.382 ms" -> 23:11:57 UTC minus 20.382 ms
    assert first.start_us == us("2026-12-01T23:11:57+00:00") - 20382
    assert all(s.request_id is None for s in statements(plain))
    assert {s.request_id for s in statements(mapped)} == {"hut-web"}


@pytest.mark.parametrize("fmt", ["pg-csvlog", "pg-jsonlog"])
def test_read_structured_custom_run_reads_cet_times_with_milliseconds(fmt):
    # source: real PostgreSQL 15 server output, same run as the stderr file above
    found = statements(read_fixture(fmt, "003_custom_prefix_vienna" + SUFFIX[fmt]))
    stderr_found = statements(read_fixture("pg-stderr", "003_custom_prefix_vienna.log"))
    for a, b in zip(found, stderr_found, strict=True):
        # %t has whole seconds; csvlog/jsonlog carry milliseconds of the same moment
        assert 0 <= a.start_us - b.start_us < 1_000_000
    mapped = read_fixture(
        fmt,
        "003_custom_prefix_vienna" + SUFFIX[fmt],
        statement_fields={"request_id": "application_name"},
    )
    assert {s.request_id for s in statements(mapped)} == {"hut-web"}


def test_read_stderr_sqlstate_escape_gives_error_codes_and_none_without_it():
    records = read_fixture("pg-stderr", "001_workload_duration.log")
    assert {s.error for s in statements(records) if s.error} == {"ERROR"}
    csv_records = read_fixture("pg-csvlog", "001_workload_duration.csv")
    assert {s.error for s in statements(csv_records) if s.error} == {"23505"}


# -- hostile input ---------------------------------------------------------------------------------


def test_read_stderr_truncated_last_line_does_not_crash():
    records = read_fixture("pg-stderr", "901_truncated_last_line.log")
    last = records[-1]
    assert last.line + last.lines - 1 <= 31
    assert sum(r.lines for r in records) == 31


def test_read_stderr_cut_inside_prefix_is_rejected():
    text = "2026-12-01 23:11:43.214 UTC [21120] attrib@huts LOG:  duration: 1.000 ms  statement: SELECT 1\n2026-12-01 23:1"
    records = read_text(text)
    assert [type(r).__name__ for r in records] == ["Statement", "Reject"]


def test_read_stderr_invalid_utf8_is_replaced_and_counted():
    records = read_fixture("pg-stderr", "902_invalid_utf8.log")
    odd = [s for s in statements(records) if "\ufffd" in s.sql]
    assert len(odd) == 2
    assert any(s.user == "attr\ufffdb" for s in statements(records))


def test_read_stderr_garbage_lines_are_rejected_with_reasons():
    records = read_fixture("pg-stderr", "903_garbage_lines.log")
    reasons = [r.reason for r in records if isinstance(r, Reject)]
    assert reasons == [
        "continuation line without a message before it",
        "empty line",
        "line does not match log_line_prefix",
        "incomplete duration message",
        "unreadable timestamp",
        "unrecognised duration message",
    ]
    skipped = {r.category for r in records if isinstance(r, Skip)}
    assert {"detail", "fetch", "protocol", "server"} <= skipped
    assert len(statements(records)) == 1


@pytest.mark.parametrize("multi_line", [False, True])
def test_read_stderr_five_megabyte_statement_is_read_whole(multi_line):
    values = ",".join(f"({i}, 'bunk {i}')" for i in range(300_000))
    assert len(values) > 5_000_000
    sql = "INSERT INTO bunks (id, label) VALUES " + values
    if multi_line:
        sql = sql.replace("),(", "),\n(")
    body = sql.replace("\n", "\n\t")
    text = f"2026-12-01 23:11:43.214 UTC [21120] attrib@huts LOG:  duration: 812.500 ms  statement: {body}\n"
    (s,) = read_text(text)
    assert s.sql == sql
    assert s.lines == sql.count("\n") + 1


def test_read_csvlog_truncated_record_is_rejected_with_its_lines():
    records = read_fixture("pg-csvlog", "901_truncated_record.csv")
    last = records[-1]
    assert isinstance(last, Reject) and last.lines == 2
    assert "columns" in last.reason


def test_read_csvlog_bad_rows_are_rejected_with_reasons():
    records = read_fixture("pg-csvlog", "902_bad_rows.csv")
    reasons = [r.reason for r in records if isinstance(r, Reject)]
    assert reasons == [
        "empty line",
        "expected 23, 24 or 26 columns, got 14",
        "unknown severity",
        "unreadable timestamp",
        "expected 23, 24 or 26 columns, got 4",
    ]


@pytest.mark.parametrize("name", ["005_pg13_24_columns.csv", "006_pg12_23_columns.csv"])
def test_read_csvlog_older_column_sets_read_like_the_26_column_file(name):
    older = statements(read_fixture("pg-csvlog", name))
    current = statements(read_fixture("pg-csvlog", "001_workload_duration.csv"))
    assert older == current


def test_read_csvlog_unknown_request_field_raises_mapping_error():
    with pytest.raises(MappingError):
        read_fixture("pg-csvlog", "001_workload_duration.csv", statement_fields={"request_id": "x"})


def test_read_jsonlog_truncated_and_bad_lines_are_rejected():
    truncated = read_fixture("pg-jsonlog", "901_truncated_last_line.json")
    assert isinstance(truncated[-1], Reject) and truncated[-1].line == 21
    bad = read_fixture("pg-jsonlog", "902_bad_lines.json")
    assert [r.line for r in bad if isinstance(r, Reject)] == [2, 3, 4, 5, 6]


# -- prefixes, times, sniffing -----------------------------------------------------------------------


@pytest.mark.parametrize(
    ("prefix", "line", "expected"),
    [
        (
            "%m [%p] %q%u@%d ",
            "2024-03-05 14:02:11.481 UTC [41877] shop app@bakery LOG:  statement: SELECT 1",
            {"user": "shop app", "database": "bakery", "pid": "41877"},
        ),
        (
            "%t [%p]: [%l-1] user=%u,db=%d,app=%a,client=%h ",
            "2024-03-05 14:02:11 CET [41877]: [12-1] user=shop,db=bakery,app=web 1,client=192.0.2.10 "
            "LOG:  statement: SELECT 1",
            {"user": "shop", "database": "bakery", "application": "web 1"},
        ),
        (
            "%m %-10u|%10d|%% %e %c ",
            "2024-03-05 14:02:11.481 UTC shop      |    bakery|% 23505 65e7254f.a395 ERROR:  boom",
            {"user": "shop", "database": "bakery", "sqlstate": "23505", "session": "65e7254f.a395"},
        ),
        (
            "%n [%p] %Q %v %x %b %Z ",
            "1709647331.481 [41877] -6025403713526390711 7/2210 0 client backend  LOG:  duration: 1 ms",
            {"epoch": "1709647331.481", "pid": "41877"},
        ),
    ],
)
def test_compile_prefix_reads_escapes_padding_and_unknown_letters(prefix, line, expected):
    match = pg_stderr.compile_prefix(prefix).match(line)
    assert match is not None
    for group, value in expected.items():
        assert match.group(group).strip() == value


def test_compile_prefix_q_makes_session_part_optional():
    rx = pg_stderr.compile_prefix("%m [%p] %q%u@%d ")
    match = rx.match("2024-03-05 14:02:11.481 UTC [41870] LOG:  checkpoint starting: time")
    assert match.group("user") is None and match.group("severity") == "LOG"


def test_read_stderr_prefix_without_time_raises_format_error():
    with pytest.raises(FormatError, match="no time escape"):
        read_text("[1] LOG:  statement: SELECT 1\n", log_line_prefix="[%p] ")


def test_read_stderr_epoch_prefix_reads_n_escape():
    (s,) = read_text(
        "1709647331.481 [7] LOG:  duration: 0.481 ms  statement: SELECT 1\n",
        log_line_prefix="%n [%p] ",
    )
    assert s.start_us == 1709647331481000 - 481


@pytest.mark.parametrize(
    ("stamp", "tz", "expected"),
    [
        ("2024-03-05 14:02:11.481 UTC", None, "2024-03-05T14:02:11.481+00:00"),
        ("2024-03-05 14:02:11.481 CET", None, "2024-03-05T14:02:11.481+01:00"),
        ("2024-07-05 14:02:11.481 CEST", None, "2024-07-05T14:02:11.481+02:00"),
        ("2024-03-05 14:02:11.481 EST", None, "2024-03-05T14:02:11.481-05:00"),
        ("2024-03-05 14:02:11 -03", None, "2024-03-05T14:02:11-03:00"),
        ("2024-03-05 14:02:11 +0530", None, "2024-03-05T14:02:11+05:30"),
        ("2024-03-05 14:02:11 CST", "America/Chicago", "2024-03-05T14:02:11-06:00"),
        ("2024-03-05 14:02:11 CST", "Asia/Shanghai", "2024-03-05T14:02:11+08:00"),
        ("2024-07-05 14:02:11 BST", "Europe/London", "2024-07-05T14:02:11+01:00"),
        # the repeated hour at the end of summer time: the abbreviation picks the fold
        ("2024-10-27 01:30:00 GMT", "Europe/London", "2024-10-27T01:30:00+00:00"),
        ("2024-10-27 01:30:00 BST", "Europe/London", "2024-10-27T01:30:00+01:00"),
        ("2024-03-05 14:02:11", "Europe/Vienna", "2024-03-05T14:02:11+01:00"),
    ],
)
def test_time_parser_converts_zone_abbreviations_and_offsets(stamp, tz, expected):
    parse = pg_common.time_parser(ZoneInfo(tz) if tz else None)
    assert parse(stamp) == us(expected)


@pytest.mark.parametrize("stamp", ["2024-03-05 14:02:11 CST", "2024-03-05 14:02:11.481"])
def test_time_parser_ambiguous_or_missing_zone_without_tz_raises(stamp):
    with pytest.raises(TimezoneError, match="--tz"):
        pg_common.time_parser(None)(stamp)


def test_read_stderr_ambiguous_zone_without_tz_raises_timezone_error():
    with pytest.raises(TimezoneError):
        read_text("2024-03-05 14:02:11.481 IST [7] LOG:  duration: 1.000 ms  statement: SELECT 1\n")


def test_parse_params_handles_quotes_null_and_capitalised_label():
    assert pg_common.parse_params("Parameters: $1 = 'a, $2 = ''b''', $2 = NULL") == (
        "a, $2 = 'b'",
        "NULL",
    )
    assert pg_common.parse_params("Key (id)=(1) already exists.") is None


@pytest.mark.parametrize("fmt", READERS)
def test_sniff_accepts_its_own_format_and_refuses_the_others(fmt):
    for other in READERS:
        for stem in ("001_workload_duration", "004_events"):
            head = [line for _, line in file_lines(LOGS / other / (stem + SUFFIX[other]))[:20]]
            assert READERS[fmt].sniff(head) is (fmt == other), (fmt, other, stem)


@pytest.mark.parametrize(
    "path", ["mysql-slow/001_mariadb_hut_booking.log", "requests-jsonl/001_basic.log"]
)
def test_sniff_refuses_other_projects_formats(path):
    head = [line for _, line in file_lines(LOGS / path)[:20]]
    assert not any(reader.sniff(head) for reader in READERS.values())


def test_detect_picks_each_postgres_format():
    for fmt in READERS:
        head = [
            line for _, line in file_lines(LOGS / fmt / ("001_workload_duration" + SUFFIX[fmt]))
        ]
        assert detect(head[:20], "statements", "x").NAME == fmt


def test_assembler_forces_out_a_statement_that_holds_too_many_lines(monkeypatch):
    monkeypatch.setattr(pg_common.Assembler, "MAX_HELD", 3)
    lines = [
        "2026-12-01 23:11:43.100 UTC [1] a@b LOG:  duration: 0.1 ms  parse <unnamed>: SELECT 1"
    ]
    lines += [
        f"2026-12-01 23:11:43.2{i:02d} UTC [2] a@b LOG:  connection received" for i in range(6)
    ]
    records = read_text("\n".join(lines) + "\n")
    assert sum(r.lines for r in records) == 7
    assert records[0].category == "protocol"
    assert [r.line for r in records] == sorted(r.line for r in records)


def test_read_stderr_returns_utc_times_for_the_fixture_start():
    (first,) = statements(read_fixture("pg-stderr", "001_workload_duration.log"))[:1]
    # "2026-12-01 23:11:43.214 UTC ... duration: 15.899 ms"
    assert (
        first.start_us
        == int(datetime(2026, 12, 1, 23, 11, 43, 214000, UTC).timestamp() * 1e6) - 15899
    )


# -- the throwaway server helper ---------------------------------------------------------------------


@pytest.mark.parametrize(("ci", "outcome"), [("true", "failed"), ("", "skipped")])
def test_require_postgres_without_binaries_fails_on_ci_and_skips_elsewhere(
    monkeypatch, tmp_path, ci, outcome
):
    from tests import pgserver

    monkeypatch.setattr(pgserver, "BIN_DIR", tmp_path)
    monkeypatch.setenv("CI", ci)
    with pytest.raises(BaseException) as caught:
        pgserver.require_postgres()
    assert type(caught.value).__name__ == {"failed": "Failed", "skipped": "Skipped"}[outcome]
    assert str(tmp_path) in str(caught.value)


# -- pairing under any interleaving (property test; the lines are constructed in the real shapes) ----

_EXECUTION = st.tuples(
    st.sampled_from(["SELECT 1 FROM huts WHERE id = $1", "SELECT 2 FROM bunks WHERE id = $1"]),
    st.booleans(),  # named prepared statement already parsed: bind + execute only
    st.lists(st.integers(1, 999), min_size=3, max_size=3),  # step durations in microseconds
    st.booleans(),  # a parameters DETAIL after bind and execute
)


@settings(max_examples=60, deadline=None)
@given(
    sessions=st.lists(st.lists(_EXECUTION, min_size=1, max_size=4), min_size=1, max_size=4),
    order=st.randoms(use_true_random=False),
)
def test_read_stderr_pairs_protocol_steps_under_any_interleaving(sessions, order):
    streams = []
    expected = {}
    for pid, executions in enumerate(sessions, start=100):
        lines, want = [], []
        for sql, named, micros, detail in executions:
            steps = ("bind", "execute") if named else ("parse", "bind", "execute")
            for step, us_ in zip(steps, micros, strict=False):
                lines.append(f"LOG:  duration: {us_ / 1000:.3f} ms  {step} S_1: {sql}")
                if detail and step != "parse":
                    lines.append("DETAIL:  parameters: $1 = '7'")
            want.append((sql, sum(micros[: len(steps)]), ("7",) if detail else None))
        streams.append([(pid, line) for line in lines])
        expected[str(pid)] = want
    # interleave whole messages (a primary line and its DETAIL stay together, as the collector keeps them)
    messages = []
    for stream in streams:
        grouped = []
        for pid, line in stream:
            if line.startswith("DETAIL") and grouped:
                grouped[-1].append((pid, line))
            else:
                grouped.append([(pid, line)])
        messages.append(grouped)
    merged = []
    while any(messages):
        pick = order.choice([m for m in messages if m])
        merged.extend(pick.pop(0))
    text = "".join(
        f"2026-12-01 23:11:43.500 UTC [{pid}] attrib@huts {line}\n" for pid, line in merged
    )
    records = read_text(text)
    assert sum(r.lines for r in records) == len(merged)
    got: dict = {}
    for s in statements(records):
        got.setdefault(s.session, []).append((s.sql, round(s.duration_ms * 1000), s.params))
    assert got == expected
    assert [r.line for r in records] == sorted(r.line for r in records)


@settings(max_examples=60, deadline=None)
@given(
    sessions=st.lists(
        st.lists(st.tuples(_EXECUTION, st.booleans()), min_size=1, max_size=4),
        min_size=1,
        max_size=4,
    ),
    order=st.randoms(use_true_random=False),
)
def test_read_stderr_pairs_log_statement_durations_under_any_interleaving(sessions, order):
    # log_statement = all + log_duration = on: bare durations of parse/bind, the execute (or simple
    # statement) line, then its own duration, all of one session
    messages = []
    expected = {}
    for pid, executions in enumerate(sessions, start=100):
        grouped, want = [], []
        for (sql, named, micros, detail), simple in executions:
            if simple:
                text = sql.replace("$1", "7")
                grouped.append([(pid, f"LOG:  statement: {text}")])
                grouped.append([(pid, f"LOG:  duration: {micros[0] / 1000:.3f} ms")])
                want.append((text, micros[0], None))
                continue
            before = micros[1:2] if named else micros[:2]
            grouped += [[(pid, f"LOG:  duration: {m / 1000:.3f} ms")] for m in before]
            execute = [(pid, f"LOG:  execute S_1: {sql}")]
            if detail:
                execute.append((pid, "DETAIL:  parameters: $1 = '7'"))
            grouped.append(execute)
            grouped.append([(pid, f"LOG:  duration: {micros[2] / 1000:.3f} ms")])
            want.append((sql, sum(before) + micros[2], ("7",) if detail else None))
        messages.append(grouped)
        expected[str(pid)] = want
    merged = []
    while any(messages):
        pick = order.choice([m for m in messages if m])
        merged.extend(pick.pop(0))
    text = "".join(
        f"2026-12-01 23:11:43.500 UTC [{pid}] attrib@huts {line}\n" for pid, line in merged
    )
    records = read_text(text)
    assert sum(r.lines for r in records) == len(merged)
    got: dict = {}
    for s in statements(records):
        got.setdefault(s.session, []).append((s.sql, round(s.duration_ms * 1000), s.params))
    assert got == expected
