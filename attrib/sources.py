"""Input files: glob expansion, gzip by magic bytes, SHA-256, and numbered text lines.

Lines are decoded as UTF-8; bytes that are not valid UTF-8 become U+FFFD (the replacement character)
so that no line is ever dropped for its encoding. Line ends (``\\n`` or ``\\r\\n``) are removed.
"""

from __future__ import annotations

import glob
import gzip
import hashlib
import io
import os
from collections.abc import Iterable, Iterator
from pathlib import Path
from typing import BinaryIO

from attrib.errors import FormatError, InputError

GZIP_MAGIC = b"\x1f\x8b"
HEAD_LINES = 50
_GLOB_CHARS = set("*?[")


def expand(patterns: Iterable[str | os.PathLike[str]]) -> list[Path]:
    """Expand file names and glob patterns, in the order given (matches of one glob sorted).

    Raises InputError "PATTERN: no such file" for a missing file or a glob that matches nothing, and
    for a directory. A file named twice is kept once.

    >>> expand([]) == []
    True
    """
    out: list[Path] = []
    seen: set[Path] = set()
    for pattern in patterns:
        text = os.path.expanduser(str(pattern))
        if _GLOB_CHARS & set(text) and not Path(text).exists():
            matches = sorted(Path(p) for p in glob.glob(text, recursive=True))
            matches = [p for p in matches if p.is_file()]
        else:
            matches = [Path(text)]
        if not matches or not matches[0].exists():
            raise InputError(f"{pattern}: no such file")
        for path in matches:
            if path.is_dir():
                raise InputError(f"{path}: is a directory, not a log file")
            key = path.resolve()
            if key not in seen:
                seen.add(key)
                out.append(path)
    return out


def is_gzip(path: str | os.PathLike[str]) -> bool:
    """True when the file starts with the gzip magic bytes (whatever its name)."""
    with open(path, "rb") as f:
        return f.read(2) == GZIP_MAGIC


def sha256(path: str | os.PathLike[str]) -> str:
    """Hex SHA-256 of the file's bytes as stored on disk (compressed files are hashed compressed)."""
    with open(path, "rb") as f:
        return hashlib.file_digest(f, "sha256").hexdigest()


def open_binary(path: str | os.PathLike[str]) -> BinaryIO:
    """Open a file for reading bytes, decompressing it when it is gzip."""
    if is_gzip(path):
        return gzip.open(path, "rb")  # type: ignore[return-value]
    return open(path, "rb")


def decode_lines(stream: BinaryIO, block: int = 1 << 20) -> Iterator[str]:
    """Decode a byte stream into lines without their ends (invalid UTF-8 becomes U+FFFD).

    >>> list(decode_lines(io.BytesIO(b"a\\r\\nb\\xff\\nc")))
    ['a', 'b\\ufffd', 'c']
    """
    for _, line in numbered_lines(stream, block):
        yield line


def numbered_lines(stream: BinaryIO, block: int = 1 << 20) -> Iterator[tuple[int, str]]:
    """``(line_number, text)`` pairs of a byte stream, numbered from 1, decoded block by block."""
    text = io.TextIOWrapper(stream, encoding="utf-8", errors="replace", newline="")
    rest = ""
    n = 0
    while True:
        chunk = text.read(block)
        if not chunk:
            break
        parts = (rest + chunk).replace("\r\n", "\n").split("\n")
        rest = parts.pop()  # unfinished line (a "\r\n" cut in two is joined next time)
        yield from zip(range(n + 1, n + 1 + len(parts)), parts, strict=True)
        n += len(parts)
    if rest:
        yield n + 1, rest[:-1] if rest.endswith("\r") else rest


def head(path: str | os.PathLike[str], n: int = HEAD_LINES) -> list[str]:
    """The first ``n`` decoded lines of a file, for format detection.

    Raises FormatError when the file is not text (its first 8 KiB hold NUL bytes, as binary files do).
    """
    with open_binary(path) as raw:
        try:
            start = raw.read(8192)
        except (OSError, EOFError) as exc:
            raise FormatError(f"{path}: cannot read the file ({exc})") from None
        if looks_binary(start):
            raise FormatError(f"{path}: not a text log (the file holds binary data)")
        lines = []
        for line in decode_lines(io.BytesIO(start + raw.read(1 << 20))):
            if "\x00" in line:  # NUL padding (a crash): detect on the text after it
                line = after_nul(line)
                if not line:
                    continue
            lines.append(line)
            if len(lines) >= n:
                break
    return lines


def looks_binary(sample: bytes) -> bool:
    """True when a file's first bytes are binary data rather than a text log with NUL padding.

    Runs of NUL bytes are what a crashed server leaves in a text log (zeroed blocks), so they are
    allowed. A sample is binary when NUL bytes stand alone (UTF-16 text, binary formats: more than
    1% of the bytes) or when, without its NUL bytes, more than 30% of it is control characters or
    invalid UTF-8 (thresholds: common practice, no source).

    >>> looks_binary(b"2026-12-01 LOG:  x\\n" + b"\\x00" * 4096 + b"2026-12-01 LOG:  y\\n")
    False
    >>> looks_binary("log line\\n".encode("utf-16-le"))
    True
    """
    if not sample:
        return False
    alone = len(sample) - len(sample.replace(b"\x00", b"")) - 2 * sample.count(b"\x00\x00")
    if b"\x00" in sample and alone > len(sample) // 100:
        return True
    text = sample.replace(b"\x00", b"").decode("utf-8", errors="replace")
    if not text:
        return False
    bad = sum(1 for c in text if c == "\ufffd" or (c < " " and c not in "\t\n\r\f\v\x1b"))
    return bad * 10 > len(text) * 3


def after_nul(text: str) -> str:
    """The part of a line after its last NUL byte: what a server wrote after a run of NUL padding.

    >>> after_nul("lost\\x00\\x00\\x002026-12-01 LOG:  ok")
    '2026-12-01 LOG:  ok'
    """
    return text.rpartition("\x00")[2]


class LineSource:
    """The numbered lines of one file, counting how many were read and how far into the file.

    Iterate it once: it yields ``(line_number, text)`` pairs numbered from 1. ``lines_read`` is exact
    once the file is read to its end (see :meth:`drain`).
    """

    def __init__(self, path: str | os.PathLike[str]) -> None:
        self.path = Path(path)
        self.size = self.path.stat().st_size
        self.lines_read = 0
        self._file = open(self.path, "rb")
        self._stream: BinaryIO = (
            gzip.GzipFile(fileobj=self._file, mode="rb")  # type: ignore[assignment]
            if self._file.read(2) == GZIP_MAGIC
            else self._file
        )
        self._file.seek(0)
        self._block = 1 << 20
        self._iter = self._generate()

    def __iter__(self) -> Iterator[tuple[int, str]]:
        return self._iter

    def _generate(self) -> Iterator[tuple[int, str]]:
        """Yield the numbered lines; ``lines_read`` counts whole decoded blocks ahead of the caller."""
        text = io.TextIOWrapper(self._stream, encoding="utf-8", errors="replace", newline="")
        rest = ""
        try:
            while True:
                chunk = text.read(self._block)
                if not chunk:
                    break
                parts = (rest + chunk).replace("\r\n", "\n").split("\n")
                rest = parts.pop()
                n = self.lines_read
                self.lines_read = n + len(parts)
                yield from zip(range(n + 1, n + 1 + len(parts)), parts, strict=True)
        except (OSError, EOFError) as exc:  # e.g. a truncated gzip member
            raise FormatError(
                f"{self.path}: cannot read past line {self.lines_read} ({exc})"
            ) from None
        if rest:
            self.lines_read += 1
            yield self.lines_read, rest[:-1] if rest.endswith("\r") else rest

    def drain(self) -> int:
        """Read to the end the lines a reader left (it stopped early); return how many there were."""
        return sum(1 for _ in self._iter)

    def position(self) -> int:
        """Bytes of the file (as stored) consumed so far."""
        try:
            return self._file.tell()
        except (OSError, ValueError):
            return 0

    def close(self) -> None:
        """Close the file."""
        if self._stream is not self._file:
            self._stream.close()
        self._file.close()

    def __enter__(self) -> LineSource:
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()
