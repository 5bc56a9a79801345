"""Statement log as JSON lines, written by an application's SQL logger: one JSON object per statement.

Fields are found by name. ``ReadOptions.statement_fields`` maps our names to the log's names (dotted
names reach into nested objects; a flat key with the dots is tried first); a field that is not mapped
tries the names in :data:`DEFAULTS`, per line, first present wins. Our names: ``sql``, ``timestamp``,
``start``, ``duration_ms`` (or ``duration_s`` / ``duration_us`` / ``duration_ns``), ``rows``,
``request_id``, ``trace_id``, ``traceparent``, ``session``, ``error``, ``params``, ``user``,
``database``.

Time: ``timestamp`` is read as the time the logger wrote the line, i.e. the statement's **end** (SQL
loggers that report a duration write after the statement returned), so start = timestamp − duration;
with no duration, start = timestamp. A ``start`` field (``start``, ``start_time``, ``started_at``) is
taken as the start as is; map ``start=NAME`` to declare that a log's time field is the start. This is
the same rule as the JSON-lines request reader, so both sides of a join read times alike. Values are ISO
8601 with a UTC offset or epoch numbers (s, ms, µs or ns, told apart by magnitude; see
:mod:`attrib.timeparse`); ISO times without an offset need ``options.tz``, else
:class:`~attrib.errors.TimezoneError`.

Durations follow the field name: ``*_ms`` milliseconds, ``*_us`` microseconds, ``*_ns`` nanoseconds,
``*_s`` seconds, and the bare ``duration`` / ``elapsed`` milliseconds; a string with a unit suffix
(``"0.4ms"``) overrides the name. ``traceparent`` values give their trace id (W3C Trace Context).
``error`` keeps only a code (a SQLSTATE, an errno, or a short class name such as ``IntegrityError``);
message text is replaced by ``"error"``, because messages quote values.

Lines: each line is one record. A blank line is ``Skip("blank")``; a line that is not a JSON object, has
no SQL text or has a bad value is a :class:`~attrib.records.Reject`. A mapped field that appears on no
line of the file, or a log in which no line has SQL text or a time, raises
:class:`~attrib.errors.MappingError` (checked as soon as every such field has been seen or the file
ends; records are held back for up to :data:`HOLD` lines meanwhile; a file without any JSON object
raises nothing, its lines are rejects). A mapped ``error`` field is exempt: loggers often write it only
when a statement fails.
"""

from __future__ import annotations

import json
import math
from collections.abc import Iterable, Iterator
from zoneinfo import ZoneInfo

from attrib.comments import trace_id as traceparent_trace_id
from attrib.errors import MappingError
from attrib.readers.requests_jsonl import BadValue, lookup, to_elapsed_ms, to_text, to_trace_id
from attrib.records import ReadOptions, Record, Reject, Skip, Statement
from attrib.timeparse import check_range, timestamp_us

NAME = "sql-jsonl"
KIND = "statements"

HOLD = 10_000
EXCERPT = 200
FLAG = "--query-field"

#: Our field names and the log names tried when the user maps none (in order of preference).
DEFAULTS: dict[str, tuple[str, ...]] = {
    "sql": ("sql", "statement", "query", "db.statement", "db.query.text"),
    "timestamp": ("timestamp", "ts", "time", "@timestamp", "end_time"),
    "start": ("start", "start_time", "started_at"),
    "rows": ("rows", "row_count", "rowcount", "rows_affected", "affected_rows"),
    "request_id": ("request_id", "requestId", "req_id", "x_request_id"),
    "trace_id": ("trace_id", "traceId"),
    "traceparent": ("traceparent",),
    "session": ("session", "session_id", "connection_id", "conn_id", "thread_id", "pid"),
    "error": ("error", "error_code", "sqlstate", "errno"),
    "params": ("params", "parameters", "bind_params", "args"),
    "user": ("db_user", "db.user"),
    "database": ("database", "db", "db_name", "db.name"),
}
#: Duration names tried by default, with the unit of their values.
DURATION_DEFAULTS: tuple[tuple[str, str], ...] = (
    ("duration_ms", "ms"),
    ("elapsed_ms", "ms"),
    ("time_ms", "ms"),
    ("duration_us", "us"),
    ("elapsed_us", "us"),
    ("duration_ns", "ns"),
    ("duration_s", "s"),
    ("elapsed_s", "s"),
    ("duration", "ms"),
    ("elapsed", "ms"),
)
DURATION_KEYS = {"duration_ms": "ms", "duration_s": "s", "duration_us": "us", "duration_ns": "ns"}
_SQLSTATE_CHARS = frozenset("0123456789ABCDEFGHIJKLMNOPQRSTUVWXYZ")
_ERROR_KEYS = ("sqlstate", "code", "errno", "error_code", "type", "class", "name")


def sniff(head: list[str]) -> bool:
    """True when most non-blank first lines are JSON objects with SQL text under a usual name.

    >>> sniff(['{"ts": 1784009702.5, "sql": "SELECT 1", "duration_ms": 0.4}'])
    True
    >>> sniff(['{"ts": 1784009702.5, "path": "/huts", "elapsed_ms": 12}'])
    False
    """
    nonblank = hits = 0
    for text in head:
        if not text.strip():
            continue
        nonblank += 1
        if not text.lstrip().startswith("{"):
            continue
        try:
            obj = json.loads(text)
        except (ValueError, RecursionError):
            continue
        if not isinstance(obj, dict) or "error_severity" in obj or "resourceSpans" in obj:
            continue  # PostgreSQL jsonlog and OTLP files have their own readers
        if any(isinstance(lookup(obj, name), str) for name in DEFAULTS["sql"]):
            hits += 1
    return hits > 0 and hits * 2 >= nonblank


class _Plan:
    """The candidate names per field, and which mapped names the file has shown so far."""

    def __init__(self, mapping: dict[str, str]) -> None:
        known = [*DEFAULTS, *DURATION_KEYS]
        unknown = sorted(set(mapping) - set(known))
        if unknown:
            raise MappingError(
                f"unknown statement field {unknown[0]!r} in {FLAG}; known fields: {', '.join(known)}"
            )
        durations = [key for key in DURATION_KEYS if key in mapping]
        if len(durations) > 1:
            raise MappingError(f"map only one of {', '.join(durations)} with {FLAG}")
        self.mapped = frozenset(mapping)
        self.names = {
            ours: (mapping[ours],) if ours in mapping else candidates
            for ours, candidates in DEFAULTS.items()
        }
        self.durations: tuple[tuple[str, str], ...] = (
            ((mapping[durations[0]], DURATION_KEYS[durations[0]]),)
            if durations
            else DURATION_DEFAULTS
        )
        # Name -> [(our field, preference)], and dotted names grouped by their first part.
        self.flat: dict[str, list[tuple[str, int]]] = {}
        self.nested: dict[str, list[tuple[str, str, int]]] = {}
        fields = [(ours, names) for ours, names in self.names.items()]
        fields.append(("duration", tuple(name for name, _unit in self.durations)))
        for ours, names in fields:
            for prio, name in enumerate(names):
                self.flat.setdefault(name, []).append((ours, prio))
                if "." in name:
                    head = name.split(".", 1)[0]
                    self.nested.setdefault(head, []).append((ours, name, prio))
        self.objects = 0  # JSON objects read so far
        # Fields that must show up somewhere in the file: our name -> the log names.
        self.unseen: dict[str, tuple[str, ...]] = {
            ours: (mapping[ours],) for ours in mapping if ours in DEFAULTS and ours != "error"
        }
        if durations:
            self.unseen[durations[0]] = (mapping[durations[0]],)
        if "sql" not in mapping:
            self.unseen["sql"] = DEFAULTS["sql"]
        if "timestamp" not in mapping and "start" not in mapping:
            self.unseen["time"] = DEFAULTS["timestamp"] + DEFAULTS["start"]

    def pick(self, obj: dict[str, object]) -> dict[str, object]:
        """Our field -> value for one record: the first of each field's names that ``obj`` has.

        Walks the record's keys once (instead of trying every candidate name of every field), which
        keeps the cost per line close to that of ``json.loads``.
        """
        best: dict[str, tuple[int, object]] = {}
        flat, nested = self.flat, self.nested
        for key, value in obj.items():
            if value is None:
                continue
            hits = flat.get(key)
            if hits is not None:
                for ours, prio in hits:
                    current = best.get(ours)
                    if current is None or prio < current[0]:
                        best[ours] = (prio, value)
            if nested and key in nested and isinstance(value, dict):
                for ours, name, prio in nested[key]:
                    current = best.get(ours)
                    if current is None or prio < current[0]:
                        found = lookup(obj, name)
                        if found is not None:
                            best[ours] = (prio, found)
        return {ours: value for ours, (_prio, value) in best.items()}

    def text(self, value: object, ours: str) -> str | None:
        """A text field; a default name holding an object or list (``"db": {...}``) counts as absent."""
        if isinstance(value, dict | list) and ours not in self.mapped:
            return None
        return to_text(value)

    def duration_unit(self, obj: dict[str, object]) -> str:
        """The unit of the duration name that :meth:`pick` chose for ``obj``."""
        for name, unit in self.durations:
            if (obj.get(name) if "." not in name else lookup(obj, name)) is not None:
                return unit
        return "ms"

    def see(self, obj: dict[str, object]) -> None:
        """Strike off the required fields present in ``obj``."""
        for ours, names in list(self.unseen.items()):
            if any(
                obj.get(n) is not None or ("." in n and lookup(obj, n) is not None) for n in names
            ):
                del self.unseen[ours]

    def missing_error(self) -> MappingError:
        ours, names = next(iter(self.unseen.items()))
        if ours in ("sql", "time") and ours not in self.mapped:
            what = "SQL text" if ours == "sql" else "time"
            fix = "sql=NAME" if ours == "sql" else "timestamp=NAME (end time) or start=NAME"
            return MappingError(
                f"no line of the statement log has a {what} field ({', '.join(names)}); "
                f"pass {FLAG} {fix}"
            )
        return MappingError(
            f"no line of the statement log has the field {names[0]!r} mapped to {ours}; "
            f"fix {FLAG} {ours}=NAME"
        )


def read(lines: Iterable[tuple[int, str]], options: ReadOptions) -> Iterator[Record]:
    """Yield one record per line of a JSON-lines statement log (see the module docstring).

    >>> from attrib.records import ReadOptions
    >>> line = '{"ts": "2026-07-14T06:15:02.5Z", "sql": "SELECT 1", "duration_ms": 0.5}'
    >>> [(r.sql, r.start_us) for r in read([(1, line)], ReadOptions())]
    [('SELECT 1', 1784009702499500)]
    """
    plan = _Plan(options.statement_fields)
    tz = options.tz
    held: list[Record] = []
    for number, text in lines:
        record = _record(number, text, plan, tz)
        if plan.unseen:
            held.append(record)
            if len(held) >= HOLD:
                yield from held
                held = []
            continue
        if held:
            yield from held
            held = []
        yield record
    if plan.unseen and plan.objects:
        raise plan.missing_error()
    yield from held


def _record(number: int, text: str, plan: _Plan, tz: ZoneInfo | None) -> Record:
    if not text or text.isspace():
        return Skip(number, "blank")
    try:
        obj = json.loads(text)
    except (ValueError, RecursionError):
        return Reject(number, "invalid JSON", text[:EXCERPT])
    if not isinstance(obj, dict):
        return Reject(number, "not a JSON object", text[:EXCERPT])
    plan.objects += 1
    if plan.unseen:
        plan.see(obj)
    try:
        return _statement(number, obj, plan, tz)
    except BadValue as exc:
        return Reject(number, str(exc), text[:EXCERPT])


def _statement(number: int, obj: dict[str, object], plan: _Plan, tz: ZoneInfo | None) -> Statement:
    got = plan.pick(obj)
    sql = got.get("sql")
    if sql is None:
        raise BadValue("no SQL text")
    if not isinstance(sql, str):
        raise BadValue("SQL text is not a string")
    if not sql.strip():
        raise BadValue("empty SQL text")
    raw_duration = got.get("duration")
    duration_ms = None
    if raw_duration is not None:
        duration_ms = round(to_elapsed_ms(raw_duration, plan.duration_unit(obj)), 6)
    start = got.get("start")
    if start is not None and start != "":
        start_us = _time(start, tz)
    else:
        end = got.get("timestamp")
        if end is None or end == "":
            raise BadValue("no timestamp")
        start_us = _time(end, tz) - round((duration_ms or 0.0) * 1000)
        try:
            check_range(start_us)
        except ValueError as exc:
            raise BadValue(str(exc)) from None
    trace = None
    if "trace_id" in got:
        trace = to_trace_id(got["trace_id"])
    if trace is None and "traceparent" in got:
        trace = traceparent_trace_id(plan.text(got["traceparent"], "traceparent"))
    text = plan.text
    return Statement(
        line=number,
        start_us=start_us,
        duration_ms=duration_ms,
        sql=sql,
        rows=_rows(got.get("rows")),
        params=_params(got.get("params")),
        request_id=text(got.get("request_id"), "request_id"),
        trace_id=trace,
        session=text(got.get("session"), "session"),
        user=text(got.get("user"), "user"),
        database=text(got.get("database"), "database"),
        error=error_code(got.get("error")),
    )


def error_code(value: object) -> str | None:
    """A short error code from an error field; message text becomes ``"error"``.

    >>> error_code("23505"), error_code(1062), error_code("IntegrityError")
    ('23505', '1062', 'IntegrityError')
    >>> error_code("duplicate key value violates unique constraint"), error_code(False)
    ('error', None)
    >>> error_code({"sqlstate": "40001", "message": "could not serialize access"})
    '40001'
    """
    if value is None or value is False or value == "":
        return None
    if value is True:
        return "error"
    if isinstance(value, int):
        return str(value)
    if isinstance(value, dict):
        for key in _ERROR_KEYS:
            code = error_code(value.get(key)) if key in value else None
            if code is not None and code != "error":
                return code
        return "error"
    if isinstance(value, str):
        text = value.strip()
        if len(text) == 5 and set(text) <= _SQLSTATE_CHARS:
            return text
        if 0 < len(text) <= 64 and (text[0].isalpha() or text[0] == "_"):
            if all(ch.isalnum() or ch in "_." for ch in text):
                return text
        if text.isdigit() and len(text) <= 10:
            return text
    return "error"


def _rows(value: object) -> int | None:
    rows = _rows_value(value)
    if rows is not None and rows >= 1 << 63:  # the store's BIGINT
        raise BadValue("bad rows")
    return rows


def _rows_value(value: object) -> int | None:
    if value is None or value == "":
        return None
    if isinstance(value, bool):
        raise BadValue("bad rows")
    if isinstance(value, str) and value.strip().isdigit():
        return int(value)
    if isinstance(value, int) and value >= 0:
        return value
    if isinstance(value, float) and math.isfinite(value) and value >= 0 and value.is_integer():
        return int(value)
    if isinstance(value, int) and value < 0:
        return None  # DB-API rowcount is -1 when not known
    raise BadValue("bad rows")


def _params(value: object) -> tuple[str, ...] | None:
    if value is None:
        return None
    if isinstance(value, list | tuple):
        return tuple(_param_text(v) for v in value)
    if isinstance(value, dict):
        return tuple(f"{k}={_param_text(v)}" for k, v in value.items())
    return (_param_text(value),)


def _param_text(value: object) -> str:
    if isinstance(value, str):
        return value
    if isinstance(value, int | float) and not isinstance(value, bool) and math.isfinite(value):
        return str(value)  # what json.dumps writes for a finite number
    return json.dumps(value, ensure_ascii=False, sort_keys=True)


def _time(value: object, tz: ZoneInfo | None) -> int:
    try:
        return timestamp_us(value, tz)
    except ValueError as exc:
        raise BadValue(str(exc)) from None
