"""The whole pipeline on real server output: ingest -> links -> routes / nplus1, against ground truth.

One throwaway PostgreSQL 15 server (tests/pgserver.py) writes stderr, csvlog and jsonlog at once while
the hut-booking workload (tests/workload.py) runs over both protocols, with its N+1 loop on
``/huts/{id}/bunks`` and a redundant repeat on ``/guests/{id}``. Before the workload runs, some huts
lose bunks, so the loop has a different, known length per hut. Each log file goes into its own store
together with the workload's request log (``write_request_log``: timestamp = end, as the
requests-jsonl reader reads it), through :meth:`attrib.api.Store.ingest`; the tests then read the store
only. One throwaway MariaDB server (tests/mariadbserver.py) runs a small booking workload of
its own through PyMySQL; its slow log and a request log written here go into a fourth store.

Each server starts once per module. Without the server binaries the tests skip, except on CI (CI=true)
where they fail.
"""

from __future__ import annotations

import json
import os
import time
from collections import Counter
from dataclasses import dataclass, field
from datetime import UTC, datetime
from pathlib import Path
from statistics import mean

import pytest

import attrib
from attrib.attribute import NO_REQUEST
from fingerprints import fingerprint
from tests.mariadbserver import mariadb_server
from tests.pgserver import PgServer, require_postgres
from tests.workload import (
    Truth,
    run_repeated_lookups,
    run_workload,
    setup,
    write_request_log,
)

pytestmark = pytest.mark.server

PG_FORMATS = ("stderr", "csvlog", "jsonlog")
LOOP_ROUTE = "/huts/{id}/bunks"
REPEAT_ROUTE = "/guests/{id}"
SEEDED_BUNKS = 8
# Bunks kept per hut before the workload runs: the N+1 loop on /huts/{id}/bunks runs once per bunk.
# Hut 1 keeps all its bunks (POST /bookings books bunks 1..6, which belong to hut 1).
BUNKS_KEPT = {1: 8, 2: 3, 3: 4, 4: 6, 5: 5, 6: 7}
REPEATS = 4  # the redundant statement's calls per /guests/{id} request

# The statements exactly as the workload writes them (psycopg placeholders), comment excluded.
BUNKS_SQL = "SELECT id, label, beds FROM bunks WHERE hut_id = %s ORDER BY id"
PER_BUNK_SQL = "SELECT night, status FROM bookings WHERE bunk_id = %s ORDER BY night"
GUEST_SQL = "SELECT id, name, email FROM guests WHERE id = %s"
REPEATED_SQL = "SELECT count(*) FROM bookings WHERE guest_id = %s"


def _sent_ids(sql: str, value: int, dialect: str = "postgres") -> set[str]:
    """Template ids of a statement as it reaches the server under each protocol.

    Extended protocol: psycopg turns ``%s`` into ``$1`` and binds on the server; simple protocol
    (``ClientCursor``) inlines the literal.
    """
    texts = {sql.replace("%s", "$1"), sql.replace("%s", str(value))}
    if dialect == "mysql":
        texts = {sql.replace("%s", str(value))}  # PyMySQL always inlines on the client
    return {fingerprint(text, dialect).id for text in texts}


def _one_id(sql: str, value: int = 3, dialect: str = "postgres") -> str:
    ids = _sent_ids(sql, value, dialect)
    assert len(ids) == 1, f"protocols give different templates for {sql!r}: {ids}"
    return ids.pop()


def _physical_lines(path: Path) -> int:
    data = path.read_bytes()
    return data.count(b"\n") + (1 if data and not data.endswith(b"\n") else 0)


def _linked_counts(s: attrib.api.Store) -> dict[str, int]:
    """request id -> statements linked to it, from the store's ``links`` and ``requests`` tables."""
    rows = s.con.execute(
        """
        SELECT r.request_id, count(l.source_id)
        FROM requests r
        LEFT JOIN links l
          ON l.req_source_id = r.source_id AND l.req_line = r.line AND l.req_seq = r.seq
        GROUP BY r.request_id
        """
    ).fetchall()
    return dict(rows)


def _mislinked(s: attrib.api.Store) -> int:
    """Links whose statement carries another request id than its request."""
    return s.con.execute(
        """
        SELECT count(*)
        FROM links l
        JOIN statements st ON st.source_id = l.source_id AND st.line = l.line AND st.seq = l.seq
        JOIN requests r
          ON r.source_id = l.req_source_id AND r.line = l.req_line AND r.seq = l.req_seq
        WHERE st.request_id IS DISTINCT FROM r.request_id
        """
    ).fetchone()[0]


def _sources(s: attrib.api.Store) -> dict[str, tuple]:
    rows = s.con.execute(
        "SELECT path, format, lines_read, lines_ingested, lines_skipped, lines_rejected,"
        " requests, statements FROM sources"
    ).fetchall()
    return {Path(r[0]).name: r[1:] for r in rows}


def _assert_every_line_accounted(s: attrib.api.Store, files: dict[str, int]) -> None:
    """Each file's lines_read equals its physical line count and splits into the three outcomes."""
    sources = _sources(s)
    assert set(sources) == set(files)
    for name, (fmt, read, ingested, skipped, rejected, _req, _st) in sources.items():
        assert read == files[name], (name, fmt)
        assert ingested + skipped + rejected == read, (name, fmt)
        assert rejected == 0, (name, fmt)
    assert s.con.execute("SELECT count(*) FROM rejects").fetchone()[0] == 0


def _merge(*truths: Truth) -> Truth:
    merged = Truth()
    for truth in truths:
        merged.requests += truth.requests
        merged.control.update(truth.control)
    return merged


# --- PostgreSQL -------------------------------------------------------------------------------


@dataclass
class PgRun:
    truth: Truth
    stores: dict[str, attrib.api.Store]
    lines: dict[str, dict[str, int]]  # format -> file name -> physical lines


def _trim_bunks(conninfo: str) -> None:
    """Seed the tables, then remove bunks (and their bookings) so each hut has BUNKS_KEPT bunks."""
    import psycopg

    with psycopg.connect(conninfo, autocommit=True) as conn:
        setup(conn, bunks_per_hut=SEEDED_BUNKS)
        for hut, keep in BUNKS_KEPT.items():
            low = (hut - 1) * SEEDED_BUNKS + keep  # bunk ids of hut h: (h-1)*8 + 1 .. (h-1)*8 + 8
            high = hut * SEEDED_BUNKS
            conn.execute("DELETE FROM bookings WHERE bunk_id > %s AND bunk_id <= %s", [low, high])
            conn.execute("DELETE FROM bunks WHERE id > %s AND id <= %s", [low, high])


@pytest.fixture(scope="module")
def pg_run(tmp_path_factory) -> PgRun:
    require_postgres()
    tmp = tmp_path_factory.mktemp("e2e_pg")
    stores: dict[str, attrib.api.Store] = {}
    with PgServer(mode="duration") as server:
        _trim_bunks(server.conninfo)
        # Route i of the cycle runs on request number first + i; /huts/{id}/bunks on hut
        # 1 + n % 6: hut 4 for first=1, hut 2 for first=101, hut 6 for first=201.
        extended = run_workload(server.conninfo, protocol="extended", requests=24, do_setup=False)
        simple = run_workload(
            server.conninfo, protocol="simple", requests=12, first=101, do_setup=False
        )
        more = run_workload(
            server.conninfo, protocol="extended", requests=6, first=201, do_setup=False
        )
        repeated = run_repeated_lookups(server.conninfo, requests=3, repeats=REPEATS, first=901)
        repeated_simple = run_repeated_lookups(
            server.conninfo, requests=2, repeats=REPEATS, first=951, protocol="simple"
        )
        logs = server.stop()
        truth = _merge(extended, simple, more, repeated, repeated_simple)
        # timestamp = end of each request, as the requests-jsonl reader reads it
        request_log = write_request_log(truth, tmp / "requests.jsonl")
        lines: dict[str, dict[str, int]] = {}
        for fmt in PG_FORMATS:
            log = getattr(logs, fmt)
            s = attrib.open(tmp / f"store_{fmt}.duckdb")
            s.ingest(requests=[request_log], queries=[log], tz="UTC")
            stores[fmt] = s
            lines[fmt] = {
                request_log.name: _physical_lines(request_log),
                log.name: _physical_lines(log),
            }
    yield PgRun(truth, stores, lines)
    for s in stores.values():
        s.close()


@pytest.fixture(scope="module")
def pg_findings(pg_run) -> dict:
    """format -> ``Store.nplus1()`` of that format's store (computed once)."""
    return {fmt: s.nplus1() for fmt, s in pg_run.stores.items()}


def _loop_lengths(truth: Truth) -> dict[str, int]:
    """request id -> per-bunk calls of each /huts/{id}/bunks request (its statements minus the one
    bunks query), from the workload's ground truth."""
    return {r.request_id: r.statements - 1 for r in truth.requests if r.route == LOOP_ROUTE}


def test_pg_run_plants_loops_of_the_intended_lengths(pg_run):
    # The ground truth agrees with the planting: each loop request ran one call per bunk of its hut.
    loops = {r.request_id: r for r in pg_run.truth.requests if r.route == LOOP_ROUTE}
    assert len(loops) == 4 + 2 + 1
    for rid, length in _loop_lengths(pg_run.truth).items():
        hut = int(loops[rid].path.split("/")[2])
        assert length == BUNKS_KEPT[hut], rid
    assert sorted(set(_loop_lengths(pg_run.truth).values())) == [3, 6, 7]


@pytest.mark.parametrize("fmt", PG_FORMATS)
def test_ingest_pg_log_links_exactly_the_statements_each_request_sent(pg_run, fmt):
    # source: real PostgreSQL 15 server output (stderr, csvlog and jsonlog of one run)
    s = pg_run.stores[fmt]
    truth = pg_run.truth
    assert len(truth.counts) == 24 + 12 + 6 + 3 + 2
    assert _linked_counts(s) == truth.counts
    assert _mislinked(s) == 0
    linked = s.con.execute("SELECT count(*) FROM links").fetchone()[0]
    assert linked == sum(truth.counts.values())


@pytest.mark.parametrize("fmt", PG_FORMATS)
def test_ingest_pg_log_accounts_for_every_line_and_rejects_none(pg_run, fmt):
    # source: real PostgreSQL 15 server output
    s = pg_run.stores[fmt]
    _assert_every_line_accounted(s, pg_run.lines[fmt])
    sources = _sources(s)
    assert sources["requests.jsonl"][0] == "requests-jsonl"
    assert sources["requests.jsonl"][5] == len(pg_run.truth.requests)
    (statement_log,) = (v for k, v in sources.items() if k != "requests.jsonl")
    assert statement_log[0] == f"pg-{fmt}"
    # every tagged statement, plus the untagged ones (setup, BEGIN/ROLLBACK, DEALLOCATE ALL)
    assert statement_log[6] > sum(pg_run.truth.counts.values())


@pytest.mark.parametrize("fmt", PG_FORMATS)
def test_nplus1_finds_the_planted_loop_with_its_parent_and_repeat_counts(pg_run, pg_findings, fmt):
    # source: real PostgreSQL 15 server output; expected values from the loops the workload ran
    findings = pg_findings[fmt]
    loop = findings[(findings["route"] == LOOP_ROUTE) & (findings["kind"] == "n_plus_one")]
    assert len(loop) == 1, findings[["route", "kind", "child_template"]]
    row = loop.iloc[0]
    lengths = list(_loop_lengths(pg_run.truth).values())
    assert row["child_template_id"] == _one_id(PER_BUNK_SQL)
    assert row["parent_template_id"] == _one_id(BUNKS_SQL)
    assert row["requests"] == len(lengths) == 7
    assert row["repeats_max"] == max(lengths) == 7
    assert row["repeats_mean"] == pytest.approx(mean(lengths), abs=1e-12)


@pytest.mark.parametrize("fmt", PG_FORMATS)
def test_nplus1_flags_no_route_without_a_loop_or_repeat(pg_findings, fmt):
    # Precision: the workload repeats a statement only on these two routes.
    findings = pg_findings[fmt]
    assert sorted(zip(findings["route"], findings["kind"], strict=True)) == [
        (REPEAT_ROUTE, "redundant"),
        (LOOP_ROUTE, "n_plus_one"),
    ]


@pytest.mark.parametrize("fmt", PG_FORMATS)
def test_nplus1_marks_the_same_parameters_repeated_as_redundant(pg_run, pg_findings, fmt):
    # source: real PostgreSQL 15 server output; each /guests/{id} request sent the same count query
    # with the same guest id REPEATS times, after one guest query
    findings = pg_findings[fmt]
    rows = findings[findings["route"] == REPEAT_ROUTE]
    assert len(rows) == 1
    row = rows.iloc[0]
    expected_requests = sum(r.route == REPEAT_ROUTE for r in pg_run.truth.requests)
    assert row["kind"] == "redundant"
    assert row["child_template_id"] == _one_id(REPEATED_SQL)
    assert row["parent_template_id"] == _one_id(GUEST_SQL)
    assert row["requests"] == expected_requests == 5
    assert row["repeats_max"] == REPEATS
    assert row["repeats_mean"] == pytest.approx(REPEATS, abs=1e-12)


@pytest.mark.parametrize("fmt", PG_FORMATS)
def test_routes_queries_per_request_max_equals_the_most_the_route_sent(pg_run, fmt):
    # source: real PostgreSQL 15 server output
    routes = pg_run.stores[fmt].routes().set_index("route")
    truth = pg_run.truth
    expected: dict[str, list[int]] = {}
    for r in truth.requests:
        expected.setdefault(r.route, []).append(r.statements)
    assert set(routes.index) - {NO_REQUEST} == set(expected)
    assert routes.loc[LOOP_ROUTE, "queries_per_request_max"] == 1 + max(
        BUNKS_KEPT[h] for h in (2, 4, 6)
    )
    for route, counts in expected.items():
        assert routes.loc[route, "requests"] == len(counts), route
        assert routes.loc[route, "queries_per_request_max"] == max(counts), route
        assert routes.loc[route, "queries_per_request_mean"] == pytest.approx(mean(counts)), route


def _windows(s: attrib.api.Store) -> dict[str, tuple[int, float, int, int]]:
    """request id -> (request start µs, elapsed ms, first linked statement start µs, last linked
    statement end µs), as stored."""
    rows = s.con.execute(
        """
        SELECT r.request_id, epoch_us(r.started_at), r.elapsed_ms,
               min(epoch_us(st.started_at)),
               max(epoch_us(st.started_at) + coalesce(st.duration_ms, 0) * 1000)
        FROM requests r
        JOIN links l
          ON l.req_source_id = r.source_id AND l.req_line = r.line AND l.req_seq = r.seq
        JOIN statements st ON st.source_id = l.source_id AND st.line = l.line AND st.seq = l.seq
        GROUP BY ALL
        """
    ).fetchall()
    return {r[0]: r[1:] for r in rows}


@pytest.mark.parametrize("fmt", PG_FORMATS)
def test_ingest_pg_log_statements_fall_inside_their_request_window(pg_run, fmt):
    # source: real PostgreSQL 15 server output. The server writes a duration line once the
    # statement has ended, stamped to the millisecond (PostgreSQL manual, log_line_prefix: "%m Time
    # stamp with milliseconds"; the csvlog and jsonlog times of these files have milliseconds too),
    # so a statement's start (log time - duration) can read up to 1 ms early, and its end (the log
    # time) is never after the client saw the reply.
    windows = _windows(pg_run.stores[fmt])
    assert set(windows) == set(pg_run.truth.counts)
    for r in pg_run.truth.requests:
        start_us, elapsed_ms, first_us, last_end_us = windows[r.request_id]
        true_start_us = round(r.started.timestamp() * 1_000_000)
        assert abs(start_us - true_start_us) <= 1, r.request_id
        assert elapsed_ms == pytest.approx(round(r.elapsed_ms, 3), abs=1e-9)
        assert first_us >= true_start_us - 1000, r.request_id
        assert last_end_us <= true_start_us + elapsed_ms * 1000 + 1, r.request_id


# --- MariaDB ----------------------------------------------------------------------------------

MDB_SCHEMA = [
    "CREATE DATABASE alpine",
    "CREATE TABLE alpine.huts (id INT PRIMARY KEY, name VARCHAR(80) NOT NULL,"
    " altitude_m INT NOT NULL)",
    "CREATE TABLE alpine.bunks (id INT PRIMARY KEY, hut_id INT NOT NULL, label VARCHAR(20) NOT NULL)",
    "CREATE TABLE alpine.bookings (id INT AUTO_INCREMENT PRIMARY KEY, bunk_id INT NOT NULL,"
    " guest VARCHAR(80) NOT NULL, night DATE NOT NULL, UNIQUE KEY (bunk_id, night))",
    "INSERT INTO alpine.huts VALUES (1, 'Capanna Stella', 3100), (2, 'Rifugio Nebbia', 2450),"
    " (3, 'Huette am Grat', 2890)",
]
MDB_BUNKS = {1: 3, 2: 5, 3: 4}  # bunks per hut: the N+1 loop length on GET /huts/{id}/bunks
MDB_BUNKS_SQL = "SELECT id, label FROM bunks WHERE hut_id = %s ORDER BY id"
MDB_PER_BUNK_SQL = "SELECT night FROM bookings WHERE bunk_id = %s ORDER BY night"
MDB_ROUTES = (
    ("GET", "/huts"),
    ("GET", "/huts/{id}"),
    ("GET", LOOP_ROUTE),
    ("POST", "/bookings"),
)


@dataclass
class MdbRun:
    sent: Counter[str] = field(default_factory=Counter)  # request id -> statements sent
    loops: dict[str, int] = field(default_factory=dict)  # request id -> per-bunk calls
    records: list[dict] = field(default_factory=list)  # the request log's lines
    started: dict[str, float] = field(default_factory=dict)  # request id -> client start, epoch s
    store: attrib.api.Store | None = None
    lines: dict[str, int] = field(default_factory=dict)


def _pymysql():
    try:
        import pymysql
    except ImportError:
        if os.environ.get("CI") == "true":
            pytest.fail("CI=true but PyMySQL is not installed")
        pytest.skip("PyMySQL is not installed")
    return pymysql


def _mdb_workload(pymysql, connect_kwargs: dict, run: MdbRun, requests: int = 12) -> None:
    """Serve ``requests`` requests round-robin over two connections; every statement is tagged."""
    setup_conn = pymysql.connect(**connect_kwargs, autocommit=True)
    with setup_conn.cursor() as cur:
        for sql in MDB_SCHEMA:
            cur.execute(sql)
        for hut, count in MDB_BUNKS.items():
            for b in range(1, count + 1):
                cur.execute(
                    "INSERT INTO alpine.bunks VALUES (%s, %s, %s)", (hut * 10 + b, hut, f"B{b}")
                )
    setup_conn.close()
    pool = [pymysql.connect(**connect_kwargs, database="alpine", autocommit=True) for _ in range(2)]
    try:
        for i in range(requests):
            n = 1 + i
            rid = f"req-{n:04d}"
            method, route = MDB_ROUTES[i % len(MDB_ROUTES)]
            hut = 1 + (i // len(MDB_ROUTES)) % len(MDB_BUNKS)
            cur = pool[(i + i // len(MDB_ROUTES)) % 2].cursor()

            def send(sql: str, args: tuple = (), rid: str = rid, cur=cur) -> list[tuple]:
                run.sent[rid] += 1
                cur.execute(f"{sql} /*request_id='{rid}'*/", args)
                return list(cur.fetchall())

            started = time.time()
            run.started[rid] = started
            status = 200
            path = route.replace("{id}", str(hut))
            if route == "/huts":
                send("SELECT id, name, altitude_m FROM huts ORDER BY name")
            elif route == "/huts/{id}":
                send("SELECT id, name, altitude_m FROM huts WHERE id = %s", (hut,))
                send("SELECT count(*) FROM bunks WHERE hut_id = %s", (hut,))
            elif route == LOOP_ROUTE:
                bunks = send(MDB_BUNKS_SQL, (hut,))
                for bunk, _label in bunks:
                    send(MDB_PER_BUNK_SQL, (bunk,))
                run.loops[rid] = len(bunks)
            else:  # POST /bookings, in a transaction
                send("START TRANSACTION")
                send(
                    "SELECT id FROM bunks WHERE hut_id = %s ORDER BY id LIMIT 1 FOR UPDATE", (hut,)
                )
                send(
                    "INSERT INTO bookings (bunk_id, guest, night) VALUES (%s, %s, %s)",
                    (hut * 10 + 1, f"Guest {n}", f"2026-07-{n:02d}"),
                )
                send("COMMIT")
                status = 201
            cur.close()
            ended = time.time()
            run.records.append(
                {
                    "timestamp": datetime.fromtimestamp(ended, UTC)
                    .isoformat(timespec="microseconds")
                    .replace("+00:00", "Z"),
                    "request_id": rid,
                    "method": method,
                    "route": route,
                    "path": path,
                    "status": status,
                    "elapsed_ms": round((ended - started) * 1000.0, 3),
                }
            )
    finally:
        for conn in pool:
            conn.close()


@pytest.fixture(scope="module")
def mdb_run(tmp_path_factory) -> MdbRun:
    pymysql = _pymysql()
    tmp = tmp_path_factory.mktemp("e2e_mdb")
    run = MdbRun()
    with mariadb_server(timezone="UTC") as server:
        _mdb_workload(pymysql, server.connect_kwargs(), run)
        slow = tmp / "slow.log"
        slow.write_bytes(server.stop().read_bytes())  # a clean shutdown writes every entry
    request_log = tmp / "requests.jsonl"
    request_log.write_text("".join(json.dumps(r) + "\n" for r in run.records), encoding="utf-8")
    run.lines = {p.name: _physical_lines(p) for p in (request_log, slow)}
    run.store = attrib.open(tmp / "store_mysql.duckdb")
    run.store.ingest(requests=[request_log], queries=[slow], tz="UTC")
    yield run
    run.store.close()


def test_ingest_mariadb_slow_log_links_exactly_the_statements_each_request_sent(mdb_run):
    # source: real MariaDB server output (slow log, long_query_time = 0)
    assert len(mdb_run.sent) == 12
    assert _linked_counts(mdb_run.store) == dict(mdb_run.sent)
    assert _mislinked(mdb_run.store) == 0


def test_ingest_mariadb_slow_log_accounts_for_every_line_and_rejects_none(mdb_run):
    # source: real MariaDB server output
    _assert_every_line_accounted(mdb_run.store, mdb_run.lines)
    sources = _sources(mdb_run.store)
    assert sources["slow.log"][0] == "mysql-slow"
    assert sources["requests.jsonl"][5] == 12


def test_nplus1_finds_the_mariadb_loop_with_its_parent_and_repeat_counts(mdb_run):
    # source: real MariaDB server output; expected values from the loops the workload ran
    findings = mdb_run.store.nplus1()
    assert list(findings["route"]) == [LOOP_ROUTE]
    row = findings.iloc[0]
    lengths = list(mdb_run.loops.values())
    assert sorted(lengths) == sorted(MDB_BUNKS.values())
    assert row["kind"] == "n_plus_one"
    assert row["child_template_id"] == _one_id(MDB_PER_BUNK_SQL, dialect="mysql")
    assert row["parent_template_id"] == _one_id(MDB_BUNKS_SQL, dialect="mysql")
    assert row["requests"] == 3
    assert row["repeats_max"] == max(MDB_BUNKS.values())
    assert row["repeats_mean"] == pytest.approx(mean(MDB_BUNKS.values()), abs=1e-12)


def test_ingest_mariadb_statements_fall_inside_their_request_window(mdb_run):
    # source: real MariaDB server output. The slow log's "SET timestamp=" is the statement's start
    # in whole seconds (see tests/test_readers_mysql_server.py), so a start can read up to 1 s early;
    # start + Query_time never passes the moment the client saw the reply.
    windows = _windows(mdb_run.store)
    assert set(windows) == set(mdb_run.sent)
    for rid, started in mdb_run.started.items():
        start_us, elapsed_ms, first_us, last_end_us = windows[rid]
        record = next(r for r in mdb_run.records if r["request_id"] == rid)
        assert elapsed_ms == record["elapsed_ms"]
        assert abs(start_us - started * 1_000_000) <= 2  # end - elapsed, both rounded to the µs
        assert first_us >= int(started) * 1_000_000, rid
        assert last_end_us <= start_us + elapsed_ms * 1000 + 2, rid
