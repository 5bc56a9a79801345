"""MariaDB / MySQL slow query log (written with ``long_query_time = 0`` so that every statement is in it).

An entry is a block of ``#`` header lines, optional ``use db;`` and ``SET timestamp=N;`` lines, then the
statement text (any number of lines) to which the server appends ``;``. Sources: MySQL Reference Manual,
"The Slow Query Log"; MariaDB Knowledge Base, "Slow Query Log Overview" and "Slow Query Log Extended
Statistics"; and the output of a real MariaDB 10.11 server (tests/test_readers_mysql_server.py).

Times. The statement start is taken, best first, from: the ``Start:`` value of MySQL's
``log_slow_extra``; the entry's own ``# Time:`` line when it is ISO 8601 with a UTC offset (MySQL 5.7+,
microseconds; the write time, i.e. the end, per the MySQL source as summarised in our log-formats
reference, not checked on a MySQL server here: start = time - Query_time); the ``SET timestamp=`` epoch;
last, the entry's own or inherited ``# Time:`` line (then ``options.tz`` is needed, else
:class:`~attrib.errors.TimezoneError`).

Seen on a real MariaDB 10.11 server (tests/test_readers_mysql_server.py): ``SET timestamp=`` is the
second in which the statement *started* (a 1.5 s ``SLEEP`` started at :57.1 and ended at :58.6 is
logged with ``SET timestamp`` and ``# Time:`` both at :57), and the ``YYMMDD hh:mm:ss`` ``# Time:`` line
shows the same start second in the server's local time zone, written only when that second differs from
the last one written; so an entry without ``# Time:`` started in the second of the last one. Starts from
MariaDB logs therefore have one-second resolution (truncated); durations keep microseconds.

Rows. ``rows`` is ``Rows_sent``; for INSERT, UPDATE, DELETE and REPLACE it is ``Rows_affected`` when the
entry has that field (MariaDB), since DML sends no rows.

Line accounting. Each entry is one record covering all its lines. The three-line server banner is
``Skip("server")``; ``# administrator command:`` entries are ``Skip("admin-command")``; blank lines
between entries are ``Skip("blank")``. An entry without ``# Query_time:``, without statement text, or whose
text has no final ``;`` (a file cut mid-entry) is a :class:`~attrib.records.Reject`; lines after the last
``;`` of an entry's text and before the next header are rejected as one block.
"""

from __future__ import annotations

import re
from collections.abc import Iterable, Iterator
from datetime import UTC, datetime, timedelta

from attrib.errors import TimezoneError
from attrib.records import ReadOptions, Record, Reject, Skip, Statement
from attrib.timeparse import MAX_US, MIN_US

NAME = "mysql-slow"
KIND = "statements"

# Lines that start a new entry. MySQL accepts `#` comments inside SQL, so only these known header shapes
# are treated as headers (log-formats reference, section 2, parser notes).
_STARTS = ("# Time:", "# User@Host:", "# Thread_id:", "# Query_time:")
_START_TAGS = frozenset(text[2:7] for text in _STARTS)
_ADMIN = "# administrator command:"
# Server banner, written whenever the log file is opened (MySQL and MariaDB sql/log.cc, from our
# log-formats reference; the MariaDB 10.11 shape was seen on the real server).
_BANNER = re.compile(r"^\S.*, Version: .* started with:\s*$")
_BANNER_PORT = re.compile(r"^Tcp port: \d+")
_BANNER_TITLES = re.compile(r"^Time\s+Id\s+Command\s+Argument\s*$")
_USER_HOST = re.compile(
    r"^# User@Host: ([^\[]*)\[([^\]]*)\] @ ([^\[]*)\[([^\]]*)\](?:\s+Id:\s*(\d+))?"
)
_USE = re.compile(r"^use (\S+);\s*$")
# `SET [last_insert_id=N,][insert_id=N,]timestamp=N;` (MySQL manual, "The Slow Query Log": the server
# writes a SET statement with the timestamp; the optional ids are from our log-formats reference).
_SET = re.compile(r"^SET (?:last_insert_id=\d+,)?(?:insert_id=\d+,)?timestamp=(\d+(?:\.\d+)?);\s*$")
_OLD_TIME = re.compile(r"^(\d{2})(\d{2})(\d{2})\s+(\d{1,2}):(\d{2}):(\d{2})$")
_FIRST_WORD = re.compile(r"\s*(?:/\*.*?\*/\s*)*([A-Za-z]+)", re.DOTALL)
_DML = frozenset({"insert", "update", "delete", "replace"})
_EPOCH = datetime(1970, 1, 1, tzinfo=UTC)
_ONE_US = timedelta(microseconds=1)


def sniff(head: list[str]) -> bool:
    """True when the first lines look like a slow query log (banner or entry headers).

    >>> sniff(["# Time: 240305 14:02:11", "# User@Host: app[app] @  [192.0.2.4]"])
    True
    >>> sniff(['{"sql": "SELECT 1"}'])
    False
    """
    for text in head:
        if text.startswith(("# User@Host:", "# Query_time:")) or _BANNER.match(text):
            return True
    return False


class _Entry:
    """Header fields and text lines of one entry being read (class attributes are the defaults)."""

    count = 0
    time: tuple[str, datetime] | None = None
    has_time = False
    user: str | None = None
    session: str | None = None
    schema: str | None = None
    use: str | None = None
    query_time: float | None = None
    rows_sent: int | None = None
    rows_affected: int | None = None
    errno: int | None = None
    killed: int | None = None
    start_extra: str | None = None
    set_ts: str | None = None
    sql: list[str] | None = None
    bad: str | None = None

    def __init__(self, first: int) -> None:
        self.first = first


class _Reader:
    """State carried from entry to entry: the last ``# Time:`` and the last ``use`` database."""

    def __init__(self, options: ReadOptions) -> None:
        self.options = options
        self.last_time: tuple[str, datetime] | None = None
        self.last_use: str | None = None
        self._time_cache: dict[str, tuple[str, datetime] | None] = {}
        self._user_cache: dict[str, tuple[str | None, str | None]] = {}

    def parse_time(self, value: str) -> tuple[str, datetime] | None:
        """``(kind, datetime)`` of a ``# Time:`` value, or None when unreadable.

        ``kind`` is "aware" (ISO with offset), "naive" (ISO without) or "start" (``YYMMDD hh:mm:ss``,
        local time, the start second on MariaDB).
        """
        cached = self._time_cache.get(value, False)
        if cached is not False:
            return cached  # type: ignore[return-value]
        result: tuple[str, datetime] | None = None
        match = _OLD_TIME.match(value)
        try:
            if match:
                yy, mo, dd, hh, mi, ss = (int(g) for g in match.groups())
                result = ("start", datetime(2000 + yy, mo, dd, hh, mi, ss))
            else:
                dt = datetime.fromisoformat(value)
                result = ("aware" if dt.tzinfo is not None else "naive", dt)
        except ValueError:
            result = None
        if len(self._time_cache) > 4096:
            self._time_cache.clear()
        self._time_cache[value] = result
        return result

    def to_us(self, kind: str, dt: datetime, line: int) -> int:
        if kind != "aware":
            if self.options.tz is None:
                raise TimezoneError(
                    f"slow log line {line}: '# Time:' has no UTC offset and the entry has no "
                    "'SET timestamp='; pass --tz with the database server's time zone"
                )
            dt = dt.replace(tzinfo=self.options.tz)
        return (dt - _EPOCH) // _ONE_US

    def header(self, entry: _Entry, text: str) -> None:
        """Read one ``#`` header line into ``entry``."""
        tag = text[2:7]
        if tag == "Query":
            if not text.startswith("# Query_time:"):
                return
            parts = text.split()
            # "# Query_time: 0.000412  Lock_time: 0.000003 Rows_sent: 1  Rows_examined: 1" and, with
            # MySQL 8.0.14+ log_slow_extra (MySQL manual, "The Slow Query Log"), more "Name: value"
            # pairs: Thread_id, Errno, Killed, ..., Start, End.
            fields = dict(zip(parts[1::2], parts[2::2], strict=False))
            try:
                entry.query_time = float(fields["Query_time:"])
            except (KeyError, ValueError):
                entry.bad = "unreadable '# Query_time:' line"
                return
            if not 0.0 <= entry.query_time < 1e9:  # inf, nan, negative, or more than 30 years
                entry.query_time = None
                entry.bad = "unreadable '# Query_time:' line"
                return
            entry.rows_sent = _int(fields.get("Rows_sent:"))
            if len(parts) > 9:
                entry.errno = _int(fields.get("Errno:"))
                entry.killed = _int(fields.get("Killed:"))
                entry.start_extra = fields.get("Start:")
                if entry.session is None:
                    entry.session = fields.get("Thread_id:")
        elif tag == "Threa":
            # MariaDB: "# Thread_id: 3127  Schema: bakery  QC_hit: No" (MariaDB manual, "Slow Query Log
            # Extended Statistics"); the Schema value is empty when no database is selected (seen on
            # the real server: "Schema:   QC_hit: No").
            parts = text.split()
            if len(parts) > 2 and parts[1] == "Thread_id:":
                entry.session = parts[2]
                if len(parts) > 3 and parts[3] == "Schema:":
                    nxt = parts[4] if len(parts) > 4 else ""
                    entry.schema = "" if nxt.endswith(":") else nxt
        elif tag == "Rows_":
            if text.startswith("# Rows_affected:"):
                parts = text.split()
                entry.rows_affected = _int(parts[2]) if len(parts) > 2 else None
        elif tag == "User@":
            # The same few user/host lines repeat all through a log: parse each distinct one once.
            known = self._user_cache.get(text)
            if known is None:
                match = _USER_HOST.match(text)
                known = (None, None)
                if match:
                    known = ((match.group(2) or match.group(1)).strip() or None, match.group(5))
                if len(self._user_cache) > 4096:
                    self._user_cache.clear()
                self._user_cache[text] = known
            entry.user = known[0]
            if known[1]:
                entry.session = known[1]
        elif tag == "Time:":
            parsed = self.parse_time(text[7:].strip())
            if parsed is None:
                entry.bad = "unreadable '# Time:' value"
            else:
                entry.time = parsed
                entry.has_time = True
                self.last_time = parsed
        # Any other "#" line (Full_scan, Filesort, explain, a bare "#") carries nothing we keep.

    def start_us(self, entry: _Entry) -> int | None:
        """The statement start (see the module docstring for the order of sources)."""
        duration_us = round((entry.query_time or 0.0) * 1_000_000)
        if entry.start_extra:
            parsed = self.parse_time(entry.start_extra)
            if parsed is not None and parsed[0] == "aware":
                return self.to_us(*parsed, entry.first)
        if entry.has_time and entry.time is not None and entry.time[0] == "aware":
            return self.to_us(*entry.time, entry.first) - duration_us
        if entry.set_ts is not None:
            whole, _, frac = entry.set_ts.partition(".")
            return int(whole) * 1_000_000 + int((frac + "000000")[:6])
        when = entry.time if entry.has_time else self.last_time
        if when is None:
            return None
        if when[0] == "start":
            return self.to_us(*when, entry.first)
        return self.to_us(*when, entry.first) - duration_us

    def finish(self, entry: _Entry, at_eof: bool) -> list[Record]:
        """The record(s) of a complete entry."""
        sql_lines = entry.sql or []
        end = len(sql_lines) - 1
        while end >= 0 and not sql_lines[end].rstrip().endswith(";"):
            end -= 1
        if end < 0:
            if not sql_lines:
                reason = "entry ends before its statement"
            elif at_eof:
                reason = "statement cut off at end of file (no final ';')"
            else:
                reason = "statement not terminated by ';'"
            return [
                Reject(entry.first, reason if entry.bad is None else entry.bad, "", entry.count)
            ]
        trailing = len(sql_lines) - 1 - end
        own = entry.count - trailing
        if sql_lines[0].startswith(_ADMIN):
            record: Record = Skip(entry.first, "admin-command", own)
        elif entry.bad is not None:
            record = Reject(entry.first, entry.bad, "", own)
        elif entry.query_time is None:
            record = Reject(entry.first, "entry without a '# Query_time:' line", "", own)
        else:
            record = self.statement(entry, sql_lines if not trailing else sql_lines[: end + 1], own)
        if not trailing:
            return [record]
        return [
            record,
            Reject(
                entry.first + own,
                "text after the end of a statement",
                sql_lines[end + 1][:200],
                trailing,
            ),
        ]

    def statement(self, entry: _Entry, sql_lines: list[str], own: int) -> Record:
        start = self.start_us(entry)
        if start is None:
            return Reject(entry.first, "entry has no time ('# Time:' or 'SET timestamp=')", "", own)
        if not MIN_US <= start < MAX_US:  # e.g. a session that ran SET timestamp=0 itself
            return Reject(entry.first, "timestamp out of range", "", own)
        sql = ("\n".join(sql_lines) if len(sql_lines) > 1 else sql_lines[0]).rstrip()
        sql = sql[:-1]  # the server appends ';' to every statement (seen on MariaDB; sql/log.cc)
        rows = entry.rows_sent
        if entry.rows_affected is not None and entry.rows_affected != rows:
            word = _FIRST_WORD.match(sql)
            if word and word.group(1).lower() in _DML:
                rows = entry.rows_affected
        error = None
        if entry.errno:
            error = f"errno {entry.errno}"
        elif entry.killed:
            error = "killed"
        return Statement(
            line=entry.first,
            start_us=start,
            duration_ms=round((entry.query_time or 0.0) * 1_000_000) / 1000.0,
            sql=sql,
            rows=rows,
            session=entry.session,
            user=entry.user,
            database=(entry.schema or None)
            if entry.schema is not None
            else (entry.use or self.last_use),
            error=error,
            lines=own,
        )


def read(lines: Iterable[tuple[int, str]], options: ReadOptions) -> Iterator[Record]:
    """Yield one record per entry of a slow query log, in file order.

    >>> from attrib.records import ReadOptions
    >>> log = ["# User@Host: app[app] @  [192.0.2.4]", "# Thread_id: 7  Schema: huts  QC_hit: No",
    ...        "# Query_time: 0.000200  Lock_time: 0.000000  Rows_sent: 1  Rows_examined: 1",
    ...        "SET timestamp=1709647331;", "SELECT 1;"]
    >>> [(r.sql, r.session, r.rows, r.start_us) for r in read(enumerate(log, 1), ReadOptions())]
    [('SELECT 1', '7', 1, 1709647331000000)]
    """
    reader = _Reader(options)
    header = reader.header
    entry: _Entry | None = None
    number = 0
    # An entry's line count is taken from the line numbers (consecutive, per the reader contract):
    # the number of the first line after it minus its first line.
    for number, text in lines:
        if entry is not None:
            if entry.sql is None:
                # Header part of an entry.
                if text[:1] == "#":
                    tag = text[2:7]
                    if tag == "Time:" or (tag == "User@" and entry.user is not None):
                        pass  # the next entry starts: this one has no statement
                    elif tag != "admin" or not text.startswith(_ADMIN):
                        header(entry, text)
                        continue
                    else:
                        entry.sql = [text]
                        continue
                elif text[:4] == "SET " and entry.set_ts is None and (ts := _set_timestamp(text)):
                    entry.set_ts = ts
                    continue
                elif text[:4] == "use " and entry.set_ts is None and (m := _USE.match(text)):
                    entry.use = m.group(1).strip("`")
                    reader.last_use = entry.use
                    continue
                elif ", Version: " in text and _BANNER.match(text):
                    pass
                else:
                    entry.sql = [text]
                    continue
            elif not (
                (text[:2] == "# " and text[2:7] in _START_TAGS and text.startswith(_STARTS))
                or (", Version: " in text and _BANNER.match(text))
            ):
                # Statement text: runs until the next header or banner.
                entry.sql.append(text)
                continue
            entry.count = number - entry.first
            yield from reader.finish(entry, at_eof=False)
            entry = None
        # Between entries.
        if text[:2] == "# " and text.startswith(_STARTS):
            entry = _Entry(number)
            header(entry, text)
        elif _BANNER.match(text):
            reader.last_use = None  # the writer forgets the last `use` when it reopens the file
            yield Skip(number, "server")
        elif _BANNER_PORT.match(text) or _BANNER_TITLES.match(text):
            yield Skip(number, "server")
        elif not text.strip():
            yield Skip(number, "blank")
        else:
            yield Reject(number, "not part of a slow-log entry", text[:200])
    if entry is not None:
        entry.count = number + 1 - entry.first
        yield from reader.finish(entry, at_eof=True)


def _set_timestamp(text: str) -> str | None:
    """The epoch of a server ``SET [last_insert_id=N,][insert_id=N,]timestamp=N;`` line, else None."""
    if text.startswith("SET timestamp=") and text.endswith(";") and text[14:-1].isdigit():
        return text[14:-1]  # the usual line, without a regex
    match = _SET.match(text)
    return match.group(1) if match else None


def _int(value: str | None) -> int | None:
    if value is None:
        return None
    try:
        number = int(value)
    except ValueError:
        return None
    return number if 0 <= number < 1 << 63 else None  # counts fit the store's BIGINT
