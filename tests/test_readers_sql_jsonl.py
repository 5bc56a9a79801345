"""The JSON-lines statement log reader (an application's SQL logger) on fixtures and inline lines."""

from __future__ import annotations

import json
from pathlib import Path
from zoneinfo import ZoneInfo

import pytest

from attrib.errors import MappingError, TimezoneError
from attrib.readers import sql_jsonl
from attrib.records import ReadOptions, Reject, Skip, Statement

FIXTURES = Path(__file__).resolve().parent.parent / "fixtures" / "logs" / "sql-jsonl"
ALL_FIXTURES = sorted(p.name for p in FIXTURES.glob("*.log"))
ZURICH = ZoneInfo("Europe/Zurich")
T0 = 1_784_009_702_000_000  # 2026-07-14T06:15:02Z in µs


def _lines(path: Path) -> list[str]:
    lines = path.read_bytes().decode("utf-8", errors="replace").split("\n")
    if lines and lines[-1] == "":
        lines.pop()
    return lines


def _read(lines: list[str], **options) -> list:
    return list(sql_jsonl.read(enumerate(lines, 1), ReadOptions(**options)))


def _fixture(name: str, **options) -> tuple[list, int]:
    lines = _lines(FIXTURES / name)
    return _read(lines, **options), len(lines)


CUSTOM = {
    "timestamp": "@t",
    "sql": "db.statement",
    "rows": "db.rows",
    "duration_us": "took_us",
    "request_id": "ctx.req",
    "session": "ctx.conn",
    "error": "fail",
}
OPTIONS = {
    "003_naive_times.log": {"tz": ZURICH},
    "002_custom_fields.log": {"statement_fields": CUSTOM},
}


@pytest.mark.parametrize("name", ALL_FIXTURES)
def test_read_every_fixture_accounts_for_every_line(name: str) -> None:
    records, n_lines = _fixture(name, **OPTIONS.get(name, {}))
    assert sum(r.lines for r in records) == n_lines
    assert [r.line for r in records] == list(range(1, n_lines + 1))


@pytest.mark.parametrize("name", [n for n in ALL_FIXTURES if not n.startswith("002")])
def test_sniff_fixtures_with_usual_names_are_recognised(name: str) -> None:
    assert sql_jsonl.sniff(_lines(FIXTURES / name)[:20])


@pytest.mark.parametrize(
    "head",
    [
        ['{"ts": "2026-07-14T06:15:02Z", "path": "/huts/1", "elapsed_ms": 12, "status": 200}'],
        ['{"timestamp": "2026-07-14 06:15:02.118 UTC", "error_severity": "LOG", "statement": "x"}'],
        ['{"resourceSpans": []}'],
        ["# Time: 261202  0:07:58", "# User@Host: root[root] @  [127.0.0.1]"],
        ['{"sql": "SELECT 1"}', "garbage", "more garbage", "and more"],
        [],
    ],
)
def test_sniff_other_formats_are_refused(head: list[str]) -> None:
    assert not sql_jsonl.sniff(head)


def test_read_default_names_give_times_durations_rows_and_keys() -> None:
    records, _n = _fixture("001_app_logger_defaults.log")
    stmts = [r for r in records if isinstance(r, Statement)]
    assert [type(r) for r in records].count(Skip) == 1
    first, second, insert, failed, count = stmts
    # `timestamp` is the end: 06:15:02.118204Z minus 0.412 ms.
    assert first.start_us == T0 + 118_204 - 412 and first.duration_ms == pytest.approx(0.412)
    assert first.params == ("2000",) and first.rows == 3 and first.session == "42"
    assert first.request_id == second.request_id == "req-2001"
    assert (
        insert.sql.startswith("INSERT INTO bookings") and insert.rows == 1
    )  # statement, row_count
    assert insert.params == ("bunk=11", "guest=Ada Bergmann", "night=2026-07-20")
    # W3C Trace Context, "Traceparent Header" example value.
    assert insert.trace_id == "4bf92f3577b34da6a3ce929d0e0e4736"
    assert (
        failed.error == "23505" and failed.start_us == T0 + 500_000 - 300
    )  # epoch seconds, `duration`
    assert (
        count.start_us == T0 + 600_000 - 180 and count.database == "alpine"
    )  # epoch ms, "0.180ms"


def test_read_mapped_nested_names_are_used() -> None:
    records, _n = _fixture("002_custom_fields.log", statement_fields=CUSTOM)
    assert [(r.request_id, r.session, r.rows, r.duration_ms) for r in records] == [
        ("req-3001", "c-7", 1, 0.34),
        ("req-3001", "c-7", 8, 0.21),
        ("req-3002", "c-8", 1, 1.9),
    ]
    assert records[2].error == "40001" and records[2].start_us == T0 + 201_000 - 1900


def test_read_naive_times_without_tz_raise_timezone_error() -> None:
    with pytest.raises(TimezoneError, match="--tz"):
        _fixture("003_naive_times.log")


def test_read_naive_times_are_read_in_the_given_zone() -> None:
    records, _n = _fixture("003_naive_times.log", tz=ZURICH)
    assert records[0].start_us == T0 + 118_000 - 500  # 08:15 in Zurich (CEST) is 06:15Z


def test_read_start_field_is_taken_as_the_start() -> None:
    records, _n = _fixture("004_start_field.log")
    assert [(r.start_us, r.duration_ms, r.session) for r in records] == [
        (T0 + 100, 0.45, "9"),
        (T0 + 1000, 0.3, "9"),
    ]


def test_read_hostile_lines_are_rejected_with_reasons() -> None:
    records, n_lines = _fixture("901_hostile.log")
    kinds = [
        (r.line, type(r).__name__, getattr(r, "reason", getattr(r, "category", "")))
        for r in records
    ]
    assert kinds == [
        (1, "Statement", ""),
        (2, "Skip", "blank"),
        (3, "Reject", "invalid JSON"),
        (4, "Reject", "not a JSON object"),
        (5, "Reject", "no SQL text"),
        (6, "Reject", "SQL text is not a string"),
        (7, "Reject", "bad ISO 8601 timestamp"),
        (8, "Reject", "bad elapsed time"),
        (9, "Reject", "bad rows"),
        (10, "Reject", "invalid JSON"),
        (11, "Statement", ""),
        (12, "Statement", ""),
        (13, "Reject", "invalid JSON"),  # the last line, cut off
    ]
    assert n_lines == 13
    assert records[10].error == "error"  # message text is never kept
    assert "H\ufffdtte" in records[11].sql


def test_read_mapped_field_that_never_appears_raises_mapping_error() -> None:
    lines = _lines(FIXTURES / "001_app_logger_defaults.log")
    with pytest.raises(MappingError, match="--query-field request_id=NAME") as info:
        _read(lines, statement_fields={"request_id": "req"})
    assert "\n" not in str(info.value) and "'req'" in str(info.value)


def test_read_mapped_field_seen_only_late_is_accepted() -> None:
    lines = [json.dumps({"ts": T0 / 1e6, "sql": f"SELECT {n}"}) for n in range(50)]
    lines.append(json.dumps({"ts": T0 / 1e6, "sql": "SELECT 50", "rq": "req-7001"}))
    records = _read(lines, statement_fields={"request_id": "rq"})
    assert len(records) == 51 and records[-1].request_id == "req-7001"
    assert all(isinstance(r, Statement) for r in records)


def test_read_mapped_error_field_may_never_appear() -> None:
    lines = [json.dumps({"ts": T0 / 1e6, "sql": "SELECT 1"})]
    (record,) = _read(lines, statement_fields={"error": "err"})
    assert record.error is None


def test_read_log_without_any_sql_field_raises_mapping_error() -> None:
    lines = [json.dumps({"ts": T0 / 1e6, "text": "SELECT 1", "duration_ms": 1})] * 3
    with pytest.raises(MappingError, match="--query-field sql=NAME"):
        _read(lines)


def test_read_unknown_field_name_in_mapping_raises_mapping_error() -> None:
    with pytest.raises(MappingError, match="unknown statement field 'statement_text'"):
        _read(['{"sql": "SELECT 1", "ts": 1784009702}'], statement_fields={"statement_text": "s"})


def test_read_file_without_json_objects_only_rejects() -> None:
    records = _read(["not json", "", "still not json"])
    assert [type(r) for r in records] == [Reject, Skip, Reject]


def test_read_more_lines_than_hold_before_a_field_appears_keeps_order() -> None:
    n = sql_jsonl.HOLD + 5
    lines = [json.dumps({"ts": T0 / 1e6, "sql": f"SELECT {k}"}) for k in range(n)]
    lines.append(json.dumps({"ts": T0 / 1e6, "sql": "SELECT last", "rq": "req-8001"}))
    records = _read(lines, statement_fields={"request_id": "rq"})
    assert [r.line for r in records] == list(range(1, n + 2))


def test_read_large_statement_line_is_kept_whole() -> None:
    sql = "INSERT INTO bookings (bunk_id, guest, night) VALUES " + ",".join(
        f"({k}, 'guest {k:07d}', '2026-07-14')" for k in range(140_000)
    )
    assert len(sql) > 5_000_000
    (record,) = _read([json.dumps({"ts": T0 / 1e6, "sql": sql, "duration_ms": 2100})])
    assert record.sql == sql and record.start_us == T0 - 2_100_000


@pytest.mark.parametrize(
    ("value", "expected"),
    [
        ("23505", "23505"),
        (1062, "1062"),
        ("IntegrityError", "IntegrityError"),
        ("psycopg.errors.UniqueViolation", "psycopg.errors.UniqueViolation"),
        ("duplicate key value (bunk_id)=(11) already exists", "error"),
        ({"code": 1213, "message": "Deadlock found"}, "1213"),
        ({"message": "Deadlock found"}, "error"),
        (True, "error"),
        (None, None),
        ("", None),
    ],
)
def test_error_code_keeps_codes_and_drops_messages(value: object, expected: str | None) -> None:
    assert sql_jsonl.error_code(value) == expected


@pytest.mark.parametrize("name", ALL_FIXTURES)
def test_detect_among_all_statement_readers_picks_sql_jsonl(name: str) -> None:
    from attrib.readers import detect

    assert detect(_lines(FIXTURES / name)[:20], "statements", name) is sql_jsonl


def test_read_mapped_sql_field_that_never_appears_names_the_mapping() -> None:
    lines = _lines(FIXTURES / "002_custom_fields.log")
    with pytest.raises(
        MappingError, match="field 'nope' mapped to sql; fix --query-field sql=NAME"
    ):
        _read(lines, statement_fields={"sql": "nope"})
