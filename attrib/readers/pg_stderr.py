"""PostgreSQL stderr log (``log_destination = 'stderr'``) with any ``log_line_prefix``.

The prefix (``ReadOptions.log_line_prefix``, default Debian's ``%m [%p] %q%u@%d ``) is compiled into a
regular expression (:func:`compile_prefix`). A line starting with a tab continues the previous message
(PostgreSQL 16 docs, 20.8; ``append_with_tabs`` in elog.c). DETAIL and STATEMENT lines of the same
process attach to the message before them. Pairing and classification: :mod:`attrib.readers.pg_common`.

Sessions are keyed by ``%c`` when the prefix has it, else by ``%p``; a prefix with neither pairs all
lines as one session, which is only right when backends do not interleave.

``application_name`` (``%a``) becomes ``Statement.request_id`` only when asked for with
``statement_fields={"request_id": "application_name"}``: it is usually a fixed program name.
"""

from __future__ import annotations

import re
from collections.abc import Iterable, Iterator
from functools import lru_cache

from attrib.errors import FormatError, MappingError
from attrib.readers.pg_common import (
    SECONDARY,
    SEVERITIES,
    Assembler,
    Entry,
    clean_name,
    epoch_parser,
    time_parser,
)
from attrib.records import ReadOptions, Record

NAME = "pg-stderr"
KIND = "statements"

_STAMP = r"\d{4}-\d\d-\d\d \d\d:\d\d:\d\d"
_ZONE = r"(?: (?:[A-Za-z]{1,6}|[+-]\d\d(?::?\d\d)?))?"
# escape letter -> (group name or None, pattern); free-text values are lazy so that the literal text
# after them decides where they end.
_ESCAPES: dict[str, tuple[str | None, str]] = {
    "m": ("time", _STAMP + r"\.\d{3}" + _ZONE),
    "t": ("time", _STAMP + _ZONE),
    "n": ("epoch", r"\d+\.\d+"),
    "s": (None, _STAMP + _ZONE),
    "p": ("pid", r"\d+"),
    "P": (None, r"\d*"),
    "c": ("session", r"[0-9a-f]+\.[0-9a-f]+"),
    "l": (None, r"\d+"),
    "e": ("sqlstate", r"[0-9A-Z]{5}"),
    "x": (None, r"\d+"),
    "v": (None, r"[^ ]*?"),
    "Q": (None, r"-?\d+"),
    "u": ("user", r".*?"),
    "d": ("database", r".*?"),
    "a": ("application", r".*?"),
    "h": (None, r".*?"),
    "r": (None, r".*?"),
    "b": (None, r".*?"),
    "i": (None, r".*?"),
}
_ESCAPE = re.compile(r"%(-?\d*)(.?)", re.S)
_SNIFF = re.compile(
    r"\b(?:LOG|ERROR|FATAL|PANIC|WARNING|NOTICE|INFO|DEBUG[1-5]?|DETAIL|HINT|STATEMENT|CONTEXT):  \S"
)


@lru_cache(maxsize=16)
def compile_prefix(prefix: str) -> re.Pattern[str]:
    """Compile a ``log_line_prefix`` into a regex for whole lines.

    Named groups: time or epoch, pid, session, sqlstate, user, database, application (those the prefix
    has), then severity and message. Text after ``%q`` is optional (non-session processes omit it).

    >>> rx = compile_prefix("%m [%p] %q%u@%d ")
    >>> rx.match("2024-03-05 14:02:11.481 UTC [41877] shop@bakery LOG:  duration: 1.0 ms").group("user")
    'shop'
    >>> rx.match("2024-03-05 14:02:11.481 UTC [41870] LOG:  checkpoint starting: time").group("user")
    """
    head: list[str] = []
    tail: list[str] | None = None
    seen: set[str] = set()
    pos = 0
    for match in _ESCAPE.finditer(prefix):
        target = head if tail is None else tail
        target.append(re.escape(prefix[pos : match.start()]))
        pos = match.end()
        pad, letter = match.groups()
        if letter == "%":
            target.append("%")
        elif letter == "q":
            if tail is None:
                tail = []
        elif letter in _ESCAPES:
            name, pattern = _ESCAPES[letter]
            group = f"(?P<{name}>{pattern})" if name and name not in seen else f"(?:{pattern})"
            if name:
                seen.add(name)
            if pad.startswith("-"):
                group += " *"
            elif pad:
                group = " *" + group
            target.append(group)
        # unknown escapes print nothing (elog.c, log_status_format)
    rest = re.escape(prefix[pos:])
    if tail is None:
        head.append(rest)
        body = "".join(head)
    else:
        tail.append(rest)
        body = "".join(head) + "(?:" + "".join(tail) + ")?"
    severity = "|".join(sorted(SEVERITIES, key=len, reverse=True))
    never = "(?P<none>(?!))?"  # an always-empty group for escapes a prefix does not have
    return re.compile(f"{never}{body}(?P<severity>{severity}):  (?P<message>.*)\\Z", re.S)


def sniff(head: list[str]) -> bool:
    """True when most prefixed lines carry a PostgreSQL severity word followed by two spaces."""
    lines = [line for line in head if line.strip() and not line.startswith("\t")]
    if not lines or lines[0].lstrip().startswith(("{", "#", "[")):
        return False
    hits = sum(1 for line in lines if _SNIFF.search(line))
    return hits > 0 and hits * 2 >= len(lines)


def read(lines: Iterable[tuple[int, str]], options: ReadOptions) -> Iterator[Record]:
    """Yield the records of a stderr log, in file order; see :mod:`attrib.records`."""
    rx = compile_prefix(options.log_line_prefix)
    groups = rx.groupindex
    if "time" not in groups and "epoch" not in groups:
        raise FormatError(
            f"log_line_prefix {options.log_line_prefix!r} has no time escape (%m, %t or %n); "
            "statements cannot be placed in time"
        )
    wanted = options.statement_fields.get("request_id")
    if wanted not in (None, "application_name", "%a"):
        raise MappingError(
            f"request_id field {wanted!r}: a stderr log offers only application_name (%a)"
        )
    app_as_request = wanted is not None
    if app_as_request and "application" not in groups:
        raise MappingError("request_id field application_name: log_line_prefix has no %a")
    parse_time = time_parser(options.tz) if "time" in groups else epoch_parser
    time_group = "time" if "time" in groups else "epoch"
    key_group = "session" if "session" in groups else ("pid" if "pid" in groups else None)
    # one group() call per line; letters the prefix lacks read the always-empty group "none"
    names = tuple(
        name if name in groups else "none"
        for name in (time_group, key_group or "none", "user", "database", "application")
    ) + ("severity", "sqlstate" if "sqlstate" in groups else "none", "message")

    asm = Assembler()
    feed = asm.feed
    held: Entry | None = None  # primary message waiting for its DETAIL/STATEMENT lines
    current: Entry | None = None  # message being read (continuation lines may follow)
    parts: list[str] | None = None  # its lines, once it has a continuation line

    def attach(entry: Entry) -> list[Record]:
        """A DETAIL/STATEMENT/... part: add it to the held primary of the same session."""
        nonlocal held
        out: list[Record] = []
        if held is not None and held.session == entry.session:
            held.lines += entry.lines
            if entry.severity == "DETAIL" and held.detail is None:
                held.detail = entry.message
            elif entry.severity == "STATEMENT":
                held.query = entry.message
            return out
        if held is not None:
            out += feed(held)
            held = None
        out += asm.skip(entry.line, "detail", entry.lines)
        return out

    for number, text in lines:
        if text[:1] == "\t":
            if current is None:
                yield from asm.reject(number, "continuation line without a message before it", text)
            else:
                if parts is None:
                    parts = [current.message]
                parts.append(text[1:])
                current.lines += 1
            continue
        if current is not None:
            # the message before this line is complete
            if parts is not None:
                current.message = "\n".join(parts)
                parts = None
            if current.severity in SECONDARY:
                ready = attach(current)
            else:
                ready = feed(held) if held is not None else None
                held = current
            if ready:
                yield from ready
            current = None
        match = rx.match(text)
        if match is None:
            if held is not None:
                yield from feed(held)
                held = None
            reason = "empty line" if not text.strip() else "line does not match log_line_prefix"
            yield from asm.reject(number, reason, text)
            continue
        stamp, key, user, database, application, severity, sqlstate, message = match.group(*names)
        try:
            time_us = parse_time(stamp)
        except ValueError:
            if held is not None:
                yield from feed(held)
                held = None
            yield from asm.reject(number, "unreadable timestamp", text)
            continue
        current = Entry(
            number,
            1,
            time_us,
            key or "",
            key or None,
            None if not user or user == "[unknown]" else user,
            None if not database or database == "[unknown]" else database,
            clean_name(application) if app_as_request else None,
            severity,
            sqlstate,
            message,
        )
    if current is not None:
        if parts is not None:
            current.message = "\n".join(parts)
        if current.severity in SECONDARY:
            yield from attach(current)
        else:
            if held is not None:
                yield from feed(held)
            held = current
    if held is not None:
        yield from feed(held)
    yield from asm.finish()
