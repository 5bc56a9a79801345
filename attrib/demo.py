"""Demo data: "Ridgeline", an invented mountain-hut booking site, its logs, and a first look at them.

:func:`generate` writes a JSON-lines request log and a PostgreSQL stderr statement log (Debian
``log_line_prefix = '%m [%p] %q%u@%d '``, ``log_min_duration_statement = 0``, sqlcommenter comments)
for a few simulated hours of traffic, with planted N+1 loops and redundant repeats, and returns what
was planted (:class:`DemoTruth`). It streams: memory stays flat however many requests are asked for.
:func:`run` also ingests the logs into a fresh store and summarises the findings (:class:`DemoSummary`).

Everything here is invented. Statement texts carry invented literal values (guest e-mails, names,
session tokens, search terms) on purpose, so that attrib's masking is exercised.

Line formats follow PostgreSQL 15 output captured from a real server (``duration: ... ms  statement:``,
TAB continuation lines, ERROR/DETAIL/STATEMENT groups, ``connection received``/``authorized``,
``disconnection``, ``checkpoint starting``/``complete``); see docs/demo.md.
"""

from __future__ import annotations

import bisect
import heapq
import math
import os
import time
from collections.abc import Callable
from dataclasses import dataclass
from datetime import UTC, datetime, timedelta
from pathlib import Path
from urllib.parse import quote

import numpy as np
import pandas as pd

__all__ = [
    "DemoRun",
    "DemoSummary",
    "DemoTruth",
    "PlantedPattern",
    "advice",
    "generate",
    "run",
    "summarise",
]

REQUESTS_FILE = "requests.jsonl"
QUERIES_FILE = "postgresql.log"
STORE_FILE = "demo.duckdb"
DEFAULT_START = "2026-11-30T06:00:00Z"


# --------------------------------------------------------------------------------------------------
# Results


@dataclass(frozen=True)
class PlantedPattern:
    """One planted N+1 loop or redundant repeat, and how often it ran.

    ``child_sql`` and ``parent_sql`` are statements exactly as one request sent them (literal values
    included, sqlcommenter comment left off): fingerprint them to get the template ids.
    ``lengths`` maps a run length (calls of the child in one request, at least 2) to the number of
    requests with that length.
    """

    method: str
    route: str
    kind: str  # "n_plus_one" or "redundant"
    child_sql: str
    parent_sql: str | None
    lengths: dict[int, int]

    def requests(self, min_repeats: int = 2) -> int:
        """Requests in which the child ran at least ``min_repeats`` times."""
        return sum(n for length, n in self.lengths.items() if length >= min_repeats)

    def repeats_mean(self, min_repeats: int = 2) -> float:
        """Mean calls of the child per request, over those requests."""
        runs = {k: n for k, n in self.lengths.items() if k >= min_repeats}
        return sum(k * n for k, n in runs.items()) / sum(runs.values()) if runs else 0.0


@dataclass(frozen=True)
class DemoTruth:
    """What :func:`generate` wrote and planted."""

    requests_path: Path
    queries_path: Path
    seed: int
    requests: int
    statements: int  # "duration: ... statement:" entries (each one execution)
    failed_statements: int  # ERROR groups: statements that did not complete
    request_lines: int
    query_lines: int  # physical lines of the statement log, continuation lines included
    other_lines: int  # connection, disconnection and checkpoint lines
    planted: tuple[PlantedPattern, ...]
    literals: tuple[
        str, ...
    ]  # a sample of string literals written into statements (privacy checks)
    seconds: float  # wall time spent generating


@dataclass(frozen=True)
class DemoSummary:
    """The first look at a store: top listings, plain-word advice and next commands."""

    routes: pd.DataFrame
    templates: pd.DataFrame
    nplus1: pd.DataFrame
    advice: tuple[str, ...]
    next_commands: tuple[str, ...]


@dataclass(frozen=True)
class DemoRun:
    """The result of :func:`run`."""

    truth: DemoTruth
    store_path: Path
    summary: DemoSummary
    ingest_seconds: float


# --------------------------------------------------------------------------------------------------
# Random draws: numpy Generator, consumed from pre-drawn blocks (one numpy call per 64k draws)


class _Draws:
    __slots__ = ("_rng", "_u", "_z")

    def __init__(self, rng: np.random.Generator) -> None:
        self._rng = rng
        self._u: list[float] = []
        self._z: list[float] = []

    def u(self) -> float:
        """Uniform on [0, 1)."""
        try:
            return self._u.pop()
        except IndexError:
            self._u = self._rng.random(1 << 16).tolist()
            return self._u.pop()

    def z(self) -> float:
        """Standard normal."""
        try:
            return self._z.pop()
        except IndexError:
            self._z = self._rng.standard_normal(1 << 16).tolist()
            return self._z.pop()

    def i(self, lo: int, hi: int) -> int:
        """Integer in [lo, hi)."""
        return lo + int(self.u() * (hi - lo))

    def pick(self, seq: tuple | list):
        return seq[int(self.u() * len(seq))]

    def chance(self, p: float) -> bool:
        return self.u() < p


# --------------------------------------------------------------------------------------------------
# Statement templates: SQL with %-placeholders, and a log-normal duration model


@dataclass(slots=True)
class _T:
    sql: str  # %-format; newlines as the application sends them
    med_us: float  # median duration
    sigma: float  # log-normal shape
    slow: float  # chance of a slow outlier (lock wait, cold cache)
    n: int = 0  # index in _TEMPLATES
    log: str = ""  # the same with PostgreSQL's TAB after each newline

    def __post_init__(self) -> None:
        self.log = self.sql.replace("\n", "\n\t")
        self.n = len(_TEMPLATES)
        _TEMPLATES.append(self)


_TEMPLATES: list[_T] = []


def _t(sql: str, ms: float, sigma: float = 0.45, slow: float = 0.002) -> _T:
    return _T(sql, ms * 1000.0, sigma, slow)


def _in(ids) -> str:
    return ", ".join(str(i) for i in ids)


def _q(text: str) -> str:
    """A SQL string literal body: single quotes doubled."""
    return text.replace("'", "''")


# Fixed templates. Names say route and purpose; values are filled in per request.
SESSION = _t(
    "SELECT s.guest_id, g.email, g.full_name, s.expires_at FROM sessions s "
    "JOIN guests g ON g.id = s.guest_id WHERE s.token = '%s' AND s.expires_at > now()",
    0.09,
)
SETTING = _t("SELECT value FROM settings WHERE key = '%s'", 0.035, 0.3)
HEALTH = _t("SELECT 1", 0.015, 0.3, 0.0)
FLAG = _t("SELECT enabled, rollout_pct FROM feature_flags WHERE name = '%s'", 0.03, 0.3)
PAGE_VIEW = _t(
    "INSERT INTO page_views (route, status, viewed_at) VALUES ('%s', %d, now())", 0.12, 0.5, 0.003
)
BEGIN = _t("BEGIN", 0.012, 0.3, 0.0)
COMMIT = _t("COMMIT", 0.9, 0.6, 0.004)
ROLLBACK = _t("ROLLBACK", 0.02, 0.3, 0.0)

HUT_PAGE = _t(
    "SELECT id, name, region_id, altitude_m, capacity, opens_on, closes_on, warden_name, "
    "description FROM huts WHERE id = %d",
    0.07,
)
HUT_AMENITIES = _t(
    "SELECT a.code, a.label FROM amenities a JOIN hut_amenities ha ON ha.amenity_id = a.id "
    "WHERE ha.hut_id = %d ORDER BY a.label",
    0.12,
)
HUT_WEATHER = _t(
    "SELECT issued_at, summary, avalanche_level FROM weather_bulletins WHERE region_id = %d "
    "ORDER BY issued_at DESC LIMIT 1",
    0.09,
)
HUT_REVIEW_STATS = _t("SELECT count(*), avg(stars) FROM reviews WHERE hut_id = %d", 0.35, 0.5)
HUT_TRAILS = _t(
    "SELECT id, name, grade, length_km FROM trails WHERE start_hut_id = %d OR end_hut_id = %d "
    "ORDER BY name",
    0.4,
)
HUT_BEDS = _t("SELECT count(*) FROM bunks WHERE hut_id = %d", 0.045, 0.35)
HUT_COVER = _t("SELECT url FROM photos WHERE hut_id = %d AND is_cover LIMIT 1", 0.04, 0.35)
HUT_NEARBY = _t(
    "SELECT id, name, altitude_m FROM huts WHERE region_id = %d AND id <> %d "
    "ORDER BY rating DESC NULLS LAST LIMIT 5",
    0.3,
)
HUT_BUNK_KINDS = _t("SELECT kind, count(*) FROM bunks WHERE hut_id = %d GROUP BY kind", 0.12)
HUT_WAITING = _t(
    "SELECT count(*) FROM waitlist_entries WHERE hut_id = %d AND offered_at IS NULL", 0.1
)

BUNKS_HUT = _t("SELECT id, name, capacity FROM huts WHERE id = %d", 0.06)
BUNKS_LIST = _t(
    "SELECT id, room, label, kind FROM bunks WHERE hut_id = %d ORDER BY room, label", 0.18
)
BUNK_NIGHTS = _t(
    "SELECT night, party_size, status FROM bookings WHERE bunk_id = %d "
    "AND night BETWEEN '%s' AND '%s' AND status <> 'cancelled'",
    0.11,
    0.5,
)

REVIEWS_PAGE = _t(
    "SELECT id, guest_id, stars, title, created_at FROM reviews WHERE hut_id = %d "
    "ORDER BY created_at DESC LIMIT 10 OFFSET %d",
    0.3,
)
REVIEWER = _t("SELECT display_name, country FROM guests WHERE id = %d", 0.05, 0.4)
REVIEWS_COUNT = _t("SELECT count(*) FROM reviews WHERE hut_id = %d", 0.2)

PHOTOS = _t(
    "SELECT id, url, caption, width, height FROM photos WHERE hut_id = %d ORDER BY position "
    "LIMIT 24",
    0.2,
)
PHOTO_LIKES = _t(
    "SELECT photo_id, count(*) FROM photo_likes WHERE photo_id IN (%s) GROUP BY photo_id", 0.6
)
PHOTO_ADD = _t(
    "INSERT INTO photos (hut_id, url, caption, width, height, position, uploaded_by) "
    "VALUES (%d, '%s', '%s', %d, %d, %d, %d) RETURNING id",
    0.5,
)

GEAR_LIST = _t(
    "SELECT id, kind, size, daily_rate, quantity FROM gear_items WHERE hut_id = %d "
    "AND retired_at IS NULL ORDER BY kind, size",
    0.15,
)
GEAR_ON_LOAN = _t(
    "SELECT r.gear_item_id, sum(r.qty) FROM gear_rentals r JOIN bookings b ON b.id = r.booking_id "
    "WHERE r.gear_item_id IN (%s) AND b.night = '%s' GROUP BY r.gear_item_id",
    0.7,
)
RENTAL_ROWS = {
    n: _t(
        "INSERT INTO gear_rentals (booking_id, gear_item_id, qty) VALUES "
        + ", ".join(["(%d, %d, %d)"] * n),
        0.3 + 0.05 * n,
    )
    for n in range(1, 5)
}
GEAR_LOAN_UPDATE = _t("UPDATE gear_items SET on_loan = on_loan + 1 WHERE id IN (%s)", 0.35)
RENTALS_OF = _t(
    "SELECT r.id, r.qty, g.kind, g.size, g.daily_rate FROM gear_rentals r "
    "JOIN gear_items g ON g.id = r.gear_item_id WHERE r.booking_id = %d",
    0.12,
)

SEARCH_TRAILS = _t(
    "SELECT id, name, grade FROM trails WHERE name ILIKE '%%%s%%' LIMIT 10", 2.5, 0.6
)
SEARCH_LOG = _t(
    "INSERT INTO search_log (term, results, searched_at) VALUES ('%s', %d, now())", 0.25
)

TRAIL = _t(
    "SELECT id, name, grade, length_km, ascent_m, start_hut_id, end_hut_id FROM trails "
    "WHERE id = %d",
    0.06,
)
TRAIL_HUTS = _t("SELECT id, name, altitude_m FROM huts WHERE id IN (%s)", 0.08)
TRAIL_POINTS = _t(
    "SELECT seq, lat, lon, elevation_m FROM trail_points WHERE trail_id = %d ORDER BY seq", 1.3, 0.6
)
CONDITIONS = _t(
    "SELECT reported_at, status, snow_cm, note FROM trail_conditions WHERE trail_id = %d "
    "ORDER BY reported_at DESC LIMIT 5",
    0.25,
)
CONDITION_ADD = _t(
    "INSERT INTO trail_conditions (trail_id, reporter_id, status, snow_cm, note, reported_at) "
    "VALUES (%d, %d, '%s', %d, '%s', now()) RETURNING id",
    0.45,
)
TRAIL_TOUCH = _t(
    "UPDATE trails SET last_condition = '%s', condition_updated_at = now() WHERE id = %d", 0.3
)

REGIONS = _t("SELECT id, name, slug FROM regions ORDER BY name", 0.05)
REGION_COUNTS = _t("SELECT region_id, count(*) FROM huts WHERE active GROUP BY region_id", 0.4)
BULLETINS = _t(
    "SELECT id, issued_at, valid_until, summary, avalanche_level, wind_kmh FROM weather_bulletins "
    "WHERE region_id = %d AND valid_until > '%s' ORDER BY issued_at DESC LIMIT 3",
    0.2,
)

BUNK_LOCK = _t("SELECT id, hut_id, kind FROM bunks WHERE id = %d FOR UPDATE", 0.1, 0.5, 0.01)
BUNK_TAKEN = _t(
    "SELECT count(*) FROM bookings WHERE bunk_id = %d AND night = '%s' AND status <> 'cancelled'",
    0.12,
)
BOOKING_ADD = _t(
    "INSERT INTO bookings (guest_id, hut_id, bunk_id, night, party_size, status, created_at) "
    "VALUES (%d, %d, %d, '%s', %d, 'confirmed', now()) RETURNING id",
    0.5,
)
BOOKING_EVENT = _t(
    "INSERT INTO booking_events (booking_id, kind, at) VALUES (%d, '%s', now())", 0.2
)
WAITLIST_CLEAR = _t(
    "DELETE FROM waitlist_entries WHERE guest_id = %d AND hut_id = %d AND night = '%s'", 0.2
)
BOOKING = _t(
    "SELECT b.id, b.night, b.party_size, b.status, h.name, k.label FROM bookings b "
    "JOIN huts h ON h.id = b.hut_id JOIN bunks k ON k.id = b.bunk_id WHERE b.id = %d",
    0.12,
)
BOOKING_LOCK = _t("SELECT id, guest_id, status FROM bookings WHERE id = %d FOR UPDATE", 0.1)
BOOKING_CANCEL = _t(
    "UPDATE bookings SET status = 'cancelled', cancelled_at = now() WHERE id = %d "
    "AND guest_id = %d",
    0.3,
)
WAITLIST_NEXT = _t(
    "SELECT id, guest_id FROM waitlist_entries WHERE hut_id = %d AND night = '%s' "
    "ORDER BY created_at LIMIT 1",
    0.15,
)
WAITLIST_OFFER = _t("UPDATE waitlist_entries SET offered_at = now() WHERE id = %d", 0.2)

TRIPS = _t(
    "SELECT id, hut_id, night, party_size, status FROM bookings WHERE guest_id = %d "
    "ORDER BY night DESC",
    0.25,
)
TRIP_HUT = _t("SELECT id, name, region_id, altitude_m FROM huts WHERE id = %d", 0.055, 0.4)
GUEST = _t("SELECT id, email, full_name, country, created_at FROM guests WHERE id = %d", 0.06)
GUEST_BOOKINGS = _t(
    "SELECT count(*) FROM bookings WHERE guest_id = %d AND status = 'confirmed'", 0.15
)
GUEST_REVIEWS = _t("SELECT count(*) FROM reviews WHERE guest_id = %d", 0.1)
EMAIL_TAKEN = _t("SELECT 1 FROM guests WHERE lower(email) = lower('%s')", 0.3)
GUEST_ADD = _t(
    "INSERT INTO guests (email, full_name, country, password_hash, created_at) "
    "VALUES ('%s', '%s', '%s', '%s', now()) RETURNING id",
    0.6,
)
LOGIN = _t("SELECT id, password_hash, locked_until FROM guests WHERE email = '%s'", 0.08)
SESSION_ADD = _t("INSERT INTO sessions (token, guest_id, expires_at) VALUES ('%s', %d, '%s')", 0.3)
GUEST_SEEN = _t("UPDATE guests SET last_seen_at = now() WHERE id = %d", 0.25)
ME_WAITLIST = _t("SELECT count(*) FROM waitlist_entries WHERE guest_id = %d", 0.08)
ME_UPCOMING = _t(
    "SELECT id, hut_id, night FROM bookings WHERE guest_id = %d AND night >= '%s' "
    "ORDER BY night LIMIT 3",
    0.15,
)
STAYED = _t(
    "SELECT 1 FROM bookings WHERE guest_id = %d AND hut_id = %d AND status = 'completed' LIMIT 1",
    0.12,
)
REVIEW_ADD = _t(
    "INSERT INTO reviews (hut_id, guest_id, stars, title, body, created_at) "
    "VALUES (%d, %d, %d, '%s', '%s', now())",
    0.5,
)
HUT_RATING = _t(
    "UPDATE huts SET rating = (SELECT avg(stars) FROM reviews WHERE hut_id = %d) WHERE id = %d",
    1.1,
)
WAITLIST_ADD = _t(
    "INSERT INTO waitlist_entries (hut_id, guest_id, night, party_size, created_at) "
    "VALUES (%d, %d, '%s', %d, now()) ON CONFLICT (hut_id, guest_id, night) DO NOTHING",
    0.35,
)
WAITLIST_ENTRY = _t(
    "SELECT w.id, w.night, w.party_size, w.offered_at, h.name FROM waitlist_entries w "
    "JOIN huts h ON h.id = w.hut_id WHERE w.id = %d",
    0.1,
)
WAITLIST_POS = _t(
    "SELECT count(*) FROM waitlist_entries WHERE hut_id = %d AND night = '%s' AND id < %d", 0.2
)
STAFF_ROLE = _t("SELECT role FROM staff WHERE guest_id = %d", 0.05)
NIGHTS_BOOKED = _t(
    "SELECT count(*) FROM bookings WHERE night BETWEEN '%s' AND '%s' AND status = 'confirmed'",
    9.0,
    0.5,
)
AVAILABILITY = {
    party: _t(
        "SELECT hut_id, count(*) AS booked FROM bookings WHERE hut_id IN (%s) AND night = '%s' "
        "AND status <> 'cancelled'"
        + (" AND party_size <= %d" if party else "")
        + " GROUP BY hut_id",
        0.3,
        0.55,
    )
    for party in (False, True)
}
CAPACITY = _t("SELECT id, capacity FROM huts WHERE id IN (%s)", 0.07)

# Variant families: one template per combination of optional filters / columns (ORM-built queries).
_HUT_FILTERS = (
    ("region_id = %d", "region"),
    ("altitude_m >= %d", "altitude"),
    ("opens_on <= '%s' AND closes_on >= '%s'", "open"),
    ("capacity >= %d", "capacity"),
)
_HUT_SORTS = ("name", "altitude_m DESC, name", "rating DESC NULLS LAST, name")
HUT_LISTS = {
    (mask, sort): _t(
        "SELECT id, name, region_id, altitude_m, capacity, rating FROM huts WHERE "
        + " AND ".join(["active"] + [f for k, (f, _n) in enumerate(_HUT_FILTERS) if mask >> k & 1])
        + f" ORDER BY {sort} LIMIT 20 OFFSET %d",
        0.5 + 0.15 * bin(mask).count("1"),
        0.5,
    )
    for mask in range(16)
    for sort in _HUT_SORTS
}
HUT_COUNTS = {
    mask: _t(
        "SELECT count(*) FROM huts WHERE "
        + " AND ".join(["active"] + [f for k, (f, _n) in enumerate(_HUT_FILTERS) if mask >> k & 1]),
        0.3,
    )
    for mask in range(16)
}
_SEARCH_FILTERS = (
    "  AND h.altitude_m BETWEEN %d AND %d",
    "  AND h.region_id = %d",
    "  AND EXISTS (SELECT 1 FROM hut_amenities ha WHERE ha.hut_id = h.id AND ha.amenity_id = %d)",
    "  AND h.opens_on <= '%s' AND h.closes_on >= '%s'",
)
_SEARCH_SORTS = ("similarity(h.name, '%s') DESC", "h.rating DESC NULLS LAST")
SEARCHES = {
    (mask, sort): _t(
        "SELECT h.id, h.name, r.name AS region, h.altitude_m, h.rating\n"
        "FROM huts h\nJOIN regions r ON r.id = h.region_id\n"
        "WHERE (h.name ILIKE '%%%s%%' OR r.name ILIKE '%%%s%%')\n"
        + "".join(f + "\n" for k, f in enumerate(_SEARCH_FILTERS) if mask >> k & 1)
        + f"ORDER BY {_SEARCH_SORTS[sort]}\nLIMIT 25",
        5.0 + 1.5 * bin(mask).count("1"),
        0.8,
        0.004,
    )
    for mask in range(16)
    for sort in (0, 1)
}
_TRAIL_FILTERS = ("region_id = %d", "grade = '%s'", "length_km <= %d")
TRAIL_LISTS = {
    (mask, sort): _t(
        "SELECT id, name, grade, length_km, ascent_m FROM trails"
        + (" WHERE " if mask else "")
        + " AND ".join(f for k, f in enumerate(_TRAIL_FILTERS) if mask >> k & 1)
        + (" ORDER BY name" if sort == 0 else " ORDER BY length_km, name")
        + " LIMIT 50",
        0.6,
    )
    for mask in range(8)
    for sort in (0, 1)
}
_BOOKING_COLUMNS = (
    ("party_size = %d", "%d"),
    ("night = '%s'", "night"),
    ("arrival_time = '%s'", "time"),
    ("dietary_note = '%s'", "diet"),
    ("bunk_id = %d", "%d"),
)
BOOKING_UPDATES = {
    mask: _t(
        "UPDATE bookings SET "
        + ", ".join([c for k, (c, _v) in enumerate(_BOOKING_COLUMNS) if mask >> k & 1])
        + ", updated_at = now() WHERE id = %d",
        0.35,
    )
    for mask in range(1, 32)
}
_GUEST_COLUMNS = ("full_name = '%s'", "country = '%s'", "phone = '%s'", "newsletter = %s")
GUEST_UPDATES = {
    mask: _t(
        "UPDATE guests SET "
        + ", ".join(c for k, c in enumerate(_GUEST_COLUMNS) if mask >> k & 1)
        + " WHERE id = %d",
        0.3,
    )
    for mask in range(1, 16)
}
_ADMIN_FILTERS = (
    "country = '%s'",
    "created_at >= '%s'",
    "email ILIKE '%%%s%%'",
    "EXISTS (SELECT 1 FROM bookings b WHERE b.guest_id = guests.id)",
)
ADMIN_GUESTS = {
    (mask, sort): _t(
        "SELECT id, email, full_name, country, created_at FROM guests"
        + (" WHERE " if mask else "")
        + " AND ".join(f for k, f in enumerate(_ADMIN_FILTERS) if mask >> k & 1)
        + (" ORDER BY created_at DESC" if sort == 0 else " ORDER BY full_name")
        + " LIMIT 50 OFFSET %d",
        3.0 + 2.0 * bin(mask).count("1"),
        0.6,
    )
    for mask in range(16)
    for sort in (0, 1)
}
_PERIODS = ("day", "week", "month")
OCCUPANCY = {
    (period, by): _t(
        f"SELECT date_trunc('{period}', b.night) AS period, {by}.name,\n"
        "       count(*) AS nights, sum(b.party_size) AS guests,\n"
        "       round(100.0 * sum(b.party_size) / sum(h.capacity), 1) AS occupancy_pct\n"
        "FROM bookings b\n"
        "JOIN huts h ON h.id = b.hut_id\n"
        + ("JOIN regions region ON region.id = h.region_id\n" if by == "region" else "")
        + "WHERE b.night BETWEEN '%s' AND '%s'\n"
        "  AND b.status IN ('confirmed', 'completed')\n"
        f"GROUP BY 1, {by}.name\n"
        "ORDER BY 1, 2",
        {"day": 420.0, "week": 610.0, "month": 880.0}[period] * (1.3 if by == "region" else 1.0),
        0.35,
        0.0,
    )
    for period in _PERIODS
    for by in ("h", "region")
}

# Background worker (no request id in its comments)
JOB_EXPIRE = _t(
    "UPDATE bookings SET status = 'expired', updated_at = now() WHERE status = 'held' "
    "AND created_at < '%s' RETURNING id",
    4.0,
    0.5,
)
JOB_EXPIRE_EVENTS = _t(
    "INSERT INTO booking_events (booking_id, kind, at) SELECT id, 'expired', now() FROM bookings "
    "WHERE status = 'expired' AND updated_at > '%s'",
    2.0,
)
JOB_WAITING = _t(
    "SELECT id, hut_id, night FROM waitlist_entries WHERE offered_at IS NULL "
    "ORDER BY created_at LIMIT 50",
    1.5,
)
JOB_FREE_BEDS = _t(
    "SELECT h.capacity - count(b.id) FROM huts h LEFT JOIN bookings b ON b.hut_id = h.id "
    "AND b.night = '%s' AND b.status <> 'cancelled' WHERE h.id = %d GROUP BY h.capacity",
    0.4,
)
JOB_RATINGS = _t(
    "UPDATE huts SET rating = s.avg_stars, review_count = s.n\n"
    "FROM (SELECT hut_id, avg(stars) AS avg_stars, count(*) AS n\n"
    "      FROM reviews\n"
    "      GROUP BY hut_id) s\n"
    "WHERE s.hut_id = huts.id",
    38.0,
    0.3,
)
JOB_PRUNE = _t("DELETE FROM sessions WHERE expires_at < '%s'", 6.0, 0.6)
JOB_BULLETIN_ROWS = _t(
    "INSERT INTO weather_bulletins (region_id, issued_at, valid_until, summary, avalanche_level, "
    "wind_kmh) VALUES " + ", ".join(["(%d, '%s', '%s', '%s', %d, %d)"] * 8),
    1.2,
)
JOB_ANALYZE = _t("ANALYZE weather_bulletins", 9.0, 0.3, 0.0)

# --------------------------------------------------------------------------------------------------
# Invented world

N_REGIONS = 8
N_HUTS = 240
N_TRAILS = 520
N_GUESTS = 40_000
_REGION_WORDS = ("north", "lake", "col", "pine", "cirque", "spur", "plateau", "gorge")
_HUT_WORDS = (
    "alder", "birch", "cairn", "larch", "granite", "eagle", "marmot", "pika", "glacier", "scree",
    "heather", "juniper", "chamois", "ibex", "lynx", "saddle", "tarn", "moraine", "ridge", "edelweiss",
)  # fmt: skip
_FIRST = (
    "Mara", "Jonas", "Ines", "Tomas", "Lea", "Aurel", "Nika", "Pavel", "Signe", "Oskar", "Ruth",
    "Emil", "Vera", "Luca", "Maja", "Anton", "Greta", "Ivo", "Hanne", "Felix",
)  # fmt: skip
_LAST = (
    "Lindqvist", "Moser", "Berglund", "Kral", "Hofer", "Dunmore", "Vidal", "Okafor", "Strand",
    "Wieser", "Falk", "Ambros", "Castell", "Rainer", "Sorli", "Brennan", "Tanaka", "Eckhart",
)  # fmt: skip
_DOMAINS = ("example.net", "example.org", "example.com")
_COUNTRIES = ("AT", "CH", "DE", "FR", "IT", "SI", "NO", "GB", "NL", "CZ")
_CONDITIONS = ("clear", "icy", "snow", "mud", "closed", "rockfall")
_NOTES = (
    "Fresh snow above the col", "Ice on the north traverse", "Bridge repaired", "Muddy near the tarn",
    "Rockfall after the storm", "Trail markers renewed", "Fog on the ridge", "Dry and fast",
)  # fmt: skip
_REVIEW_TITLES = ("Great stay", "Cosy bunks", "Warden's soup!", "Cold night", "Stunning view")
_REVIEW_BODIES = (
    "Warm stove and a friendly warden.", "The warden's lentil soup was worth the climb.",
    "Bunk room was cold but the view made up for it.", "Booked late, still got a bed. Thanks!",
    "Loud snorers, bring earplugs.", "Sunrise from the terrace was unreal.",
)  # fmt: skip
_DIETS = ("vegetarian", "vegan", "no nuts", "gluten free", "none")
_ARRIVALS = ("14:00", "15:30", "17:00", "18:30", "20:00")
_GRADES = ("T1", "T2", "T3", "T4", "T5")
_WEATHER = ("Clear, light wind", "Snow showers, gusty", "Foehn, warm", "Low cloud, drizzle")


_STEPS = (7, 11, 13, 17, 19, 23, 29, 31, 37, 41, 43, 47)  # prime to N_HUTS: n < N_HUTS steps differ


def _guest_name(gid: int) -> str:
    return f"{_FIRST[gid * 7 % len(_FIRST)]} {_LAST[gid * 13 % len(_LAST)]}"


def _guest_email(gid: int) -> str:
    return f"guest{gid}@{_DOMAINS[gid % 3]}"


# --------------------------------------------------------------------------------------------------
# The simulation: requests in start order, statements timed inside them, lines merged by log time

_PG_USER = "ridge@ridgeline"
_WEB_HOST = "192.0.2.21"
_WORKER_HOST = "192.0.2.31"
_POOL_SIZE = 16
_POOL_LIFETIME_US = 45 * 60 * 1_000_000
_JOB_EVERY_US = 120 * 1_000_000
_CHECKPOINT_EVERY_US = 300 * 1_000_000
_CHECKPOINTER_PID = 61


_MS3 = [f"{i:03d}" for i in range(1000)]
_STATEMENT = " ms  statement: "


class _Sim:
    """State of one generation run; handlers call :meth:`q` to run statements."""

    def __init__(self, seed: int, start_us: int) -> None:
        rng = np.random.default_rng(seed)
        self.r = _Draws(rng)
        self.start_us = start_us
        # the world, drawn once
        bunks = np.clip(rng.lognormal(math.log(26), 0.5, N_HUTS), 6, 90).astype(int)
        self.hut_bunks = [0, *bunks.tolist()]
        self.hut_bunk_base = [0, *(np.cumsum(bunks) - bunks + 1).tolist()]
        self.hut_reviews = [0, *rng.integers(0, 160, N_HUTS).tolist()]
        self.hut_region = [0, *rng.integers(1, N_REGIONS + 1, N_HUTS).tolist()]
        self.trail_huts = [(0, 0)] + [
            (int(a), int(b)) for a, b in rng.integers(1, N_HUTS + 1, (N_TRAILS, 2))
        ]
        self.nights = [
            (datetime(2026, 12, 1) + timedelta(days=d)).strftime("%Y-%m-%d") for d in range(150)
        ]
        self._trips: dict[int, list[int]] = {}
        self._tokens: dict[int, str] = {}
        self.literals: dict[str, None] = {}
        # time formatting caches
        self._sec_pg: dict[int, str] = {}
        self._days: dict[int, str] = {}
        # per request
        self.t = 0
        self.pid = 0
        self.load = 1.0
        self.comment = ""
        self.out: list[tuple[int, str]] = []
        self.entries = 0  # log entries written; each is a statement, an error group or other
        self.failed = 0
        self.other_lines = 0
        self.plants: dict[tuple[str, str, str, int], list] = {}
        self.next_pid = 20_000 + int(rng.integers(0, 9_000))
        self.duration_rng = np.random.default_rng([seed, 2])
        self.bufs: list[list[float]] = [[] for _ in _TEMPLATES]
        self.block = [64] * len(_TEMPLATES)
        self.head = ""

    # ---- time text
    def _second(self, sec: int) -> str:
        """``YYYY-MM-DD HH:MM:SS`` of a Unix second (cached by second, dates by day)."""
        day, rest = divmod(sec, 86_400)
        date = self._days.get(day)
        if date is None:
            date = self._days[day] = datetime.fromtimestamp(day * 86_400, UTC).strftime("%Y-%m-%d")
        h, rest = divmod(rest, 3600)
        text = self._sec_pg[sec] = f"{date} {h:02d}:{rest // 60:02d}:{rest % 60:02d}"
        return text

    def pg_time(self, us: int) -> str:
        sec = us // 1_000_000
        text = self._sec_pg.get(sec) or self._second(sec)
        return f"{text}.{us // 1000 % 1000:03d} UTC"

    def iso_time(self, us: int) -> str:
        sec = us // 1_000_000
        text = self._sec_pg.get(sec) or self._second(sec)
        return f"{text[:10]}T{text[11:]}.{us // 1000 % 1000:03d}Z"

    # ---- statements
    def q(self, tpl: _T, *args) -> None:
        """Run one statement: advance the clock by app time and its duration, log it at its end."""
        self._run(((tpl, args),), 60, 200)

    def tx(self, tpl: _T) -> None:
        """Transaction control as a driver sends it: no sqlcommenter comment (so no request id)."""
        comment, self.comment = self.comment, ""
        self.q(tpl)
        self.comment = comment

    def loop(self, tpl: _T, arglists) -> None:
        """Run ``tpl`` once per argument tuple, back to back (shorter round trips than :meth:`q`)."""
        self._run(((tpl, args) for args in arglists), 50, 120)

    def seq(self, items: list[tuple[_T, tuple]]) -> None:
        """Run several statements back to back (shorter round trips than :meth:`q`)."""
        self._run(items, 50, 120)

    def _run(self, items, gap_us: int, gap_spread_us: int) -> None:
        """Log each (template, args) at its end: the clock advances by an app round trip of
        ``gap_us`` plus up to ``gap_spread_us`` µs, then by the statement's drawn duration."""
        bufs, load, t, append = self.bufs, self.load, self.t, self.out.append
        head, comment, cache, ms3 = self.head, self.comment, self._sec_pg, _MS3
        for tpl, args in items:
            buf = bufs[tpl.n] or self._refill(tpl)
            d = int(buf.pop() * load) + 1
            t += gap_us + (d * 7919) % gap_spread_us + d
            sec = t // 1_000_000
            append(
                (
                    t,
                    f"{cache.get(sec) or self._second(sec)}.{ms3[t // 1000 % 1000]}{head}"
                    f"{d // 1000}.{ms3[d % 1000]}{_STATEMENT}{tpl.log % args}{comment}",
                )
            )
        self.t = t

    def _refill(self, tpl: _T) -> list[float]:
        """Draw the next block of durations (µs, before load) of one template: log-normal with rare
        slow outliers."""
        size = self.block[tpl.n] = min(self.block[tpl.n] * 4, 1 << 15)
        rng = self.duration_rng
        d = tpl.med_us * np.exp(tpl.sigma * rng.standard_normal(size))
        slow = rng.random(size) < tpl.slow
        d[slow] *= 8.0 + 60.0 * rng.random(int(slow.sum()))
        buf = self.bufs[tpl.n] = d.tolist()
        return buf

    def fail(self, tpl: _T, args: tuple, error: str, detail: str | None = None) -> None:
        """A statement that ends in an ERROR: PostgreSQL logs ERROR, DETAIL and STATEMENT lines."""
        self.t += 30 + int(100 * self.r.u()) + int(tpl.med_us * (0.5 + self.r.u()))
        head = f"{self.pg_time(self.t)} [{self.pid}] {_PG_USER} "
        lines = [f"{head}ERROR:  {error}"]
        if detail:
            lines.append(f"{head}DETAIL:  {detail}")
        lines.append(f"{head}STATEMENT:  {tpl.log % args}{self.comment}")
        self.out.append((self.t, "\n".join(lines)))
        self.failed += 1

    def other(self, us: int, pid: int, who: str, message: str) -> None:
        """A non-statement line (``who`` is the ``%q%u@%d `` part, empty for background processes)."""
        self.out.append((us, f"{self.pg_time(us)} [{pid}] {who}LOG:  {message}"))
        self.other_lines += 1

    def connect(self, us: int, host: str, app: str) -> tuple[int, int]:
        """A new backend: connection received/authorized lines; returns (pid, port)."""
        self.next_pid += 1 + self.r.i(0, 40)
        pid, port = self.next_pid, self.r.i(40_000, 60_000)
        self.other(us, pid, "[unknown]@[unknown] ", f"connection received: host={host} port={port}")
        self.other(
            us + 400 + self.r.i(0, 300),
            pid,
            f"{_PG_USER} ",
            f"connection authorized: user=ridge database=ridgeline application_name={app}",
        )
        return pid, port

    def disconnect(self, us: int, pid: int, port: int, since_us: int, host: str) -> None:
        s = (us - since_us) // 1000
        h, rest = divmod(s, 3_600_000)
        m, rest = divmod(rest, 60_000)
        session = f"{h}:{m:02d}:{rest // 1000:02d}.{rest % 1000:03d}"
        self.other(
            us,
            pid,
            f"{_PG_USER} ",
            f"disconnection: session time: {session} user=ridge database=ridgeline "
            f"host={host} port={port}",
        )

    # ---- world helpers
    def hut(self) -> int:
        return 1 + int(N_HUTS * self.r.u() ** 2.2)

    def guest(self) -> int:
        return 1 + int(N_GUESTS * self.r.u() ** 1.6)

    def night(self) -> str:
        return self.nights[int(len(self.nights) * self.r.u() ** 1.5)]

    def token(self, gid: int) -> str:
        tok = self._tokens.get(gid)
        if tok is None:
            tok = f"{int(self.r.u() * 2**52):013x}{int(self.r.u() * 2**52):013x}"
            self._tokens[gid] = tok
            self.remember(tok)
        return tok

    def trips(self, gid: int) -> list[int]:
        """Huts of a guest's past and future trips (distinct huts)."""
        huts = self._trips.get(gid)
        if huts is None:
            n = min(int(-math.log(1.0 - self.r.u()) * 4.0), 24)
            first, step = self.r.i(1, N_HUTS + 1), self.r.pick(_STEPS)
            huts = [(first - 1 + k * step) % N_HUTS + 1 for k in range(n)]
            self._trips[gid] = huts
        return huts

    def remember(self, literal: str) -> None:
        if len(self.literals) < 5000:
            self.literals[literal] = None

    def plant(
        self,
        where: tuple[str, str, str],
        n: int,
        child: tuple[_T, tuple],
        parent: tuple[_T, tuple] | None = None,
    ) -> None:
        """Count one run, of length ``n``, of a planted loop/repeat at ``where`` = (method, route,
        kind); keep the first example of its statements."""
        key = (*where, child[0].n)
        entry = self.plants.get(key)
        if entry is None:
            entry = self.plants[key] = [{}, None, None]
        if n >= 2:
            entry[0][n] = entry[0].get(n, 0) + 1
            if entry[1] is None:
                entry[1] = child[0].sql % child[1]
                entry[2] = None if parent is None else parent[0].sql % parent[1]


_UNITS_X5 = [("altitude_units",)] * 5


def _settings_x5(s: _Sim, route: str) -> None:
    # Planted redundant repeat: a settings helper called by five template fragments, never cached.
    s.loop(SETTING, _UNITS_X5)
    s.plant(("GET", route, "redundant"), 5, (SETTING, ("altitude_units",)))


def _session(s: _Sim, gid: int, times: int = 1, route: str | None = None) -> None:
    tok = s.token(gid)
    s.loop(SESSION, [(tok,)] * times)
    if route is not None:
        s.plant(("GET", route, "redundant"), times, (SESSION, (tok,)))


# ---- route handlers: each runs its statements and returns (path, status)


def _healthz(s: _Sim):
    s.q(HEALTH)
    return "/healthz", 200


def _huts(s: _Sim):
    r = s.r
    _settings_x5(s, "/huts")
    mask = sum(1 << k for k in range(4) if r.chance(0.3))
    sort = r.pick(_HUT_SORTS) if r.chance(0.4) else _HUT_SORTS[0]
    args: list = []
    query = []
    if mask & 1:
        region = r.i(1, N_REGIONS + 1)
        args.append(region)
        query.append(f"region={region}")
    if mask & 2:
        alt = 100 * r.i(8, 25)
        args.append(alt)
        query.append(f"min_altitude={alt}")
    if mask & 4:
        night = s.night()
        args += [night, night]
        query.append(f"open_on={night}")
    if mask & 8:
        cap = r.pick((10, 20, 40))
        args.append(cap)
        query.append(f"min_beds={cap}")
    page = 0 if r.chance(0.7) else r.i(1, 6)
    s.q(HUT_LISTS[mask, sort], *args, page * 20)
    s.q(HUT_COUNTS[mask], *args)
    # Planted N+1 (two children): each hut card asks for its bed count and its cover photo.
    n = 20 if page < 3 and r.chance(0.8) else r.i(2, 20)
    first = s.hut()
    listed = [(first - 1 + 13 * k) % N_HUTS + 1 for k in range(n)]
    s.seq([item for h in listed for item in ((HUT_BEDS, (h,)), (HUT_COVER, (h,)))])
    parent = (HUT_LISTS[mask, sort], (*args, page * 20))
    s.plant(("GET", "/huts", "n_plus_one"), n, (HUT_BEDS, (listed[0],)), parent)
    s.plant(("GET", "/huts", "n_plus_one"), n, (HUT_COVER, (listed[0],)), parent)
    if page:
        query.append(f"page={page + 1}")
    return "/huts" + ("?" + "&".join(query) if query else ""), 200


def _hut(s: _Sim):
    _settings_x5(s, "/huts/{id}")
    h = s.hut() if s.r.chance(0.97) else N_HUTS + s.r.i(1, 500)
    s.q(HUT_PAGE, h)
    if h > N_HUTS:
        return f"/huts/{h}", 404
    s.q(HUT_AMENITIES, h)
    s.q(HUT_WEATHER, s.hut_region[h])
    s.q(HUT_REVIEW_STATS, h)
    s.q(HUT_TRAILS, h, h)
    s.q(PHOTOS, h)
    s.q(HUT_NEARBY, s.hut_region[h], h)
    s.q(HUT_BUNK_KINDS, h)
    s.q(GEAR_LIST, h)
    s.q(HUT_WAITING, h)
    return f"/huts/{h}", 200


def _hut_bunks(s: _Sim):
    # Planted N+1: one bookings query per bunk of the hut.
    h = s.hut()
    first = s.r.i(0, 140)
    night_from, night_to = s.nights[first], s.nights[min(first + s.r.i(1, 8), 149)]
    s.q(BUNKS_HUT, h)
    s.q(BUNKS_LIST, h)
    base, n = s.hut_bunk_base[h], s.hut_bunks[h]
    s.loop(BUNK_NIGHTS, [(b, night_from, night_to) for b in range(base, base + n)])
    s.plant(
        ("GET", "/huts/{id}/bunks", "n_plus_one"),
        n,
        (BUNK_NIGHTS, (base, night_from, night_to)),
        (BUNKS_LIST, (h,)),
    )
    return f"/huts/{h}/bunks?from={night_from}&to={night_to}", 200


def _hut_reviews(s: _Sim):
    # Planted N+1: one guest query per review on the page (distinct reviewers).
    h = s.hut()
    pages = max(1, math.ceil(s.hut_reviews[h] / 10))
    page = 0 if s.r.chance(0.8) else s.r.i(0, pages)
    s.q(REVIEWS_PAGE, h, page * 10)
    n = max(0, min(10, s.hut_reviews[h] - page * 10))
    first = s.r.i(1, N_GUESTS - 10 * 97)
    s.loop(REVIEWER, [(first + 97 * k,) for k in range(n)])
    s.plant(
        ("GET", "/huts/{id}/reviews", "n_plus_one"),
        n,
        (REVIEWER, (first,)),
        (REVIEWS_PAGE, (h, page * 10)),
    )
    s.q(REVIEWS_COUNT, h)
    return f"/huts/{h}/reviews" + (f"?page={page + 1}" if page else ""), 200


def _hut_photos(s: _Sim):
    h = s.hut()
    s.q(PHOTOS, h)
    n = 1 + (h * 7) % 24
    s.q(PHOTO_LIKES, _in(range(h * 100, h * 100 + n)))
    return f"/huts/{h}/photos", 200


def _hut_photo_add(s: _Sim):
    h, gid = s.hut(), s.guest()
    _session(s, gid)
    caption = s.r.pick(_NOTES)
    s.q(PHOTO_ADD, h, f"https://img.ridgeline.example/{h}/{s.r.i(10**6, 10**7)}.jpg", _q(caption),
        4032, 3024, s.r.i(1, 40), gid)  # fmt: skip
    s.remember(caption)
    return f"/huts/{h}/photos", 201


def _hut_gear(s: _Sim):
    h = s.hut()
    s.q(GEAR_LIST, h)
    s.q(GEAR_ON_LOAN, _in(range(h * 10, h * 10 + 1 + h % 9)), s.night())
    return f"/huts/{h}/gear", 200


def _search(s: _Sim):
    r = s.r
    term = r.pick(_HUT_WORDS) if r.chance(0.8) else r.pick(_REGION_WORDS)
    mask = sum(1 << k for k in range(4) if r.chance(0.25))
    sort = 0 if r.chance(0.7) else 1
    args: list = [term, term]
    if mask & 1:
        lo = 100 * r.i(8, 20)
        args += [lo, lo + 100 * r.i(2, 12)]
    if mask & 2:
        args.append(r.i(1, N_REGIONS + 1))
    if mask & 4:
        args.append(r.i(1, 30))
    if mask & 8:
        night = s.night()
        args += [night, night]
    if sort == 0:
        args.append(term)
    s.q(SEARCHES[mask, sort], *args)
    # Planted N+1: the result list asks for each hut's cover photo.
    n = int(25 * r.u() ** (1.0 + bin(mask).count("1")))
    first = r.i(1, N_HUTS + 1)
    found = [((first - 1 + 17 * k) % N_HUTS + 1,) for k in range(n)]
    s.loop(HUT_COVER, found)
    if found:
        s.plant(
            ("GET", "/search", "n_plus_one"),
            n,
            (HUT_COVER, found[0]),
            (SEARCHES[mask, sort], tuple(args)),
        )
    s.q(SEARCH_TRAILS, term)
    s.q(SEARCH_LOG, term, r.i(0, 26))
    s.remember(term)
    return f"/search?q={term}", 200


def _trails(s: _Sim):
    r = s.r
    mask = sum(1 << k for k in range(3) if r.chance(0.35))
    args: list = []
    if mask & 1:
        args.append(r.i(1, N_REGIONS + 1))
    if mask & 2:
        args.append(r.pick(_GRADES))
    if mask & 4:
        args.append(r.i(5, 30))
    s.q(TRAIL_LISTS[mask, 0 if r.chance(0.8) else 1], *args)
    return "/trails", 200


def _trail(s: _Sim):
    tr = s.r.i(1, N_TRAILS + 1)
    s.q(TRAIL, tr)
    a, b = s.trail_huts[tr]
    s.q(TRAIL_HUTS, _in((a, b)))
    s.q(TRAIL_POINTS, tr)
    return f"/trails/{tr}", 200


def _trail_conditions(s: _Sim):
    tr = s.r.i(1, N_TRAILS + 1)
    s.q(TRAIL, tr)
    s.q(CONDITIONS, tr)
    return f"/trails/{tr}/conditions", 200


def _trail_report(s: _Sim):
    tr, gid = s.r.i(1, N_TRAILS + 1), s.guest()
    _session(s, gid)
    status, note = s.r.pick(_CONDITIONS), s.r.pick(_NOTES)
    s.tx(BEGIN)
    s.q(CONDITION_ADD, tr, gid, status, s.r.i(0, 120), _q(note))
    s.q(TRAIL_TOUCH, status, tr)
    s.tx(COMMIT)
    s.remember(note)
    return f"/trails/{tr}/conditions", 201


def _regions(s: _Sim):
    s.q(REGIONS)
    s.q(REGION_COUNTS)
    return "/regions", 200


def _region_weather(s: _Sim):
    region = s.r.i(1, N_REGIONS + 1)
    s.q(BULLETINS, region, s.iso_time(s.t)[:10])
    return f"/regions/{region}/weather", 200


def _booking_add(s: _Sim):
    r = s.r
    gid, h = s.guest(), s.hut()
    bunk = s.hut_bunk_base[h] + r.i(0, s.hut_bunks[h])
    night, party = s.night(), r.i(1, 5)
    _session(s, gid)
    s.tx(BEGIN)
    s.q(BUNK_LOCK, bunk)
    s.q(BUNK_TAKEN, bunk, night)
    if r.chance(0.04):
        s.fail(
            BOOKING_ADD,
            (gid, h, bunk, night, party),
            'duplicate key value violates unique constraint "bookings_bunk_id_night_key"',
            f"Key (bunk_id, night)=({bunk}, {night}) already exists.",
        )
        s.tx(ROLLBACK)
        return "/bookings", 409
    s.q(BOOKING_ADD, gid, h, bunk, night, party)
    booking = 100_000 + r.i(0, 900_000)
    s.q(BOOKING_EVENT, booking, "created")
    if r.chance(0.3):
        n = r.i(1, 5)
        rows = []
        for k in range(n):
            rows += [booking, h * 10 + k, r.i(1, 3)]
        s.q(RENTAL_ROWS[n], *rows)
    if r.chance(0.2):
        s.q(WAITLIST_CLEAR, gid, h, night)
    s.tx(COMMIT)
    return "/bookings", 201


def _booking(s: _Sim):
    # Planted redundant repeat: the current-user lookup runs in middleware, view and template.
    gid, booking = s.guest(), 100_000 + s.r.i(0, 900_000)
    _session(s, gid, 3, "/bookings/{id}")
    s.q(BOOKING, booking)
    if s.r.chance(0.02):
        return f"/bookings/{booking}", 404
    s.q(RENTALS_OF, booking)
    return f"/bookings/{booking}", 200


def _booking_change(s: _Sim):
    r = s.r
    gid, booking = s.guest(), 100_000 + r.i(0, 900_000)
    _session(s, gid)
    mask = 0
    while not mask:
        mask = sum(1 << k for k in range(5) if r.chance(0.3))
    args: list = []
    for k, (_col, kind) in enumerate(_BOOKING_COLUMNS):
        if mask >> k & 1:
            if kind == "night":
                args.append(s.night())
            elif kind == "time":
                args.append(r.pick(_ARRIVALS))
            elif kind == "diet":
                args.append(r.pick(_DIETS))
            else:
                args.append(r.i(1, 6) if k == 0 else r.i(1, 4000))
    s.tx(BEGIN)
    s.q(BOOKING_LOCK, booking)
    s.q(BOOKING_UPDATES[mask], *args, booking)
    s.q(BOOKING_EVENT, booking, "changed")
    s.tx(COMMIT)
    return f"/bookings/{booking}", 200


def _booking_cancel(s: _Sim):
    gid, booking, h = s.guest(), 100_000 + s.r.i(0, 900_000), s.hut()
    _session(s, gid)
    s.tx(BEGIN)
    s.q(BOOKING_CANCEL, booking, gid)
    night = s.night()
    s.q(WAITLIST_NEXT, h, night)
    if s.r.chance(0.5):
        s.q(WAITLIST_OFFER, s.r.i(1, 50_000))
    s.tx(COMMIT)
    return f"/bookings/{booking}", 204


def _trips(s: _Sim):
    # Planted N+1: one hut query per trip of the guest.
    gid = s.guest()
    _session(s, gid)
    s.q(TRIPS, gid)
    huts = s.trips(gid)
    s.loop(TRIP_HUT, [(h,) for h in huts])
    if huts:
        s.plant(
            ("GET", "/guests/{id}/trips", "n_plus_one"),
            len(huts),
            (TRIP_HUT, (huts[0],)),
            (TRIPS, (gid,)),
        )
    return f"/guests/{gid}/trips", 200


def _guest(s: _Sim):
    gid = s.guest()
    _session(s, gid)
    s.q(GUEST, gid)
    s.q(GUEST_BOOKINGS, gid)
    s.q(GUEST_REVIEWS, gid)
    return f"/guests/{gid}", 200


def _guest_change(s: _Sim):
    r = s.r
    gid = s.guest()
    _session(s, gid)
    mask = 0
    while not mask:
        mask = sum(1 << k for k in range(4) if r.chance(0.35))
    args: list = []
    if mask & 1:
        name = _guest_name(gid + r.i(1, 50))
        args.append(_q(name))
        s.remember(name)
    if mask & 2:
        args.append(r.pick(_COUNTRIES))
    if mask & 4:
        phone = f"+41 79 {r.i(100, 1000)} {r.i(10, 100)} {r.i(10, 100)}"
        args.append(phone)
        s.remember(phone)
    if mask & 8:
        args.append(r.pick(("true", "false")))
    s.q(GUEST_UPDATES[mask], *args, gid)
    return f"/guests/{gid}", 200


def _signup(s: _Sim):
    gid = N_GUESTS + s.r.i(1, 10_000_000)
    email, name = _guest_email(gid), _guest_name(gid)
    s.q(EMAIL_TAKEN, email)
    if s.r.chance(0.05):
        return "/guests", 409
    pw = f"pbkdf2_sha256$600000${int(s.r.u() * 2**52):013x}"
    s.q(GUEST_ADD, email, _q(name), s.r.pick(_COUNTRIES), pw)
    s.remember(email)
    s.remember(name)
    s.remember(pw)
    return "/guests", 201


def _login(s: _Sim):
    gid = s.guest()
    email = _guest_email(gid)
    s.q(LOGIN, email)
    s.remember(email)
    if s.r.chance(0.06):
        return "/sessions", 401
    tok = f"{int(s.r.u() * 2**52):013x}{int(s.r.u() * 2**52):013x}"
    s.q(SESSION_ADD, tok, gid, s.iso_time(s.t + 14 * 86_400_000_000)[:10])
    s.q(GUEST_SEEN, gid)
    s.remember(tok)
    return "/sessions", 201


def _me(s: _Sim):
    gid = s.guest()
    if s.r.chance(0.05):  # expired session: one lookup, then 401
        s.q(SESSION, s.token(gid))
        return "/me", 401
    _session(s, gid, 3, "/me")
    s.remember(_guest_email(gid))
    s.q(ME_WAITLIST, gid)
    s.q(ME_UPCOMING, gid, s.iso_time(s.t)[:10])
    return "/me", 200


def _review_add(s: _Sim):
    gid, h = s.guest(), s.hut()
    _session(s, gid)
    s.q(STAYED, gid, h)
    if s.r.chance(0.03):
        return "/reviews", 422
    title, body = s.r.pick(_REVIEW_TITLES), s.r.pick(_REVIEW_BODIES)
    s.q(REVIEW_ADD, h, gid, s.r.i(2, 6), _q(title), _q(body))
    s.q(HUT_RATING, h, h)
    s.remember(body)
    return "/reviews", 201


def _waitlist_add(s: _Sim):
    gid, h = s.guest(), s.hut()
    _session(s, gid)
    s.q(WAITLIST_ADD, h, gid, s.night(), s.r.i(1, 5))
    return "/waitlist", 201


def _waitlist_entry(s: _Sim):
    gid, entry = s.guest(), s.r.i(1, 50_000)
    _session(s, gid)
    s.q(WAITLIST_ENTRY, entry)
    s.q(WAITLIST_POS, s.hut(), s.night(), entry)
    return f"/waitlist/{entry}", 200


def _rental_add(s: _Sim):
    r = s.r
    gid, h, booking = s.guest(), s.hut(), 100_000 + r.i(0, 900_000)
    _session(s, gid)
    n = r.i(1, 5)
    rows: list = []
    for k in range(n):
        rows += [booking, h * 10 + k, r.i(1, 3)]
    s.tx(BEGIN)
    s.q(RENTAL_ROWS[n], *rows)
    s.q(GEAR_LOAN_UPDATE, _in(range(h * 10, h * 10 + n)))
    s.tx(COMMIT)
    return "/gear-rentals", 201


def _rental(s: _Sim):
    gid, booking = s.guest(), 100_000 + s.r.i(0, 900_000)
    _session(s, gid)
    s.q(RENTALS_OF, booking)
    return f"/gear-rentals/{booking}", 200


def _occupancy(s: _Sim):
    r = s.r
    gid = 1 + r.i(0, 12)  # staff accounts
    _session(s, gid)
    s.q(STAFF_ROLE, gid)
    period, by = r.pick(_PERIODS), ("h", "region")[r.i(0, 2)]
    a = r.i(0, 60)
    lo, hi = s.nights[a], s.nights[a + r.i(7, 89)]
    path = f"/admin/reports/occupancy?period={period}&by={'hut' if by == 'h' else 'region'}"
    if r.chance(0.03):
        s.t += 5_000_000  # statement_timeout = 5s
        s.fail(OCCUPANCY[period, by], (lo, hi), "canceling statement due to statement timeout")
        return path, 500
    s.q(OCCUPANCY[period, by], lo, hi)
    s.q(NIGHTS_BOOKED, lo, hi)
    return path, 200


def _admin_guests(s: _Sim):
    r = s.r
    staff = 1 + r.i(0, 12)
    _session(s, staff)
    s.q(STAFF_ROLE, staff)
    mask = sum(1 << k for k in range(4) if r.chance(0.3))
    args: list = []
    if mask & 1:
        args.append(r.pick(_COUNTRIES))
    if mask & 2:
        args.append(s.nights[r.i(0, 30)])
    if mask & 4:
        fragment = f"guest{r.i(1, 999)}"
        args.append(fragment)
        s.remember(fragment + "@")
    sort = 0 if r.chance(0.7) else 1
    s.q(ADMIN_GUESTS[mask, sort], *args, 50 * r.i(0, 10))
    return "/admin/guests", 200


def _availability(s: _Sim):
    r = s.r
    n = r.i(1, 31)
    first = s.hut()
    huts = [(first - 1 + 11 * k) % N_HUTS + 1 for k in range(n)]
    ids = _in(huts)
    s.q(CAPACITY, ids)
    # Planted N+1: one availability query per night asked for, where one query over the range would do.
    k = s.r.i(0, 140)
    nights = s.nights[k : k + r.i(1, 8)]
    if r.chance(0.35):
        party = r.i(1, 7)
        tpl, rows = AVAILABILITY[True], [(ids, night, party) for night in nights]
    else:
        tpl, rows = AVAILABILITY[False], [(ids, night) for night in nights]
    s.loop(tpl, rows)
    s.plant(
        ("GET", "/api/availability", "n_plus_one"), len(rows), (tpl, rows[0]), (CAPACITY, (ids,))
    )
    query = f"huts={','.join(map(str, huts))}&from={nights[0]}&nights={len(nights)}"
    return f"/api/availability?{query}" + (
        f"&party={party}" if tpl is AVAILABILITY[True] else ""
    ), 200


# (method, route, weight, non-database time median ms, its sigma, handler)
ROUTES: tuple[tuple[str, str, float, float, float, Callable], ...] = (
    ("GET", "/api/availability", 10.0, 2.5, 0.4, _availability),
    ("GET", "/huts", 18.0, 9.0, 0.4, _huts),
    ("GET", "/huts/{id}", 13.0, 12.0, 0.45, _hut),
    ("GET", "/huts/{id}/bunks", 11.0, 6.0, 0.4, _hut_bunks),
    ("GET", "/huts/{id}/reviews", 5.0, 7.0, 0.4, _hut_reviews),
    ("GET", "/huts/{id}/photos", 3.0, 5.0, 0.4, _hut_photos),
    ("GET", "/huts/{id}/gear", 2.0, 4.0, 0.4, _hut_gear),
    ("POST", "/huts/{id}/photos", 0.2, 420.0, 0.5, _hut_photo_add),  # object-store upload
    ("GET", "/search", 8.0, 14.0, 0.5, _search),
    ("GET", "/trails", 3.0, 6.0, 0.4, _trails),
    ("GET", "/trails/{id}", 4.0, 8.0, 0.4, _trail),
    ("GET", "/trails/{id}/conditions", 5.0, 160.0, 0.6, _trail_conditions),  # weather service
    ("POST", "/trails/{id}/conditions", 0.6, 8.0, 0.4, _trail_report),
    ("GET", "/regions", 1.0, 3.0, 0.3, _regions),
    ("GET", "/regions/{id}/weather", 3.0, 5.0, 0.4, _region_weather),
    ("POST", "/bookings", 2.5, 22.0, 0.5, _booking_add),  # confirmation e-mail queued
    ("GET", "/bookings/{id}", 3.0, 6.0, 0.4, _booking),
    ("PATCH", "/bookings/{id}", 0.8, 6.0, 0.4, _booking_change),
    ("DELETE", "/bookings/{id}", 0.5, 6.0, 0.4, _booking_cancel),
    ("GET", "/guests/{id}/trips", 3.0, 7.0, 0.4, _trips),
    ("GET", "/guests/{id}", 1.5, 5.0, 0.4, _guest),
    ("PATCH", "/guests/{id}", 0.5, 5.0, 0.4, _guest_change),
    ("POST", "/guests", 0.6, 85.0, 0.2, _signup),  # password hashing
    ("POST", "/sessions", 1.5, 75.0, 0.2, _login),  # password check
    ("GET", "/me", 4.0, 4.0, 0.4, _me),
    ("POST", "/reviews", 0.7, 7.0, 0.4, _review_add),
    ("POST", "/waitlist", 0.6, 5.0, 0.4, _waitlist_add),
    ("GET", "/waitlist/{id}", 0.4, 4.0, 0.4, _waitlist_entry),
    ("POST", "/gear-rentals", 0.5, 6.0, 0.4, _rental_add),
    ("GET", "/gear-rentals/{id}", 0.4, 4.0, 0.4, _rental),
    ("GET", "/admin/reports/occupancy", 0.15, 30.0, 0.4, _occupancy),
    ("GET", "/admin/guests", 0.2, 12.0, 0.4, _admin_guests),
    ("GET", "/healthz", 2.0, 0.4, 0.3, _healthz),
)

_JOBS = ("expire_holds", "promote_waitlist", "refresh_ratings", "prune_sessions", "import_weather")


def _job(s: _Sim, at: int, k: int) -> None:
    """One run of the background worker: its own connection, statements without a request id."""
    name = _JOBS[k % len(_JOBS)]
    pid, port = s.connect(at, _WORKER_HOST, "ridgeline-worker")
    s.pid, s.t, s.load = pid, at + 1_500, 1.0
    s.head = f" UTC [{pid}] {_PG_USER} LOG:  duration: "
    s.comment = f" /*application='ridgeline-worker',job='{name}'*/"
    when = s.iso_time(at - 900_000_000).replace("T", " ")[:19]
    if name == "expire_holds":
        s.tx(BEGIN)
        s.q(JOB_EXPIRE, when)
        s.q(JOB_EXPIRE_EVENTS, when)
        s.tx(COMMIT)
    elif name == "promote_waitlist":
        s.q(JOB_WAITING)
        for _ in range(s.r.i(5, 50)):
            s.q(JOB_FREE_BEDS, s.night(), s.hut())
    elif name == "refresh_ratings":
        s.q(JOB_RATINGS)
    elif name == "prune_sessions":
        s.q(JOB_PRUNE, when)
    else:
        day = s.iso_time(at)[:10]
        rows: list = []
        for region in range(1, N_REGIONS + 1):
            rows += [region, when, day + " 18:00:00", s.r.pick(_WEATHER), s.r.i(1, 5), s.r.i(0, 90)]
        s.tx(BEGIN)
        s.q(JOB_BULLETIN_ROWS, *rows)
        s.tx(COMMIT)
        s.q(JOB_ANALYZE)
    s.disconnect(s.t + 200, pid, port, at, _WORKER_HOST)


def _checkpoint(s: _Sim, at: int) -> None:
    """A timed checkpoint: 'starting' now, 'complete' about 270 s later (checkpoint_completion_target
    0.9 of the default 5 min checkpoint_timeout)."""
    r = s.r
    s.other(at, _CHECKPOINTER_PID, "", "checkpoint starting: time")
    buffers = r.i(300, 6000)
    write = 269_000 + r.i(0, 900)
    sync = r.i(2, 60)
    files = r.i(12, 80)
    dist = buffers * 8 + r.i(0, 2000)
    s.other(
        at + (write + sync + 5) * 1000,
        _CHECKPOINTER_PID,
        "",
        f"checkpoint complete: wrote {buffers} buffers ({100 * buffers / 16384:.1f}%); "
        f"0 WAL file(s) added, 0 removed, {r.i(0, 3)} recycled; write={write // 1000}.{write % 1000:03d} s, "
        f"sync=0.{sync:03d} s, total={(write + sync + 5) // 1000}.{(write + sync + 5) % 1000:03d} s; "
        f"sync files={files}, longest=0.{min(sync, r.i(1, 20)):03d} s, average=0.001 s; "
        f"distance={dist} kB, estimate={dist + r.i(0, 500)} kB",
    )


def _arrivals(
    rng: np.random.Generator, n: int, start_us: int, hours: float
) -> tuple[np.ndarray, np.ndarray]:
    """Request start times (µs, sorted) on a morning ramp of a daily traffic curve, and the
    relative load (0..1] at each."""
    span = hours * 3600.0
    grid = np.linspace(0.0, span, 2001)
    clock = 6.0 + grid / 3600.0  # hours of the day, starting 06:00
    # relative rate: quiet early morning rising to a late-morning plateau (common practice, no source)
    rate = 0.25 + 0.75 / (1.0 + np.exp(-(clock - 7.5) * 2.2)) + 0.08 * np.sin(clock * 2.1)
    cdf = np.concatenate([[0.0], np.cumsum((rate[1:] + rate[:-1]) / 2.0)])
    cdf /= cdf[-1]
    offsets = np.interp(np.sort(rng.random(n)), cdf, grid)
    return start_us + (offsets * 1e6).astype(np.int64), np.interp(offsets, grid, rate / rate.max())


def generate(
    out_dir: str | os.PathLike[str],
    *,
    seed: int = 7,
    requests: int = 30_000,
    hours: float = 3.0,
    start: str = DEFAULT_START,
) -> DemoTruth:
    """Write ``requests.jsonl`` and ``postgresql.log`` for the Ridgeline scenario into ``out_dir``.

    Args:
        out_dir: folder for the two logs (created if missing; files there are overwritten).
        seed: seed of the numpy random generator; the same seed gives identical bytes.
        requests: number of web requests (about 6 statements each).
        hours: simulated time span, starting at ``start``.
        start: ISO 8601 UTC time of the first moment simulated.

    Returns:
        A :class:`DemoTruth` with the paths, line counts and the planted patterns.

    >>> import tempfile
    >>> with tempfile.TemporaryDirectory() as folder:
    ...     t = generate(folder, requests=50)
    >>> t.requests, t.request_lines
    (50, 50)
    """
    if requests < 1:
        raise ValueError("requests must be at least 1")
    began = time.perf_counter()
    out = Path(out_dir)
    out.mkdir(parents=True, exist_ok=True)
    start_us = int(datetime.fromisoformat(start.replace("Z", "+00:00")).timestamp() * 1_000_000)
    s = _Sim(seed, start_us)
    rng = np.random.default_rng([seed, 1])
    starts, loads = _arrivals(rng, requests, start_us, hours)
    weights = np.array([r[2] for r in ROUTES])
    route_idx = rng.choice(len(ROUTES), size=requests, p=weights / weights.sum())
    comments = [
        "/*request_id='r-{:06d}',route='" + quote(route, safe="") + "'*/"
        for _m, route, *_ in ROUTES
    ]

    # the web tier's connection pool: (free_at, slot, pid, port, connected_at)
    pool = []
    for slot in range(_POOL_SIZE):
        at = start_us - 4_000_000 + slot * 9_000
        pid, port = s.connect(at, _WEB_HOST, "ridgeline-web")
        pool.append((at + 1_000, slot, pid, port, at))
    heapq.heapify(pool)
    next_job, job_k = start_us + 45_000_000, 0
    next_ckpt = start_us + 17_000_000
    request_lines = query_lines = 0
    starts_l, loads_l, idx_l = starts.tolist(), loads.tolist(), route_idx.tolist()

    with (
        open(out / REQUESTS_FILE, "w", encoding="utf-8", newline="\n") as req_f,
        open(out / QUERIES_FILE, "w", encoding="utf-8", newline="\n") as pg_f,
    ):
        req_out: list[tuple[int, str]] = []  # (end time, line): loggers write at response end
        for i in range(requests):
            t0 = starts_l[i]
            while next_job <= t0 or next_ckpt <= t0:
                if next_job <= next_ckpt:
                    _job(s, next_job, job_k)
                    job_k += 1
                    next_job += _JOB_EVERY_US
                else:
                    _checkpoint(s, next_ckpt)
                    next_ckpt += _CHECKPOINT_EVERY_US
            k = idx_l[i]
            method, route, _w, nondb_ms, nondb_sigma, handler = ROUTES[k]
            r = s.r
            nondb = nondb_ms * 1000.0 * math.exp(nondb_sigma * r.z())
            if r.u() < 0.003:  # a GC pause or a slow upstream call
                nondb *= 5.0 + 30.0 * r.u()
            free_at, slot, pid, port, since = heapq.heappop(pool)
            first = t0 + int(0.3 * nondb)
            if since + _POOL_LIFETIME_US < t0 and free_at <= t0:  # pool recycles an old backend
                s.disconnect(t0, pid, port, since, _WEB_HOST)
                pid, port = s.connect(t0 + 150, _WEB_HOST, "ridgeline-web")
                since, first = t0, max(first, t0 + 1_500)
            s.pid, s.t = pid, max(first, free_at)  # a busy pool makes the request wait
            s.head = f" UTC [{pid}] {_PG_USER} LOG:  duration: "
            s.load = 0.8 + 0.4 * loads_l[i]
            s.comment = " " + comments[k].format(i + 1)
            if handler is not _healthz:  # middleware: a feature flag before, a page view after
                s.q(FLAG, "bunk_map_v2")
                path, status = handler(s)
                s.q(PAGE_VIEW, route, status)
            else:
                path, status = handler(s)
            heapq.heappush(pool, (s.t + 50, slot, pid, port, since))
            t_end = s.t + int(0.7 * nondb) + 200
            elapsed = t_end - t0
            req_out.append(
                (
                    t_end,
                    f'{{"timestamp": "{s.iso_time(t_end)}", "request_id": "r-{i + 1:06d}", '
                    f'"method": "{method}", "route": "{route}", "path": "{path}", '
                    f'"status": {status}, "elapsed_ms": {elapsed // 1000}.{elapsed % 1000:03d}}}',
                )
            )
            if (i + 1) % 1024 == 0 and i + 1 < requests:
                # every later entry ends after the next request starts (or the next background event)
                cut = min(starts_l[i + 1], next_job, next_ckpt)
                request_lines += _flush(req_out, req_f, cut)[1]
                entries, lines = _flush(s.out, pg_f, cut)
                s.entries += entries
                query_lines += lines
        request_lines += _flush(req_out, req_f, None)[1]
        entries, lines = _flush(s.out, pg_f, None)
        s.entries += entries
        query_lines += lines

    planted = tuple(
        PlantedPattern(
            method=m,
            route=route,
            kind=kind,
            child_sql=child,
            parent_sql=parent,
            lengths=dict(sorted(lengths.items())),
        )
        for (m, route, kind, _n), (lengths, child, parent) in sorted(s.plants.items())
        if lengths
    )
    return DemoTruth(
        requests_path=out / REQUESTS_FILE,
        queries_path=out / QUERIES_FILE,
        seed=seed,
        requests=requests,
        statements=s.entries - s.failed - s.other_lines,
        failed_statements=s.failed,
        request_lines=request_lines,
        query_lines=query_lines,
        other_lines=s.other_lines,
        planted=planted,
        literals=tuple(s.literals),
        seconds=time.perf_counter() - began,
    )


def _flush(out: list[tuple[int, str]], f, cut: int | None) -> tuple[int, int]:
    """Write the buffered entries of ``out`` stamped before ``cut`` (all when None) in time order;
    return (entries, lines) written."""
    out.sort()  # by time; entries with equal times keep a fixed order (by their text)
    n = len(out) if cut is None else bisect.bisect_left(out, (cut,))
    if not n:
        return 0, 0
    text = "\n".join([entry for _t, entry in out[:n]]) + "\n"
    del out[:n]
    f.write(text)
    return n, text.count("\n")


# --------------------------------------------------------------------------------------------------
# The first look: top listings and plain-word advice (pure functions over the engine's DataFrames)

#: Columns shown in the text table of each listing (JSON and CSV carry every column).
TABLE_COLUMNS = {
    "routes": [
        "route", "requests", "queries_per_request_mean", "db_ms_total", "db_share",
        "db_fraction_p50", "elapsed_ms_p95",
    ],
    "templates": ["template_id", "template", "calls", "total_ms", "share", "p95_ms"],
    "nplus1": [
        "route", "kind", "child_template_id", "parent_template_id", "requests", "repeats_mean",
        "saving_ms_estimate",
    ],
}  # fmt: skip

#: Commands worth trying next on a store, in the order they are suggested.
NEXT_COMMANDS = (
    ("routes", "attrib routes --store {store}"),
    ("templates", "attrib templates --store {store}"),
    ("nplus1", "attrib nplus1 --store {store}"),
    ("route", "attrib route {route} --store {store}"),
    ("coverage", "attrib coverage --store {store}"),
    ("report", "attrib report --store {store} --out {out}/report.html"),
)


def summarise(
    routes: pd.DataFrame,
    templates: pd.DataFrame,
    nplus1: pd.DataFrame,
    *,
    store: str = STORE_FILE,
    top: int = 5,
    commands: tuple[str, ...] | None = None,
) -> DemoSummary:
    """The top ``top`` rows of each listing, advice in plain words and the next commands to try.

    Args:
        routes, templates, nplus1: the listings of ``Store.routes()``, ``templates()``, ``nplus1()``.
        store: the store path to put into the suggested commands.
        top: rows kept per listing.
        commands: names of the commands that exist (default: all of :data:`NEXT_COMMANDS`).

    Returns:
        A :class:`DemoSummary`.
    """
    said = tuple(advice(routes, templates, nplus1))
    routes = _top(routes, "db_ms_total", top)
    templates = _top(templates, "total_ms", top)
    nplus1 = _top(nplus1, "saving_ms_estimate", top)
    busiest = str(routes["route"].iloc[0]) if len(routes) else "/"
    out = str(Path(store).parent)
    nexts = tuple(
        line.format(store=store, route=_shell_word(busiest), out=out)
        for name, line in NEXT_COMMANDS
        if commands is None or name in commands
    )
    return DemoSummary(routes, templates, nplus1, said, nexts)


def advice(
    routes: pd.DataFrame, templates: pd.DataFrame, nplus1: pd.DataFrame, *, findings: int = 3
) -> list[str]:
    """Sentences saying what to look at first: the largest findings by estimated saving (one per
    route), the route with the most database time, and a slow route whose time goes elsewhere.

    The saving of a finding counts the round trips between calls as well as database time, so it is
    set against the route's median response time.

    >>> r = pd.DataFrame({"route": ["/a"], "requests": [10], "db_ms_total": [200.0],
    ...                   "db_share": [0.5], "db_fraction_p50": [0.4], "elapsed_ms_p50": [30.0],
    ...                   "elapsed_ms_p95": [50.0]})
    >>> n = pd.DataFrame({"route": ["/a"], "kind": ["n_plus_one"], "child_template_id": ["c" * 16],
    ...                   "parent_template_id": ["p" * 16], "requests": [10], "repeats_mean": [12.0],
    ...                   "saving_ms_estimate": [80.0]})
    >>> print(advice(r, pd.DataFrame(), n)[0])
    /a runs template cccccccc… 12.0 times per request (an N+1 loop under template pppppppp…); batching it would save about 8.0 ms per request (median response time 30.0 ms).
    """
    out: list[str] = []
    median = dict(zip(routes.get("route", []), routes.get("elapsed_ms_p50", []), strict=False))
    best = _top(nplus1, "saving_ms_estimate", len(nplus1))
    if len(best):
        best = best.drop_duplicates("route").head(findings)
    for row in best.itertuples(index=False):
        per_request = row.saving_ms_estimate / row.requests if row.requests else 0.0
        p50 = median.get(row.route)
        context = f" (median response time {p50:,.1f} ms)" if p50 == p50 and p50 else ""
        child = _short(row.child_template_id)
        if row.kind == "redundant":
            out.append(
                f"{row.route} runs template {child} {row.repeats_mean:.1f} times per request with "
                f"the same values (a redundant repeat); reusing the first result would save about "
                f"{per_request:.1f} ms per request{context}."
            )
        else:
            under = (
                f" under template {_short(row.parent_template_id)}"
                if isinstance(row.parent_template_id, str)
                else ""
            )
            out.append(
                f"{row.route} runs template {child} {row.repeats_mean:.1f} times per request "
                f"(an N+1 loop{under}); batching it would save about {per_request:.1f} ms per "
                f"request{context}."
            )
    if len(routes):
        first = routes.sort_values("db_ms_total", ascending=False).iloc[0]
        out.append(
            f"{first['route']} has the largest share of database time ({_pct(first['db_share'])} "
            f"over {_count(first['requests'], 'request')})."
        )
        # common practice, no source: under 10% in the database is "slow elsewhere"; ignore routes
        # too rare to judge (fewer than 20 requests)
        slow = routes[(routes["db_fraction_p50"] < 0.1) & (routes["requests"] >= 20)]
        if len(slow):
            worst = slow.sort_values("elapsed_ms_p95", ascending=False).iloc[0]
            out.append(
                f"{worst['route']} is slow (p95 {worst['elapsed_ms_p95']:,.0f} ms) but spends only "
                f"{_pct(worst['db_fraction_p50'])} of a typical request in the database: look at "
                f"the application or the services it calls, not at SQL."
            )
    if len(templates) and {"template_id", "share", "calls", "p95_ms"} <= set(templates.columns):
        t = templates.sort_values("total_ms", ascending=False).iloc[0]
        out.append(
            f"The most expensive template, {_short(t['template_id'])}, takes {_pct(t['share'])} "
            f"of all database time over {_count(t['calls'], 'call')} (p95 {t['p95_ms']:,.1f} ms)."
        )
    return out


def _count(n: object, noun: str) -> str:
    n = int(n)
    return f"{n:,} {noun}" + ("" if n == 1 else "s")


def _pct(share: float) -> str:
    return f"{share:.1%}" if share < 0.01 else f"{share:.0%}"


def format_summary(summary: DemoSummary, fmt: str = "table") -> str:
    """Render a :class:`DemoSummary` as text: titled tables, CSV blocks, or one JSON object."""
    from attrib.present import render, to_records

    listings = {
        "routes": summary.routes,
        "templates": summary.templates,
        "nplus1": summary.nplus1,
    }
    if fmt == "json":
        import json

        doc = {name: to_records(df) for name, df in listings.items()}
        doc["advice"] = list(summary.advice)
        doc["next_commands"] = list(summary.next_commands)
        return json.dumps(doc, indent=2, ensure_ascii=False) + "\n"
    if fmt == "csv":
        return "".join(f"# {name}\n{render(df, 'csv')}\n" for name, df in listings.items())
    titles = {
        "routes": "Top routes by database time",
        "templates": "Top query templates by total time",
        "nplus1": "Top N+1 loops and redundant repeats by estimated saving",
    }
    parts = []
    for name, df in listings.items():
        cols = [c for c in TABLE_COLUMNS[name] if c in df.columns]
        shown = df[cols].copy()
        for c in ("template_id", "child_template_id", "parent_template_id"):
            if c in shown:
                shown[c] = shown[c].map(_short)
        parts.append(f"{titles[name]}\n\n{render(shown, 'table', max_width=48)}")
    parts.append("What to look at first\n\n" + "".join(f"- {a}\n" for a in summary.advice))
    parts.append("Next commands to try\n\n" + "".join(f"  {c}\n" for c in summary.next_commands))
    return "\n".join(parts)


def run(
    out_dir: str | os.PathLike[str],
    *,
    seed: int = 7,
    requests: int = 30_000,
    top: int = 5,
    commands: tuple[str, ...] | None = None,
    progress: Callable[[str], None] | None = None,
) -> DemoRun:
    """Generate the demo logs, ingest them into a fresh ``out_dir/demo.duckdb`` and summarise it.

    Args:
        out_dir: folder for the logs and the store; an old demo store there is removed first.
        seed, requests: passed to :func:`generate`.
        top: rows per listing in the summary.
        commands: names of the CLI commands to suggest (default: all).
        progress: called with one line of text per step.

    Returns:
        A :class:`DemoRun`.
    """
    from attrib.api import Store

    say = progress or (lambda _message: None)
    out = Path(out_dir)
    say(f"Writing {requests:,} requests of the Ridgeline demo to {out} ...")
    truth = generate(out, seed=seed, requests=requests)
    say(
        f"Wrote {truth.request_lines:,} request lines and {truth.statements:,} statements "
        f"({truth.query_lines:,} log lines) in {truth.seconds:.1f} s."
    )
    store_path = out / STORE_FILE
    for stale in (store_path, store_path.with_name(STORE_FILE + ".wal")):
        if stale.exists():
            stale.unlink()
    say(f"Ingesting into {store_path} ...")
    began = time.perf_counter()
    with Store(store_path) as store:
        store.ingest(requests=[truth.requests_path], queries=[truth.queries_path])
        ingest_seconds = time.perf_counter() - began
        say(f"Ingested in {ingest_seconds:.1f} s; ranking ...")
        summary = summarise(
            store.routes(),
            store.templates(),
            store.nplus1(),
            store=str(store_path),
            top=top,
            commands=commands,
        )
    return DemoRun(truth, store_path, summary, ingest_seconds)


def _top(df: pd.DataFrame, column: str, n: int) -> pd.DataFrame:
    if column not in df.columns:
        return df.head(n).reset_index(drop=True)
    return df.sort_values(column, ascending=False, kind="stable").head(n).reset_index(drop=True)


def _short(template_id: object) -> str:
    return f"{template_id[:8]}…" if isinstance(template_id, str) and len(template_id) > 8 else ""


def _shell_word(text: str) -> str:
    return "'" + text.replace("'", "'\\''") + "'"
