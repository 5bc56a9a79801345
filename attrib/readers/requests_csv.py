"""Request log as CSV: a header row, then one row per request.

Columns are found by header name, with the same mapping (``ReadOptions.request_fields``), defaults, time
and unit rules as the JSON-lines reader (:mod:`attrib.readers.requests_jsonl`); a mapped column that the
header lacks raises :class:`~attrib.errors.MappingError` before any row is read. The delimiter is
``,``, tab or ``;``, whichever the header uses most. Fields may be quoted with ``"`` (doubled ``""``
inside), and a quoted field may hold line breaks: such a row consumes several lines, up to
:data:`MAX_ROW_LINES`; a quote still open after that (or at the end of the file) rejects the first line
only, and reading resumes on the next one, so one stray quote cannot swallow the rest of the file.
Empty cells and ``-`` are missing values. A repeated header row (concatenated files) is skipped.
"""

from __future__ import annotations

import csv
from collections.abc import Iterable, Iterator

from attrib.errors import MappingError
from attrib.readers.requests_jsonl import EXCERPT, MAX_LINE, FieldPlan, build_request
from attrib.records import ReadOptions, Record, Reject, Skip

NAME = "requests-csv"
KIND = "requests"

MAX_ROW_LINES = 50  # a quoted field spanning more lines is taken as a stray quote (no source)
_DELIMITERS = (",", "\t", ";")


def sniff(head: list[str]) -> bool:
    """True when the first non-blank line is a header naming a time, a duration and a path or route."""
    header_line = next((text for text in head if text.strip()), None)
    if header_line is None or header_line.lstrip().startswith(("{", "[")):
        return False
    delimiter = _delimiter(header_line)
    header = _header(header_line, delimiter)
    if header is None or len(header) < 3:
        return False
    try:
        return FieldPlan.resolve([dict.fromkeys(header, "")], {}, "request log").complete
    except MappingError:  # e.g. no duration column: not this format (detection must not fail)
        return False


def read(lines: Iterable[tuple[int, str]], options: ReadOptions) -> Iterator[Record]:
    """Read a CSV request log with a header row."""
    it = iter(lines)
    pending: list[tuple[int, str]] = []

    def next_line() -> tuple[int, str] | None:
        if pending:
            return pending.pop()
        return next(it, None)

    header_text = None
    while header_text is None:
        item = next_line()
        if item is None:
            return
        number, text = item
        if not text.strip():
            yield Skip(number, "blank")
            continue
        header_text = text
        delimiter = _delimiter(text)
        header = _header(text, delimiter)
        if header is None:
            yield Reject(number, "unreadable header row", text[:EXCERPT])
            header_text = None
            continue
        yield Skip(number, "header")

    plan = FieldPlan.resolve([dict.fromkeys(header, "")], options.request_fields, "request log")
    index = {name: i for i, name in reversed(list(enumerate(header)))}
    columns = [(ours, index[name]) for ours, name in plan.names.items()]
    if plan.elapsed is not None:
        columns.append(("elapsed", index[plan.elapsed[0]]))
    unit = plan.elapsed[1] if plan.elapsed else "ms"
    width = len(header)
    tz = options.tz

    while True:
        item = next_line()
        if item is None:
            return
        number, text = item
        if not text or text.isspace():
            yield Skip(number, "blank")
            continue
        if text == header_text:
            yield Skip(number, "header")
            continue
        if len(text) > MAX_LINE:
            yield Reject(number, "line longer than 1 MiB", text[:EXCERPT])
            continue
        used = 1
        if '"' not in text:
            fields = text.split(delimiter)
        else:
            taken: list[tuple[int, str]] = []
            fields, reason = _parse_quoted(text, delimiter)
            while reason == "open" and len(taken) < MAX_ROW_LINES - 1:
                following = next_line()
                if following is None:
                    break
                taken.append(following)
                text = text + "\n" + following[1]
                fields, reason = _parse_quoted(text, delimiter)
            if reason is not None:
                pending.extend(reversed(taken))
                why = "unterminated quoted field" if reason == "open" else "bad quoting"
                yield Reject(number, why, text.partition("\n")[0][:EXCERPT])
                continue
            used += len(taken)
        if len(fields) != width:
            yield Reject(
                number, f"expected {width} columns, found {len(fields)}", text[:EXCERPT], used
            )
            continue
        values = {ours: _cell(fields[i]) for ours, i in columns}
        record = build_request(number, values, unit, tz)
        record.lines = used
        if type(record) is Reject:
            record.excerpt = text[:EXCERPT]
        yield record


def _cell(text: str) -> str | None:
    text = text.strip()
    return text if text and text != "-" else None


def _parse_quoted(text: str, delimiter: str) -> tuple[list[str], str | None]:
    """Fields of one row; the reason is "open" for an unclosed quote, "bad" for other quoting errors."""
    try:
        rows = list(csv.reader([text], delimiter=delimiter, strict=True))
    except csv.Error as exc:
        return [], "open" if "unexpected end of data" in str(exc) else "bad"
    if len(rows) != 1:
        return [], "bad"
    return rows[0], None


def _delimiter(header_line: str) -> str:
    return max(_DELIMITERS, key=header_line.count)


def _header(text: str, delimiter: str) -> list[str] | None:
    fields, reason = _parse_quoted(text.lstrip("\ufeff"), delimiter)
    if reason is not None:
        return None
    names = [name.strip() for name in fields]
    return names if any(names) else None
