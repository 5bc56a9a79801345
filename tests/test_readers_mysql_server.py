"""The slow-log reader against a real MariaDB server (source: real MariaDB server output).

A small mountain-hut booking workload runs through PyMySQL on a throwaway server
(tests/mariadbserver.py). Every statement of a request carries a trailing sqlcommenter comment
``/*request_id='req-000N'*/``; a counting cursor records how many statements each request put on the
wire. The reader must give back exactly those counts per request, the rows the workload fetched, the
connection's thread id and the statement start.
"""

from __future__ import annotations

import json
import time
from collections import Counter
from dataclasses import dataclass, field
from zoneinfo import ZoneInfo

import pytest

from attrib.comments import request_keys
from attrib.errors import TimezoneError
from attrib.readers import mysql_slow, sql_jsonl
from attrib.records import ReadOptions, Reject, Skip, Statement
from tests.mariadbserver import mariadb_server

pymysql = pytest.importorskip("pymysql")

pytestmark = pytest.mark.server

# A zone away from UTC, so that `# Time:` lines (server local time) differ from the UTC epoch.
SERVER_TZ = "Europe/Zurich"


class CountingCursor(pymysql.cursors.Cursor):
    """A cursor that counts every statement it sends, per current request, and tags it.

    It is also a tiny application SQL logger: each statement of a request becomes one JSON line in
    ``journal`` (end time, text, client-side duration, rowcount, request id, connection id, errno),
    the input of the sql-jsonl reader.
    """

    request: str | None = None
    sent: Counter[str]
    journal: list[str]

    def tagged(self, sql: str) -> str:
        return f"{sql} /*request_id='{self.request}'*/"

    def _query(self, q: str) -> int:  # every execute() and each executemany() batch ends here
        if self.request is None:
            return super()._query(q)
        self.sent[self.request] += 1
        started = time.perf_counter()
        error = None
        try:
            return super()._query(q)
        except pymysql.err.MySQLError as exc:
            error = exc.args[0]
            raise
        finally:
            line = {
                "ts": time.time(),
                # executemany() sends its batched INSERT as encoded bytes
                "sql": q.decode("utf-8") if isinstance(q, bytes | bytearray) else q,
                "duration_ms": (time.perf_counter() - started) * 1000,
                "rows": self.rowcount if error is None else None,
                "request_id": self.request,
                "session": self.connection.thread_id(),
            }
            if error is not None:
                line["error"] = error
            self.journal.append(json.dumps(line, ensure_ascii=False))


@dataclass
class Workload:
    """What the workload did, as seen from the client."""

    sent: Counter[str] = field(default_factory=Counter)
    fetched: dict[str, int] = field(default_factory=dict)  # request id -> rows of its hut list
    thread_of: dict[str, int] = field(default_factory=dict)  # request id -> connection thread id
    sleep_window: tuple[float, float] = (0.0, 0.0)  # client clock around SELECT SLEEP(...)
    failed: list[str] = field(default_factory=list)
    journal: list[str] = field(default_factory=list)  # the JSON-lines SQL log of the workload


SCHEMA = [
    "CREATE DATABASE alpine",
    "CREATE TABLE alpine.huts (id INT PRIMARY KEY, name VARCHAR(80) NOT NULL,"
    " region VARCHAR(40) NOT NULL, altitude_m INT NOT NULL)",
    "CREATE TABLE alpine.bunks (id INT AUTO_INCREMENT PRIMARY KEY, hut_id INT NOT NULL,"
    " room VARCHAR(20) NOT NULL, label VARCHAR(20) NOT NULL, UNIQUE KEY (hut_id, room, label))",
    "CREATE TABLE alpine.bookings (id INT AUTO_INCREMENT PRIMARY KEY, bunk_id INT NOT NULL,"
    " guest VARCHAR(80) NOT NULL, night DATE NOT NULL, note TEXT, UNIQUE KEY (bunk_id, night))",
]


def run_workload(connect_kwargs: dict[str, object]) -> Workload:
    """Set up the hut schema, then serve eight requests over two pooled connections."""
    work = Workload()
    setup = pymysql.connect(**connect_kwargs, autocommit=True)
    with setup.cursor() as cur:
        for sql in SCHEMA:
            cur.execute(sql)
    setup.close()

    pool = [
        pymysql.connect(
            **connect_kwargs, database="alpine", autocommit=True, cursorclass=CountingCursor
        )
        for _ in range(2)
    ]
    cursors = [conn.cursor() for conn in pool]
    for cur in cursors:
        cur.sent = work.sent
        cur.journal = work.journal

    def request(n: int) -> CountingCursor:
        cur = cursors[n % 2]
        cur.request = f"req-{n:04d}"
        work.thread_of[cur.request] = cur.connection.thread_id()
        return cur

    # req-0001: seed the huts (POST /admin/huts), one execute per hut with parameters.
    cur = request(1)
    huts = [
        (1, "Capanna Stella", "Valais", 3100),
        (2, "Rifugio Nebbia", "Ticino", 2450),
        (3, "Hütte am Grat", "Tirol", 2890),
    ]
    for hut in huts:
        cur.execute(
            cur.tagged("INSERT INTO huts (id, name, region, altitude_m) VALUES (%s, %s, %s, %s)"),
            hut,
        )

    # req-0002: add bunks in bulk (POST /huts/{id}/bunks). PyMySQL rewrites executemany into one
    # multi-row INSERT only when its pattern matches; a trailing comment after VALUES(...) stops the
    # match, but it is accepted after an ON DUPLICATE KEY UPDATE clause.
    cur = request(2)
    bunks = [(1, "Dorm A", f"A{i}") for i in range(1, 9)] + [
        (2, "Dorm B", f"B{i}") for i in range(1, 5)
    ]
    cur.executemany(
        cur.tagged(
            "INSERT INTO bunks (hut_id, room, label) VALUES (%s, %s, %s)"
            " ON DUPLICATE KEY UPDATE label = VALUES(label)"
        ),
        bunks,
    )

    # req-0003: the same bulk call with the comment right after VALUES(...): PyMySQL falls back to
    # one INSERT per row.
    cur = request(3)
    cur.executemany(
        cur.tagged("INSERT INTO bunks (hut_id, room, label) VALUES (%s, %s, %s)"),
        [(3, "Lager", f"L{i}") for i in range(1, 6)],
    )

    # req-0004: list huts (GET /huts); the rows fetched are checked against Rows_sent.
    cur = request(4)
    cur.execute(
        cur.tagged("SELECT id, name, altitude_m FROM huts WHERE altitude_m > %s ORDER BY name"),
        (2000,),
    )
    work.fetched[cur.request] = len(cur.fetchall())

    # req-0005: hut page (GET /huts/{id}) with an N+1 loop over its bunks.
    cur = request(5)
    cur.execute(cur.tagged("SELECT id, name, region FROM huts WHERE id = %s"), (1,))
    cur.fetchall()
    cur.execute(cur.tagged("SELECT id, label FROM bunks WHERE hut_id = %s ORDER BY label"), (1,))
    for bunk_id, _label in cur.fetchall():
        cur.execute(
            cur.tagged("SELECT COUNT(*) FROM bookings WHERE bunk_id = %s AND night = %s"),
            (bunk_id, "2026-07-14"),
        )
        cur.fetchall()

    # req-0006: book a bunk (POST /bookings) in a transaction; the statement spans two lines and the
    # note holds a ';' and a newline (which PyMySQL escapes as \n).
    cur = request(6)
    cur.execute(cur.tagged("START TRANSACTION"))
    cur.execute(
        cur.tagged("SELECT id FROM bunks WHERE hut_id = %s AND label = %s FOR UPDATE"), (2, "B3")
    )
    (bunk_id,) = cur.fetchone()
    cur.execute(
        cur.tagged("INSERT INTO bookings (bunk_id, guest, night, note)\nVALUES (%s, %s, %s, %s)"),
        (bunk_id, "Ada Bergmann", "2026-07-14", "late arrival;\nbring own sheets"),
    )
    cur.execute(cur.tagged("COMMIT"))

    # req-0007: double booking of the same bunk and night fails on the unique key; the failed
    # statement is still sent (and logged).
    cur = request(7)
    try:
        cur.execute(
            cur.tagged("INSERT INTO bookings (bunk_id, guest, night) VALUES (%s, %s, %s)"),
            (bunk_id, "Björn Fjell", "2026-07-14"),
        )
    except pymysql.err.IntegrityError:
        work.failed.append(cur.request)

    # req-0008: a slow availability report; the client clock around it checks the logged start.
    cur = request(8)
    before = time.time()
    cur.execute(cur.tagged("SELECT SLEEP(%s)"), (1.2,))
    cur.fetchall()
    work.sleep_window = (before, time.time())
    for conn in pool:
        conn.close()
    return work


@pytest.fixture(scope="module")
def served(tmp_path_factory: pytest.TempPathFactory) -> tuple[Workload, list, int, str]:
    """Run the workload on a fresh server; return it, the reader's records, the line count, the log."""
    with mariadb_server(timezone=SERVER_TZ) as server:
        work = run_workload(server.connect_kwargs())
        log_path = server.stop()  # a clean shutdown writes every entry
        data = log_path.read_bytes()
    keep = tmp_path_factory.mktemp("slowlog") / "slow.log"
    keep.write_bytes(data)
    text = data.decode("utf-8", errors="replace")
    lines = text.split("\n")
    if lines and lines[-1] == "":
        lines.pop()
    records = list(mysql_slow.read(enumerate(lines, 1), ReadOptions()))
    return work, records, len(lines), text


def _by_request(records: list) -> dict[str, list[Statement]]:
    out: dict[str, list[Statement]] = {}
    for rec in records:
        if isinstance(rec, Statement):
            rid, _trace = request_keys(rec.sql)
            if rid is not None:
                out.setdefault(rid, []).append(rec)
    return out


def test_read_real_log_per_request_counts_equal_what_the_workload_sent(served) -> None:
    # Source: real MariaDB server output.
    work, records, _n, _text = served
    found = {rid: len(stmts) for rid, stmts in _by_request(records).items()}
    assert found == dict(work.sent)
    assert set(found) == {f"req-{n:04d}" for n in range(1, 9)}


def test_read_real_log_executemany_batches_only_when_pymysql_pattern_matches(served) -> None:
    # Source: real MariaDB server output (and PyMySQL's executemany behaviour).
    work, records, _n, _text = served
    by_req = _by_request(records)
    assert work.sent["req-0002"] == 1
    assert len(by_req["req-0002"]) == 1 and by_req["req-0002"][0].rows == 12  # Rows_affected
    assert work.sent["req-0003"] == 5 and [s.rows for s in by_req["req-0003"]] == [1] * 5


def test_read_real_log_rows_sent_matches_rows_fetched(served) -> None:
    # Source: real MariaDB server output.
    work, records, _n, _text = served
    (listing,) = _by_request(records)["req-0004"]
    assert listing.rows == work.fetched["req-0004"] == 3


def test_read_real_log_session_is_the_connection_thread_id(served) -> None:
    # Source: real MariaDB server output; PyMySQL's thread_id() is the server's connection id.
    work, records, _n, _text = served
    for rid, stmts in _by_request(records).items():
        assert {s.session for s in stmts} == {str(work.thread_of[rid])}, rid
        assert {s.database for s in stmts} == {"alpine"}
        assert {s.user for s in stmts} == {"root"}


def test_read_real_log_start_is_set_timestamp_second_of_statement_start(served) -> None:
    # Source: real MariaDB server output: SET timestamp is the start second, not the write time.
    work, records, _n, _text = served
    (sleeper,) = _by_request(records)["req-0008"]
    before, after = work.sleep_window
    # The start second, not the end (which is 1.2 s later); the margin covers a second boundary
    # falling between the client's clock reading and the server's start.
    assert int(before) * 1_000_000 <= sleeper.start_us < (before + 0.5) * 1_000_000
    assert after - before >= 1.2 and 1200 <= sleeper.duration_ms < 1200 + (after - before) * 1000


def test_read_real_log_keeps_multiline_text_comment_and_failed_statement(served) -> None:
    # Source: real MariaDB server output. MariaDB 10.11 keeps comments sent by PyMySQL verbatim.
    work, records, _n, _text = served
    by_req = _by_request(records)
    booking = [s for s in by_req["req-0006"] if s.sql.startswith("INSERT")]
    assert len(booking) == 1
    assert "'late arrival;\\nbring own sheets'" in booking[0].sql  # PyMySQL escapes the newline
    assert booking[0].sql.startswith("INSERT INTO bookings (bunk_id, guest, night, note)\nVALUES")
    assert booking[0].sql.endswith("/*request_id='req-0006'*/")
    assert work.failed == ["req-0007"] and len(by_req["req-0007"]) == 1
    assert by_req["req-0007"][0].error is None  # MariaDB's slow log carries no error code


def test_read_real_log_accounts_for_every_line(served) -> None:
    # Source: real MariaDB server output.
    _work, records, n_lines, text = served
    assert sum(r.lines for r in records) == n_lines
    assert not [r for r in records if isinstance(r, Reject)]
    assert [r.line for r in records if isinstance(r, Skip)] == [1, 2, 3]
    assert text.splitlines()[0].endswith("started with:")


def test_read_real_log_time_lines_give_the_same_start_as_set_timestamp(served) -> None:
    # Source: real MariaDB server output. With the SET timestamp lines removed, the reader must fall
    # back on the local `# Time:` lines (own or inherited) and find the same start for every statement.
    _work, records, _n, text = served
    lines = text.split("\n")
    if lines[-1] == "":
        lines.pop()
    without_set = [ln for ln in lines if not ln.startswith("SET timestamp=")]
    assert len(lines) - len(without_set) == sum(isinstance(r, Statement) for r in records)
    with pytest.raises(TimezoneError):
        list(mysql_slow.read(enumerate(without_set, 1), ReadOptions()))
    again = list(mysql_slow.read(enumerate(without_set, 1), ReadOptions(tz=ZoneInfo(SERVER_TZ))))
    starts = [r.start_us for r in records if isinstance(r, Statement)]
    assert [r.start_us for r in again if isinstance(r, Statement)] == starts
    assert sum("# Time:" in ln for ln in lines) < len(starts)  # some entries inherit their time


def test_read_workload_json_log_agrees_with_the_real_slow_log(served) -> None:
    # Source: real MariaDB server output, against the workload's own JSON-lines SQL log of the same
    # statements: same per-request counts, same text (the server logs what the client sent and
    # appends ';'), same row counts, and the logged start second lies between the client's
    # start and end of the call.
    work, records, _n, _text = served
    journal = list(sql_jsonl.read(enumerate(work.journal, 1), ReadOptions()))
    assert all(isinstance(r, Statement) for r in journal) and len(journal) == sum(
        work.sent.values()
    )
    app: dict[str, list[Statement]] = {}
    for stmt in journal:
        app.setdefault(stmt.request_id, []).append(stmt)
    server = _by_request(records)
    assert {k: len(v) for k, v in app.items()} == {k: len(v) for k, v in server.items()}
    for rid, stmts in app.items():
        for mine, logged in zip(stmts, server[rid], strict=True):
            assert mine.sql == logged.sql
            assert mine.session == logged.session
            if mine.error is None:
                assert mine.rows == logged.rows, mine.sql
            client_start_s = mine.start_us / 1e6
            client_end_s = client_start_s + mine.duration_ms / 1000
            assert int(client_start_s) <= logged.start_us // 1_000_000 <= client_end_s
            assert logged.duration_ms <= mine.duration_ms
    (failed,) = app["req-0007"]
    assert failed.error == "1062"  # ER_DUP_ENTRY, as PyMySQL reports it
