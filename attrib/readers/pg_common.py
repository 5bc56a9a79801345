"""What the three PostgreSQL log readers share: timestamps, message classification and pairing.

The stderr, csvlog and jsonlog readers turn their input into :class:`Entry` objects (one per log message,
with its DETAIL and STATEMENT parts attached) and feed them to an :class:`Assembler`, which keeps
per-session state and yields :mod:`attrib.records` in file order.

Rules (PostgreSQL 16 docs, 20.8 "Error Reporting and Logging"; server source ``postgres.c``):

- ``duration: X ms  statement: SQL`` (``log_min_duration_statement``) is one complete statement; its
  start is the log time minus the duration.
- Extended protocol: ``parse``, ``bind`` and ``execute`` lines of one session with the same text are one
  execution; its cost is the sum of their durations and it starts when the first step started. Pairing
  is by session (``%c``, else process id) and text, never by prepared-statement name: drivers reuse
  names after ``DEALLOCATE ALL`` and on every connection.
- ``log_statement = all`` + ``log_duration = on``: ``statement: SQL`` or ``execute NAME: SQL`` opens a
  statement; the next bare ``duration: X ms`` of the same session closes it. Bare durations logged
  before an ``execute`` line (parse, bind) are added to it.
- A failed statement (ERROR with a STATEMENT part) is an execution with ``error`` set and no duration,
  unless it repeats the statement its session already logged (``log_statement``), which then gets the
  error. ``temporary file`` and lock-wait lines also carry a STATEMENT part but are not executions.
- Transaction control (BEGIN, COMMIT, ROLLBACK, DEALLOCATE ALL) is counted like any statement: the
  client sent it. Resumed portals (``execute fetch from``) are skipped as "fetch": their time is not
  added to the statement they continue.
"""

from __future__ import annotations

import re
from collections import deque
from collections.abc import Callable, Sequence
from datetime import datetime
from zoneinfo import ZoneInfo

from attrib.errors import TimezoneError
from attrib.records import Record, Reject, Skip, Statement

SEVERITIES = (
    "LOG",
    "ERROR",
    "FATAL",
    "PANIC",
    "WARNING",
    "NOTICE",
    "INFO",
    "DEBUG",
    "DEBUG1",
    "DEBUG2",
    "DEBUG3",
    "DEBUG4",
    "DEBUG5",
    "DETAIL",
    "HINT",
    "QUERY",
    "CONTEXT",
    "LOCATION",
    "STATEMENT",
)
SECONDARY = frozenset({"DETAIL", "HINT", "QUERY", "CONTEXT", "LOCATION", "STATEMENT"})
FAILURES = frozenset({"ERROR", "FATAL", "PANIC"})

# Zone abbreviations that name one UTC offset (minutes). Abbreviations that several zones use (CST,
# IST, BST, AST, CDT) are left out on purpose and need --tz. Offsets from the tz database, from memory.
FIXED_ZONES = {
    "UTC": 0, "UCT": 0, "GMT": 0, "Z": 0, "WET": 0, "WEST": 60, "CET": 60, "CEST": 120,
    "MET": 60, "MEST": 120, "EET": 120, "EEST": 180, "MSK": 180, "SAST": 120,
    "EST": -300, "EDT": -240, "MST": -420, "MDT": -360, "PST": -480, "PDT": -420,
    "AKST": -540, "AKDT": -480, "HST": -600, "NST": -210, "NDT": -150,
    "JST": 540, "KST": 540, "HKT": 480, "AWST": 480, "ACST": 570, "ACDT": 630,
    "AEST": 600, "AEDT": 660, "NZST": 720, "NZDT": 780, "WIB": 420, "PKT": 300,
}  # fmt: skip
_NUMERIC_ZONE = re.compile(r"([+-])(\d\d)(?::?(\d\d))?\Z")
_EPOCH = datetime(1970, 1, 1)

# "duration: X ms", optionally followed by a protocol step and its text, or by something else
_TIMED = re.compile(
    r"duration: (\d+(?:\.\d+)?) ms"
    r"(?:  (?:(statement|parse|bind|execute fetch from|execute)(?: \S*?)?: (.*)|(.*)))?\Z",
    re.S,
)
_LOGGED = re.compile(r"(statement|execute)(?: \S*?)?: (.*)\Z", re.S)
_NONE: tuple[Record, ...] = ()
_PARAM = re.compile(r"\$\d+ = (?:'((?:[^']|'')*)'|(NULL))")
_CATEGORIES = (
    (
        re.compile(
            r"connection (?:received|authorized|authenticated)|disconnection:|"
            r"replication connection|password authentication|no pg_hba\.conf entry|"
            r"terminating connection|could not receive data from client|unexpected EOF on client"
        ),
        "connection",
    ),
    (re.compile(r"checkpoint|restartpoint"), "checkpoint"),
    (re.compile(r"automatic (?:vacuum|analyze)|autovacuum"), "autovacuum"),
    (re.compile(r"temporary file"), "tempfile"),
    (re.compile(r"still waiting for|acquired \w+ on|lock on|deadlock|\w+Lock\b"), "lock"),
)


# -- timestamps --------------------------------------------------------------------------------------


def time_parser(tz: ZoneInfo | None) -> Callable[[str], int]:
    """Return a function turning PostgreSQL log times (``%m``/``%t`` format) into epoch microseconds.

    The zone may be an abbreviation (``UTC``, ``CEST``), a bare offset (``-03``, ``+0530``) or absent.
    Abbreviations that are ambiguous or unknown, and absent zones, use ``tz``; without ``tz`` they raise
    :class:`TimezoneError`.

    >>> time_parser(None)("2024-03-05 14:02:11.481 CET")
    1709643731481000
    """
    last_key: str | None = None
    last_value = 0

    def parse(text: str) -> int:
        nonlocal last_key, last_value
        if text[19:20] == "." and text[23:24] == " " and text[20:23].isdigit():
            # the common %m shape "YYYY-MM-DD HH:MM:SS.mmm ZONE"
            micros = int(text[20:23]) * 1000
            key = text[:19] + text[23:]
            if key != last_key:
                last_value = _epoch_seconds(text[:19], text[24:], tz)
                last_key = key
            return last_value * 1_000_000 + micros
        base = text[:19]
        rest = text[19:]
        micros = 0
        zone = ""
        if rest.startswith("."):
            end = rest.find(" ")
            digits = rest[1:end] if end >= 0 else rest[1:]
            if not digits.isdigit():
                raise ValueError(f"bad fraction in {text!r}")
            micros = int(digits.ljust(6, "0")[:6])
            zone = rest[end + 1 :] if end >= 0 else ""
        elif rest.startswith(" "):
            zone = rest[1:]
        elif rest:
            raise ValueError(f"bad timestamp {text!r}")
        key = base + " " + zone
        if key != last_key:
            last_value = _epoch_seconds(base, zone, tz)
            last_key = key
        return last_value * 1_000_000 + micros

    return parse


def _epoch_seconds(base: str, zone: str, tz: ZoneInfo | None) -> int:
    naive = datetime.strptime(base, "%Y-%m-%d %H:%M:%S")
    offset = FIXED_ZONES.get(zone)
    if offset is None and zone:
        match = _NUMERIC_ZONE.match(zone)
        if match:
            sign = -1 if match.group(1) == "-" else 1
            offset = sign * (int(match.group(2)) * 60 + int(match.group(3) or 0))
    if offset is not None:
        return int((naive - _EPOCH).total_seconds()) - offset * 60
    if tz is None:
        if zone:
            raise TimezoneError(
                f"log times use the zone abbreviation {zone!r}, which is ambiguous or unknown; "
                "pass --tz with the server's log_timezone"
            )
        raise TimezoneError(
            "log times carry no time zone; pass --tz with the server's log_timezone"
        )
    local = naive.replace(tzinfo=tz)
    if zone and local.tzname() != zone:
        other = local.replace(fold=1)
        if other.tzname() == zone:
            local = other
    return int(local.timestamp())


def epoch_parser(text: str) -> int:
    """``%n`` (epoch seconds with milliseconds) to microseconds.

    >>> epoch_parser("1709647331.481")
    1709647331481000
    """
    whole, _, frac = text.partition(".")
    return int(whole) * 1_000_000 + int(frac.ljust(6, "0")[:6] or 0)


# -- messages --------------------------------------------------------------------------------------


class Entry:
    """One log message with its DETAIL/STATEMENT parts, as the readers hand it to :class:`Assembler`."""

    __slots__ = (
        "line",
        "lines",
        "time_us",
        "session",
        "label",
        "user",
        "database",
        "request_id",
        "severity",
        "sqlstate",
        "message",
        "detail",
        "query",
    )

    def __init__(
        self,
        line: int,
        lines: int,
        time_us: int,
        session: str,
        label: str | None,
        user: str | None,
        database: str | None,
        request_id: str | None,
        severity: str,
        sqlstate: str | None,
        message: str,
        detail: str | None = None,
        query: str | None = None,
    ) -> None:
        self.line = line
        self.lines = lines
        self.time_us = time_us
        self.session = session
        self.label = label
        self.user = user
        self.database = database
        self.request_id = request_id
        self.severity = severity
        self.sqlstate = sqlstate
        self.message = message
        self.detail = detail
        self.query = query


def parse_params(detail: str | None) -> tuple[str, ...] | None:
    """Values of a ``parameters: $1 = '...', $2 = NULL`` detail (NULL stays the bare word ``NULL``).

    >>> parse_params("parameters: $1 = 'it''s', $2 = NULL, $3 = '7'")
    ("it's", 'NULL', '7')
    """
    if not detail or detail[:11].lower() != "parameters:":
        return None
    return tuple(
        "NULL" if null else value.replace("''", "'") for value, null in _PARAM.findall(detail, 11)
    )


def skip_category(severity: str, message: str) -> str:
    """The Skip category of a message that is not a statement.

    >>> skip_category("LOG", "checkpoint starting: time")
    'checkpoint'
    """
    head = message[:1000]  # these phrases open a message; `\w+Lock` is quadratic on a long word
    for pattern, category in _CATEGORIES:
        if pattern.search(head):
            return category
    if severity in FAILURES:
        return "error"
    if severity in ("WARNING", "NOTICE", "INFO") or severity.startswith("DEBUG"):
        return "notice"
    if severity in SECONDARY:
        return "detail"
    return "server"


def clean_name(value: str | None) -> str | None:
    """User/database/application values: empty and ``[unknown]`` become None."""
    if not value or value == "[unknown]":
        return None
    return value


# -- pairing ---------------------------------------------------------------------------------------


class _Slot:
    """A place in the output order, held until the record that starts there is known."""

    __slots__ = ("line", "lines", "record", "done", "owner")

    def __init__(self, line: int, lines: int, owner: str | None = None) -> None:
        self.line = line
        self.lines = lines
        self.record: Record | None = None
        self.done = owner is None
        self.owner = owner


class _Group:
    """A statement being assembled in one session: protocol steps and/or a logged text."""

    __slots__ = ("slot", "start_us", "duration_ms", "timed", "sql", "detail", "entry", "waiting")

    def __init__(self, slot: _Slot, start_us: int, entry: Entry) -> None:
        self.slot = slot
        self.start_us = start_us
        self.duration_ms = 0.0
        self.timed = False
        self.sql: str | None = None
        self.detail: str | None = None  # the last parameters detail of a step
        self.entry = entry
        self.waiting = False  # True once the text is known and only its duration is missing


class Assembler:
    """Turns :class:`Entry` objects of one file into records, in file order.

    Call :meth:`feed` per entry (and :meth:`skip`/:meth:`reject` for lines that are no entry); each
    returns the records that are ready. Call :meth:`finish` at the end of the file.
    """

    MAX_HELD = 100_000  # slots waiting behind an unfinished statement before it is forced out

    def __init__(self) -> None:
        self._groups: dict[str, _Group] = {}
        self._out: deque[_Slot] = deque()

    # The output queue: a slot per record, flushed from the left when done.

    def _ready(self) -> Sequence[Record]:
        out = self._out
        if not out:
            return _NONE
        if not out[0].done:
            if len(out) > self.MAX_HELD:
                self._close(out[0].owner)
                return self._ready()
            return _NONE
        ready: list[Record] = []
        while out and out[0].done:
            slot = out.popleft()
            if slot.record is not None:
                slot.record.lines = slot.lines
                ready.append(slot.record)
        return ready

    def _emit(self, record: Record, lines: int) -> Sequence[Record]:
        if not self._out:
            record.lines = lines
            return [record]
        slot = _Slot(record.line, lines)
        slot.record = record
        self._out.append(slot)
        return []

    def skip(self, line: int, category: str, lines: int = 1) -> Sequence[Record]:
        """A valid line (or lines) that is no statement."""
        return self._emit(Skip(line, category), lines)

    def reject(self, line: int, reason: str, excerpt: str = "", lines: int = 1) -> Sequence[Record]:
        """Lines that could not be read."""
        return self._emit(Reject(line, reason, excerpt[:200]), lines)

    def finish(self) -> Sequence[Record]:
        """Close every open statement (end of file) and return what remains."""
        for session in list(self._groups):
            self._close(session)
        return self._ready()

    # Entries.

    def feed(self, e: Entry) -> Sequence[Record]:
        """Process one message; return the records that are complete and next in file order."""
        sev = e.severity
        message = e.message
        if sev == "LOG":
            match = _TIMED.match(message)
            if match is not None:
                duration = float(match.group(1))
                if not duration < 1e11:  # over three years: no start time can be derived from it
                    return self.reject(e.line, "duration out of range", message, e.lines)
                kind, sql, other = match.group(2, 3, 4)
                if kind is not None:
                    return self._timed_step(e, duration, kind, sql)
                if other is None:
                    return self._bare_duration(e, duration)
                if other.startswith("plan:"):
                    return self.skip(e.line, "auto_explain", e.lines)
                return self.reject(e.line, "unrecognised duration message", message, e.lines)
            if message.startswith(("statement: ", "execute ")):
                step = _LOGGED.match(message)
                if step is not None:
                    return self._logged_text(e, step.group(2))
            if message.startswith("duration:"):
                return self.reject(e.line, "incomplete duration message", message, e.lines)
            if message.startswith("disconnection:"):
                self._close(e.session)
        elif sev in FAILURES and e.query:
            return self._failed(e)
        return self.skip(e.line, skip_category(sev, message), e.lines)

    def _statement(
        self, e: Entry, start_us: int, duration: float | None, sql: str, params: str | None
    ) -> Statement:
        return Statement(
            line=e.line,
            start_us=start_us,
            duration_ms=duration,
            sql=sql,
            params=parse_params(params),
            request_id=e.request_id,
            session=e.label,
            user=e.user,
            database=e.database,
        )

    def _timed_step(self, e: Entry, duration: float, kind: str, sql: str) -> Sequence[Record]:
        start = e.time_us - round(duration * 1000)
        if kind == "statement":
            self._close(e.session)
            return self._emit(self._statement(e, start, duration, sql, e.detail), e.lines)
        if kind == "execute fetch from":
            return self.skip(e.line, "fetch", e.lines)
        group = self._groups.get(e.session)
        if group is not None and (group.waiting or group.sql not in (None, sql)):
            self._close(e.session)
            group = None
        if group is None:
            group = self._open(e, start)
        else:
            group.slot.lines += e.lines
        group.sql = sql
        group.duration_ms += duration
        group.timed = True
        if e.detail is not None:
            group.detail = e.detail
        if kind == "execute":
            self._finish_group(e.session, group, group.duration_ms, None)
        return self._ready()

    def _bare_duration(self, e: Entry, duration: float) -> Sequence[Record]:
        group = self._groups.get(e.session)
        if group is None:
            group = self._open(e, e.time_us - round(duration * 1000))
        else:
            group.slot.lines += e.lines
        group.duration_ms += duration
        group.timed = True
        if group.waiting:
            self._finish_group(e.session, group, group.duration_ms, None)
        return self._ready()

    def _logged_text(self, e: Entry, sql: str) -> Sequence[Record]:
        group = self._groups.get(e.session)
        if group is not None and (group.waiting or group.sql not in (None, sql)):
            self._close(e.session)
            group = None
        if group is None:
            group = self._open(e, e.time_us)
        else:
            group.slot.lines += e.lines
        group.sql = sql
        group.entry = e
        group.waiting = True
        if e.detail is not None:
            group.detail = e.detail
        return self._ready()

    def _failed(self, e: Entry) -> Sequence[Record]:
        error = e.sqlstate if e.sqlstate and e.sqlstate != "00000" else "ERROR"
        group = self._groups.get(e.session)
        if group is not None and group.sql == e.query:
            group.slot.lines += e.lines
            self._finish_group(e.session, group, None, error)
            return self._ready()
        if group is not None and group.waiting:
            self._close(e.session)
        statement = self._statement(e, e.time_us, None, e.query or "", None)
        statement.error = error
        return self._emit(statement, e.lines)

    def _open(self, e: Entry, start_us: int) -> _Group:
        slot = _Slot(e.line, e.lines, owner=e.session)
        self._out.append(slot)
        group = _Group(slot, start_us, e)
        self._groups[e.session] = group
        return group

    def _finish_group(
        self, session: str, group: _Group, duration: float | None, error: str | None
    ) -> None:
        del self._groups[session]
        statement = self._statement(
            group.entry, group.start_us, duration, group.sql or "", group.detail
        )
        statement.line = group.slot.line
        statement.error = error
        group.slot.record = statement
        group.slot.done = True

    def _close(self, session: str | None) -> None:
        """End the open group of ``session``: a logged text whose duration never came is a statement
        with ``duration_ms=None``; protocol steps that never reached an execute are skipped."""
        group = self._groups.get(session) if session is not None else None
        if group is None:
            return
        if group.waiting:
            self._finish_group(session, group, None, None)
            return
        del self._groups[session]
        group.slot.record = Skip(group.slot.line, "protocol")
        group.slot.done = True
