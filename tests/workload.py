"""A small workload of our own against a PostgreSQL database: a mountain-hut booking site.

Tables: huts, bunks, trails, guests, bookings. :func:`run_workload` runs numbered "requests"
(``req-0001``, ...), each a known list of statements on one route, every statement tagged with a trailing
sqlcommenter comment ``/*request_id='req-0001',route='%2Fhuts%2F%7Bid%7D'*/``. It returns the ground
truth: per request the number of statements the server executes for it, its route, method, path, status,
start time and elapsed time; plus the untagged transaction-control statements it caused (BEGIN, ROLLBACK;
psycopg may add ``DEALLOCATE ALL`` after a rollback when it holds prepared statements).

Both protocols: ``protocol="simple"`` binds on the client (psycopg ``ClientCursor``, one simple-query
message per statement); ``protocol="extended"`` binds on the server (default cursor: parse/bind/execute;
after ``prepare_threshold`` = 5 runs of the same text psycopg switches to named prepared statements, and a
rolled-back transaction makes it send ``DEALLOCATE ALL``, after which names such as ``_pg3_0`` are reused).

Connections run with ``autocommit=True``, so psycopg sends no BEGIN/COMMIT of its own; the cancel route
opens an explicit transaction (BEGIN ... ROLLBACK) on purpose.
"""

from __future__ import annotations

import json
import time
from collections import Counter
from dataclasses import dataclass, field
from datetime import UTC, datetime, timedelta
from pathlib import Path
from urllib.parse import quote

import psycopg

SCHEMA = [
    """CREATE TABLE huts (
        id integer PRIMARY KEY, name text NOT NULL, region text NOT NULL, altitude_m integer NOT NULL)""",
    """CREATE TABLE bunks (
        id integer PRIMARY KEY, hut_id integer NOT NULL REFERENCES huts, label text NOT NULL,
        beds integer NOT NULL)""",
    """CREATE TABLE trails (
        id integer PRIMARY KEY, name text NOT NULL, from_hut integer REFERENCES huts,
        to_hut integer REFERENCES huts, km numeric(5,1) NOT NULL)""",
    """CREATE TABLE guests (id integer PRIMARY KEY, name text NOT NULL, email text UNIQUE NOT NULL)""",
    """CREATE TABLE bookings (
        id serial PRIMARY KEY, bunk_id integer NOT NULL REFERENCES bunks,
        guest_id integer NOT NULL REFERENCES guests, night date NOT NULL,
        status text NOT NULL DEFAULT 'confirmed', UNIQUE (bunk_id, night))""",
]

ROUTES = (
    ("GET", "/huts"),
    ("GET", "/huts/{id}"),
    ("GET", "/huts/{id}/bunks"),
    ("POST", "/bookings"),
    ("GET", "/trails/{id}"),
    ("POST", "/bookings/{id}/cancel"),
)
FIRST_NIGHT = datetime(2026, 7, 1).date()


@dataclass
class RequestTruth:
    """What one request sent."""

    request_id: str
    method: str
    route: str
    path: str
    status: int
    started: datetime
    elapsed_ms: float
    statements: int
    failed: int = 0


@dataclass
class Truth:
    """The ground truth of one workload run."""

    requests: list[RequestTruth] = field(default_factory=list)
    control: Counter[str] = field(default_factory=Counter)

    @property
    def counts(self) -> dict[str, int]:
        """request id -> statements the server executed for it (tagged with its comment)."""
        return {r.request_id: r.statements for r in self.requests}

    @property
    def routes(self) -> dict[str, str]:
        """request id -> route."""
        return {r.request_id: r.route for r in self.requests}


def tag(sql: str, request_id: str, route: str) -> str:
    """Append a sqlcommenter comment; ``%`` is doubled because psycopg reads ``%`` as placeholders.

    >>> tag("SELECT 1", "req-0001", "/huts/{id}")
    "SELECT 1 /*request_id='req-0001',route='%%2Fhuts%%2F%%7Bid%%7D'*/"
    """
    comment = f"/*request_id='{quote(request_id, safe='')}',route='{quote(route, safe='')}'*/"
    return f"{sql} {comment.replace('%', '%%')}"


def setup(conn: psycopg.Connection, *, huts: int = 6, bunks_per_hut: int = 8) -> None:
    """Create the tables and seed huts, bunks, trails, guests and some bookings (untagged)."""
    with conn.cursor() as cur:
        for ddl in SCHEMA:
            cur.execute(ddl)
        cur.execute(
            "INSERT INTO huts SELECT g, 'Hut ' || g, (ARRAY['north','south','east'])[1 + g %% 3],"
            " 1500 + 97 * g FROM generate_series(1, %s) g",
            [huts],
        )
        cur.execute(
            "INSERT INTO bunks SELECT (h - 1) * %s + b, h, 'B' || b, 2 + b %% 3"
            " FROM generate_series(1, %s) h, generate_series(1, %s) b",
            [bunks_per_hut, huts, bunks_per_hut],
        )
        cur.execute(
            "INSERT INTO trails SELECT g, 'Trail ' || g, g, 1 + g %% %s, 3.5 + g"
            " FROM generate_series(1, %s) g",
            [huts, huts],
        )
        cur.execute(
            "INSERT INTO guests SELECT g, 'Guest ' || g, 'guest' || g || '@example.org'"
            " FROM generate_series(1, 50) g"
        )
        cur.execute(
            "INSERT INTO bookings (bunk_id, guest_id, night)"
            " SELECT b.id, 1 + (b.id * 7 + d) %% 50, %s::date + d"
            " FROM bunks b, generate_series(0, 2) d",
            [FIRST_NIGHT],
        )


def run_workload(
    conninfo: str,
    *,
    requests: int = 24,
    protocol: str = "extended",
    loop: int = 8,
    batched: bool = False,
    first: int = 1,
    connections: int = 2,
    do_setup: bool = True,
    failing: bool = True,
) -> Truth:
    """Run ``requests`` requests round-robin over ``connections`` connections and return the truth.

    Args:
        conninfo: libpq connection string.
        requests: how many requests (routes cycle through :data:`ROUTES`).
        protocol: ``"simple"`` (client-side binding) or ``"extended"`` (server-side binding).
        loop: bunks per hut, i.e. the length of the N+1 loop on ``/huts/{id}/bunks``
            (only used with ``do_setup``; the database keeps what it was seeded with).
        batched: replace the per-bunk loop with one ``WHERE bunk_id = ANY(%s)`` query.
        first: number of the first request id (``req-0001`` for 1).
        connections: connections used round-robin (their log lines interleave).
        do_setup: create and seed the tables first.
        failing: let the first ``POST /bookings`` insert a duplicate booking (unique violation).
    """
    if protocol not in ("simple", "extended"):
        raise ValueError(f"protocol must be 'simple' or 'extended', not {protocol!r}")
    conns = [psycopg.connect(conninfo, autocommit=True) for _ in range(connections)]
    try:
        if do_setup:
            setup(conns[0], bunks_per_hut=loop)
        truth = Truth()
        site = _Site(protocol, batched, truth)
        failed_once = not failing
        for i in range(requests):
            number = first + i
            method, route = ROUTES[i % len(ROUTES)]
            fail = False
            if route == "/bookings" and not failed_once:
                fail, failed_once = True, True
            # Shift the connection each round so every route runs on every connection.
            conn = conns[(i + i // len(ROUTES)) % len(conns)]
            site.request(conn, f"req-{number:04d}", method, route, number, fail)
        return truth
    finally:
        for conn in conns:
            conn.close()


class _Site:
    """The handlers of the booking site; each statement goes through :meth:`_run`."""

    def __init__(self, protocol: str, batched: bool, truth: Truth) -> None:
        self.protocol = protocol
        self.batched = batched
        self.truth = truth

    def request(
        self, conn: psycopg.Connection, rid: str, method: str, route: str, n: int, fail: bool
    ) -> None:
        cur = psycopg.ClientCursor(conn) if self.protocol == "simple" else conn.cursor()
        hut = 1 + n % 6
        path = route.replace("{id}", str(hut if "huts" in route or "trails" in route else n))
        self.sent = 0
        self.failed = 0
        started = datetime.now(UTC)
        t0 = time.perf_counter()
        status = 200
        with cur:
            ctx = (cur, rid, route)
            if route == "/huts":
                self._run(ctx, "SELECT id, name, altitude_m FROM huts ORDER BY name LIMIT %s", [20])
            elif route == "/huts/{id}":
                self._run(ctx, "SELECT id, name, region, altitude_m FROM huts WHERE id = %s", [hut])
                self._run(
                    ctx,
                    "SELECT t.id, t.name, t.km FROM trails t WHERE t.from_hut = %s OR t.to_hut = %s",
                    [hut, hut],
                )
            elif route == "/huts/{id}/bunks":
                bunks = self._run(
                    ctx, "SELECT id, label, beds FROM bunks WHERE hut_id = %s ORDER BY id", [hut]
                )
                ids = [row[0] for row in bunks]
                if self.batched:
                    self._run(
                        ctx,
                        "SELECT bunk_id, night, status FROM bookings WHERE bunk_id = ANY(%s)",
                        [ids],
                    )
                else:
                    for bunk in ids:
                        self._run(
                            ctx,
                            "SELECT night, status FROM bookings WHERE bunk_id = %s ORDER BY night",
                            [bunk],
                        )
            elif route == "/bookings":
                guest = self._run(
                    ctx,
                    "SELECT id FROM guests WHERE email = %s",
                    [f"guest{1 + n % 50}@example.org"],
                )[0][0]
                night = FIRST_NIGHT if fail else FIRST_NIGHT + timedelta(days=10 + n)
                try:
                    self._run(
                        ctx,
                        "INSERT INTO bookings (bunk_id, guest_id, night) VALUES (%s, %s, %s)"
                        " RETURNING id",
                        [hut, guest, night],
                    )
                    status = 201
                except psycopg.errors.UniqueViolation:
                    self.failed += 1
                    status = 409
            elif route == "/trails/{id}":
                self._run(ctx, "SELECT id, name, km FROM trails WHERE id = %s", [hut])
            elif route == "/bookings/{id}/cancel":
                # A cancellation that changes its mind: the transaction is rolled back.
                with conn.transaction(force_rollback=True):
                    self.truth.control["BEGIN"] += 1
                    self._run(
                        ctx,
                        "SELECT id, status FROM bookings WHERE id = %s FOR UPDATE",
                        [n],
                    )
                    self._run(ctx, "UPDATE bookings SET status = 'cancelled' WHERE id = %s", [n])
                self.truth.control["ROLLBACK"] += 1
                status = 409
            else:  # pragma: no cover - ROUTES and this dispatch are kept in step
                raise ValueError(route)
        elapsed = (time.perf_counter() - t0) * 1000.0
        self.truth.requests.append(
            RequestTruth(rid, method, route, path, status, started, elapsed, self.sent, self.failed)
        )

    def _run(self, ctx: tuple, sql: str, params: list) -> list[tuple]:
        cur, rid, route = ctx
        self.sent += 1
        cur.execute(tag(sql, rid, route), params)
        return cur.fetchall() if cur.description else []


def write_request_log(truth: Truth, path: str | Path) -> Path:
    """Write the requests as JSON lines with ``timestamp`` = the request's END, UTC, ISO 8601.

    The requests-jsonl reader takes ``timestamp`` as the end of a request and its start as timestamp -
    elapsed_ms (docs/input-formats.md), so a store made from this file gets back each request's start
    to the microsecond. Fields: timestamp, request_id, method, route, path, status, elapsed_ms.
    """
    path = Path(path)
    with open(path, "w", encoding="utf-8") as fh:
        for r in truth.requests:
            elapsed_ms = round(r.elapsed_ms, 3)
            ended = r.started + timedelta(milliseconds=elapsed_ms)
            record = {
                "timestamp": ended.isoformat(timespec="microseconds").replace("+00:00", "Z"),
                "request_id": r.request_id,
                "method": r.method,
                "route": r.route,
                "path": r.path,
                "status": r.status,
                "elapsed_ms": elapsed_ms,
            }
            fh.write(json.dumps(record) + "\n")
    return path


def run_repeated_lookups(
    conninfo: str,
    *,
    requests: int = 3,
    repeats: int = 4,
    first: int = 901,
    protocol: str = "extended",
) -> Truth:
    """Requests on ``GET /guests/{id}`` that send the same statement with the same parameters repeatedly.

    Each request reads the guest once, then counts that guest's bookings ``repeats`` times with the same
    parameter (the page header, the sidebar, ... each ask again): a redundant repeat that a cache would
    remove. Needs the tables of :func:`setup`. Returns the ground truth like :func:`run_workload`.

    Args:
        conninfo: libpq connection string.
        requests: how many requests (request ids ``req-<first>``, ...).
        repeats: how often each request sends the repeated statement.
        first: number of the first request id.
        protocol: ``"simple"`` (client-side binding) or ``"extended"`` (server-side binding).
    """
    if protocol not in ("simple", "extended"):
        raise ValueError(f"protocol must be 'simple' or 'extended', not {protocol!r}")
    route = "/guests/{id}"
    truth = Truth()
    with psycopg.connect(conninfo, autocommit=True) as conn:
        for i in range(requests):
            number = first + i
            rid = f"req-{number:04d}"
            guest = 1 + number % 50
            cur = psycopg.ClientCursor(conn) if protocol == "simple" else conn.cursor()
            started = datetime.now(UTC)
            t0 = time.perf_counter()
            with cur:
                cur.execute(
                    tag("SELECT id, name, email FROM guests WHERE id = %s", rid, route), [guest]
                )
                cur.fetchall()
                for _ in range(repeats):
                    cur.execute(
                        tag("SELECT count(*) FROM bookings WHERE guest_id = %s", rid, route),
                        [guest],
                    )
                    cur.fetchall()
            elapsed = (time.perf_counter() - t0) * 1000.0
            truth.requests.append(
                RequestTruth(
                    rid, "GET", route, f"/guests/{guest}", 200, started, elapsed, 1 + repeats
                )
            )
    return truth
