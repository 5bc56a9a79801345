"""The MariaDB/MySQL slow query log reader on fixture files and inline entries.

Fixture provenance is in fixtures/logs/mysql-slow/README.md: 001-003 are real MariaDB 10.11 output,
004-005 follow the MySQL manual ("The Slow Query Log") and our log-formats reference, 9xx are damaged
copies of 002.
"""

from __future__ import annotations

from pathlib import Path
from zoneinfo import ZoneInfo

import pytest

from attrib.comments import request_keys
from attrib.errors import TimezoneError
from attrib.readers import mysql_slow
from attrib.records import ReadOptions, Reject, Skip, Statement

FIXTURES = Path(__file__).resolve().parent.parent / "fixtures" / "logs" / "mysql-slow"
ZURICH = ZoneInfo("Europe/Zurich")  # the zone the real fixtures' server ran in


def _lines(path: Path) -> list[str]:
    lines = path.read_bytes().decode("utf-8", errors="replace").split("\n")
    if lines and lines[-1] == "":
        lines.pop()
    return lines


def _read(lines: list[str], tz: ZoneInfo | None = ZURICH) -> list:
    return list(mysql_slow.read(enumerate(lines, 1), ReadOptions(tz=tz)))


def _fixture(name: str, tz: ZoneInfo | None = ZURICH) -> tuple[list, int]:
    lines = _lines(FIXTURES / name)
    return _read(lines, tz), len(lines)


def _statements(records: list) -> list[Statement]:
    return [r for r in records if isinstance(r, Statement)]


def _by_request(records: list) -> dict[str, list[Statement]]:
    out: dict[str, list[Statement]] = {}
    for stmt in _statements(records):
        rid = request_keys(stmt.sql)[0]
        if rid:
            out.setdefault(rid, []).append(stmt)
    return out


ALL_FIXTURES = sorted(p.name for p in FIXTURES.glob("*.log"))


@pytest.mark.parametrize("name", ALL_FIXTURES)
def test_read_every_fixture_accounts_for_every_line(name: str) -> None:
    records, n_lines = _fixture(name)
    assert sum(r.lines for r in records) == n_lines
    assert [r.line for r in records] == sorted(r.line for r in records)
    covered = 0
    for rec in records:  # records tile the file: each starts where the previous one ended
        assert rec.line == covered + 1, rec
        covered += rec.lines


@pytest.mark.parametrize("name", ALL_FIXTURES)
def test_sniff_every_fixture_head_is_recognised(name: str) -> None:
    assert mysql_slow.sniff(_lines(FIXTURES / name)[:20])


@pytest.mark.parametrize(
    "head",
    [
        ['{"ts": "2026-07-14T06:15:02Z", "sql": "SELECT 1"}'],
        ["2026-07-14 06:15:02.118 UTC [4711] hutweb@alpine LOG:  duration: 0.412 ms"],
        ['198.51.100.7 - - [14/Jul/2026:06:15:02 +0000] "GET /huts HTTP/1.1" 200 512'],
        ["# a comment", "SELECT 1;"],
        [],
    ],
)
def test_sniff_other_formats_are_refused(head: list[str]) -> None:
    assert not mysql_slow.sniff(head)


def test_read_real_mariadb_log_gives_requests_rows_and_start() -> None:
    # Source: real MariaDB server output (fixture 001).
    records, _n = _fixture("001_mariadb_hut_booking.log")
    assert [r.category for r in records[:3]] == ["server"] * 3
    by_req = _by_request(records)
    assert {k: len(v) for k, v in by_req.items()} == {
        "req-0002": 1,
        "req-0004": 1,
        "req-0006": 4,
        "req-0007": 1,
        "req-0008": 1,
    }
    (bulk,) = by_req["req-0002"]
    assert bulk.rows == 12  # INSERT: Rows_affected, not Rows_sent (0)
    assert bulk.duration_ms == pytest.approx(1.339)
    (listing,) = by_req["req-0004"]
    assert listing.rows == 3 and listing.session == "6" and listing.database == "alpine"
    assert listing.sql.endswith("ORDER BY name /*request_id='req-0004'*/")  # one ';' stripped
    first = _statements(records)[0]
    assert first.sql == "SET NAMES utf8mb4" and first.database is None  # "Schema:" empty
    # SET timestamp=1796166466 is the start second (MariaDB 10.11, seen on the real server).
    assert {s.start_us for s in _statements(records)} == {1_796_166_466_000_000}
    (sleeper,) = by_req["req-0008"]
    assert sleeper.duration_ms == pytest.approx(1200.244) and sleeper.user == "root"


def test_read_real_mariadb_log_keeps_multiline_statement_text() -> None:
    # Source: real MariaDB server output (fixture 002).
    records, _n = _fixture("002_mariadb_time_changes.log")
    (count,) = [s for s in _statements(records) if s.sql.startswith("SELECT COUNT(*)")]
    assert (
        count.sql == "SELECT COUNT(*)\nFROM huts\nWHERE name LIKE 'R%%' /*request_id='req-0103'*/"
    )
    assert count.lines == 10 and count.rows == 1 and count.session == "5"
    use = [s for s in _statements(records) if s.sql == "USE alpine"]
    assert len(use) == 1  # the statement itself, not the server's "use `alpine`;" line
    starts = {request_keys(s.sql)[0]: s.start_us for s in _statements(records)}
    assert starts["req-0102"] == 1_796_166_478_000_000
    assert starts["req-0103"] == starts["req-0104"] == 1_796_166_479_000_000


def test_read_real_mariadb_log_reopened_mid_file_skips_each_banner() -> None:
    # Source: real MariaDB server output (fixture 003): FLUSH SLOW LOGS writes the banner again.
    records, _n = _fixture("003_mariadb_flush_reopen.log")
    assert [r.line for r in records if isinstance(r, Skip)] == [1, 2, 3, 29, 30, 31, 50, 51, 52]
    sqls = [s.sql for s in _statements(records)]
    assert "FLUSH SLOW LOGS" in sqls and "KILL 99999" in sqls
    assert not [r for r in records if isinstance(r, Reject)]


def test_read_mysql8_entries_use_time_minus_duration_and_log_slow_extra() -> None:
    # Shape from the MySQL manual, "The Slow Query Log" (log_slow_extra adds Start/End/Errno).
    records, _n = _fixture("004_mysql8_entries.log", tz=None)  # ISO times need no --tz
    stmts = _statements(records)
    assert [s.session for s in stmts] == ["42", "42", "43", "43", "42"]
    assert {s.user for s in stmts} == {"hutweb"}
    # `# Time:` is the write time: 06:15:02.118204Z - 0.000412 s.
    assert stmts[0].start_us == 1_784_009_702_118_204 - 412
    # log_slow_extra Start: wins over Time - Query_time (06:15:03.000900+02:00 - 0.0007 s).
    assert stmts[2].start_us == 1_784_009_702_999_950
    assert stmts[3].error == "errno 1062" and stmts[2].error is None
    # `use` is written only when the database changes; it carries over to later entries.
    assert [s.database for s in stmts] == [
        "alpine",
        "alpine",
        "alpine",
        "booking_archive",
        "booking_archive",
    ]
    assert stmts[1].rows == 0  # MySQL has no Rows_affected: Rows_sent stays
    assert stmts[1].sql.startswith("INSERT INTO bookings (bunk_id, guest, night)\nVALUES")


def test_read_mysql57_admin_command_is_skipped_and_set_ids_are_read() -> None:
    # Shape from our log-formats reference §2 (MySQL sql/log.cc): "# administrator command: Quit;".
    records, _n = _fixture("005_mysql57_admin_command.log", tz=None)
    assert [(type(r).__name__, r.line, r.lines) for r in records] == [
        ("Statement", 1, 6),
        ("Skip", 7, 5),
        ("Statement", 12, 5),
    ]
    assert records[1].category == "admin-command"
    assert records[0].database == "alpine" and records[0].start_us == 1_784_010_000_000_100 - 900


def test_read_truncated_last_entry_is_rejected() -> None:
    records, n_lines = _fixture("901_truncated_at_end.log")
    last = records[-1]
    assert isinstance(last, Reject) and "cut off at end of file" in last.reason
    assert last.line + last.lines - 1 == n_lines
    assert len(_statements(records)) == 8


def test_read_entry_without_query_time_is_rejected_alone() -> None:
    records, _n = _fixture("902_missing_query_time.log")
    (reject,) = [r for r in records if isinstance(r, Reject)]
    assert reject.reason == "entry without a '# Query_time:' line" and reject.lines == 5
    assert (
        len(_statements(records))
        == len(_statements(_fixture("002_mariadb_time_changes.log")[0])) - 1
    )


def test_read_garbage_lines_are_rejected_and_entries_survive() -> None:
    records, _n = _fixture("903_garbage_lines.log")
    rejects = [(r.line, r.lines, r.reason) for r in records if isinstance(r, Reject)]
    assert rejects == [
        (1, 1, "not part of a slow-log entry"),
        (43, 2, "text after the end of a statement"),
        (51, 9, "statement not terminated by ';'"),
    ]
    ids = [request_keys(s.sql)[0] for s in _statements(records)]
    assert ids.count("req-0102") == 1 and ids.count("req-0103") == 1 and "req-0104" in ids


def test_read_invalid_utf8_decoded_with_replacement_keeps_the_statement() -> None:
    records, _n = _fixture("904_invalid_utf8.log")
    (update,) = _by_request(records)["req-0104"]
    assert "H\ufffdtte \ufffd" in update.sql and update.rows == 1


def test_read_first_entry_without_any_time_is_rejected() -> None:
    records, _n = _fixture("906_first_entry_without_time.log")
    assert isinstance(records[0], Reject) and records[0].reason.startswith("entry has no time")
    assert _statements(records)[0].sql == "CREATE DATABASE alpine"


def test_read_local_time_lines_without_tz_raise_timezone_error() -> None:
    with pytest.raises(TimezoneError, match="--tz"):
        _fixture("907_no_set_timestamp.log", tz=None)


def test_read_local_time_lines_with_tz_give_the_set_timestamp_starts() -> None:
    # Source: real MariaDB server output: `# Time:` (Europe/Zurich) names the same start second as
    # SET timestamp, and entries without it inherit the last one.
    without, _n = _fixture("907_no_set_timestamp.log")
    with_set, _n = _fixture("002_mariadb_time_changes.log")
    assert [s.start_us for s in _statements(without)] == [s.start_us for s in _statements(with_set)]


def test_read_five_megabyte_statement_is_kept_whole(tmp_path: Path) -> None:
    rows = ",".join(f"({n}, 'guest {n:07d}', '2026-07-14')" for n in range(140_000))
    sql = f"INSERT INTO bookings (bunk_id, guest, night) VALUES {rows} /*request_id='req-0900'*/"
    assert len(sql) > 5_000_000
    lines = [
        "# Time: 261202  0:07:58",
        "# User@Host: root[root] @  [127.0.0.1]",
        "# Thread_id: 4  Schema: alpine  QC_hit: No",
        "# Query_time: 2.100000  Lock_time: 0.000100  Rows_sent: 0  Rows_examined: 0",
        "# Rows_affected: 140000  Bytes_sent: 60",
        "SET timestamp=1796166478;",
        sql + ";",
        "# User@Host: root[root] @  [127.0.0.1]",
        "# Thread_id: 4  Schema: alpine  QC_hit: No",
        "# Query_time: 0.000100  Lock_time: 0.000000  Rows_sent: 1  Rows_examined: 1",
        "SET timestamp=1796166480;",
        "SELECT 1;",
    ]
    records = _read(lines, tz=None)
    assert [type(r) for r in records] == [Statement, Statement]
    assert records[0].sql == sql and records[0].rows == 140_000 and records[0].lines == 7
    assert records[1].line == 8 and records[1].start_us == 1_796_166_480_000_000


def test_read_entry_without_time_line_inherits_the_previous_iso_time() -> None:
    lines = [
        "# Time: 2026-07-14T06:15:02.500000Z",
        "# User@Host: hutweb[hutweb] @ web1 [198.51.100.7]  Id:    42",
        "# Query_time: 0.100000  Lock_time: 0.000000 Rows_sent: 1  Rows_examined: 1",
        "SELECT 1;",
        "# User@Host: hutweb[hutweb] @ web1 [198.51.100.7]  Id:    42",
        "# Query_time: 0.200000  Lock_time: 0.000000 Rows_sent: 1  Rows_examined: 1",
        "SELECT 2;",
    ]
    first, second = _read(lines, tz=None)
    assert first.start_us == 1_784_009_702_500_000 - 100_000
    assert second.start_us == 1_784_009_702_500_000 - 200_000


def test_read_update_counts_rows_affected_and_strips_only_the_appended_semicolon() -> None:
    lines = [
        "# User@Host: hutweb[] @  [198.51.100.7]",
        "# Thread_id: 9  Schema: alpine  QC_hit: No",
        "# Query_time: 0.000300  Lock_time: 0.000010  Rows_sent: 0  Rows_examined: 5",
        "# Rows_affected: 2  Bytes_sent: 52",
        "SET timestamp=1796166479;",
        "/* hut admin */ UPDATE bunks SET room = 'Lager' WHERE hut_id = 3;;",
    ]
    (stmt,) = _read(lines, tz=None)
    assert stmt.rows == 2 and stmt.user == "hutweb" and stmt.session == "9"
    assert stmt.sql == "/* hut admin */ UPDATE bunks SET room = 'Lager' WHERE hut_id = 3;"


def test_read_header_only_entry_followed_by_next_entry_is_rejected() -> None:
    lines = [
        "# Time: 261202  0:07:58",
        "# User@Host: root[root] @  [127.0.0.1]",
        "# Time: 261202  0:07:59",
        "# User@Host: root[root] @  [127.0.0.1]",
        "# Query_time: 0.000100  Lock_time: 0.000000  Rows_sent: 1  Rows_examined: 1",
        "SET timestamp=1796166479;",
        "SELECT 1;",
    ]
    reject, stmt = _read(lines)
    assert (reject.line, reject.lines, reject.reason) == (1, 2, "entry ends before its statement")
    assert (stmt.line, stmt.lines, stmt.sql) == (3, 5, "SELECT 1")


@pytest.mark.parametrize(
    ("ci", "outcome"), [(None, pytest.skip.Exception), ("true", pytest.fail.Exception)]
)
def test_mariadb_server_without_binaries_skips_outside_ci_and_fails_in_ci(
    monkeypatch: pytest.MonkeyPatch, ci: str | None, outcome: type[BaseException]
) -> None:
    from tests import mariadbserver

    monkeypatch.setattr(mariadbserver, "_binary", lambda *names: None)
    if ci is None:
        monkeypatch.delenv("CI", raising=False)
    else:
        monkeypatch.setenv("CI", ci)
    with pytest.raises(outcome, match="mariadbd"), mariadbserver.mariadb_server():
        pass  # pragma: no cover - never reached


def test_read_set_timestamp_out_of_range_is_rejected() -> None:
    # A session may set its own clock (SET timestamp=0); the entry then carries that epoch.
    lines = [
        "# User@Host: root[root] @  [127.0.0.1]",
        "# Thread_id: 4  Schema: alpine  QC_hit: No",
        "# Query_time: 0.000100  Lock_time: 0.000000  Rows_sent: 1  Rows_examined: 1",
        "SET timestamp=0;",
        "SELECT NOW();",
    ]
    (record,) = _read(lines)
    assert isinstance(record, Reject) and record.reason == "timestamp out of range"
    assert record.lines == 5


@pytest.mark.parametrize("name", ALL_FIXTURES)
def test_detect_among_all_statement_readers_picks_mysql_slow(name: str) -> None:
    from attrib.readers import detect

    assert detect(_lines(FIXTURES / name)[:20], "statements", name) is mysql_slow


def test_read_every_prefix_of_a_real_log_accounts_for_its_lines_and_keeps_whole_entries() -> None:
    # Source: real MariaDB server output (fixture 002), cut after every line in turn.
    lines = _lines(FIXTURES / "002_mariadb_time_changes.log")
    full = {s.line: s for s in _statements(_read(lines))}
    for cut in range(len(lines) + 1):
        records = _read(lines[:cut])
        assert sum(r.lines for r in records) == cut
        for stmt in _statements(records):
            assert stmt == full[stmt.line] or stmt.line + stmt.lines == cut + 1


@pytest.mark.parametrize(
    "junk", ["garbage", "", "# Time: not a time", "SET timestamp=1;", "# User@Host: x"]
)
def test_read_a_junk_line_anywhere_in_a_real_log_never_breaks_accounting(junk: str) -> None:
    lines = _lines(FIXTURES / "002_mariadb_time_changes.log")
    for at in range(len(lines) + 1):
        spoiled = [*lines[:at], junk, *lines[at:]]
        records = _read(spoiled)
        assert sum(r.lines for r in records) == len(spoiled)
