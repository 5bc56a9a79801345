"""Input files: gzip by magic bytes, SHA-256, globbing, decoding, missing files."""

from __future__ import annotations

import gzip
import hashlib
import io

import pytest

from attrib import sources
from attrib.errors import FormatError, InputError


def test_is_gzip_detects_by_magic_bytes_not_by_name(tmp_path):
    packed = tmp_path / "statements.log"  # gzip content, plain name
    packed.write_bytes(gzip.compress(b"a\nb\n"))
    plain = tmp_path / "requests.log.gz"  # plain content, gzip name
    plain.write_bytes(b"a\nb\n")
    assert sources.is_gzip(packed)
    assert not sources.is_gzip(plain)


def test_line_source_reads_gzip_and_plain_files_alike(tmp_path):
    packed = tmp_path / "a.log"
    packed.write_bytes(gzip.compress(b"one\r\ntwo\nthree"))
    plain = tmp_path / "b.log"
    plain.write_bytes(b"one\r\ntwo\nthree")
    with sources.LineSource(packed) as a, sources.LineSource(plain) as b:
        assert list(a) == list(b) == [(1, "one"), (2, "two"), (3, "three")]
        assert a.lines_read == b.lines_read == 3


def test_sha256_is_the_hash_of_the_bytes_on_disk(tmp_path):
    path = tmp_path / "x.log.gz"
    data = gzip.compress(b"hello\n")
    path.write_bytes(data)
    assert sources.sha256(path) == hashlib.sha256(data).hexdigest()


def test_decode_lines_invalid_utf8_becomes_replacement_character():
    lines = list(sources.decode_lines(io.BytesIO(b"caf\xc3\xa9\nbad \xff\xfe byte\n")))
    assert lines == ["café", "bad \ufffd\ufffd byte"]


def test_decode_lines_keeps_blank_lines_and_last_line_without_newline():
    assert list(sources.decode_lines(io.BytesIO(b"a\n\nb"))) == ["a", "", "b"]


def test_expand_glob_returns_matches_sorted_and_each_file_once(tmp_path):
    for name in ("b.log", "a.log", "c.txt"):
        (tmp_path / name).write_text("x\n")
    found = sources.expand([tmp_path / "*.log", tmp_path / "a.log"])
    assert [p.name for p in found] == ["a.log", "b.log"]


def test_expand_missing_file_is_an_input_error_naming_it(tmp_path):
    with pytest.raises(InputError, match=r"nope\.log: no such file"):
        sources.expand([tmp_path / "nope.log"])


def test_expand_glob_matching_nothing_is_an_input_error(tmp_path):
    with pytest.raises(InputError, match=r"\*\.jsonl: no such file"):
        sources.expand([tmp_path / "*.jsonl"])


def test_expand_directory_is_an_input_error(tmp_path):
    with pytest.raises(InputError, match="is a directory"):
        sources.expand([tmp_path])


def test_head_binary_file_is_a_format_error(tmp_path):
    png = tmp_path / "logo.png"
    png.write_bytes(b"\x89PNG\r\n\x1a\n\x00\x00\x00\rIHDR" + bytes(range(256)))
    with pytest.raises(FormatError, match="not a text log"):
        sources.head(png)


def test_head_returns_at_most_n_lines(tmp_path):
    path = tmp_path / "x.log"
    path.write_text("".join(f"line {i}\n" for i in range(100)))
    assert sources.head(path, 3) == ["line 0", "line 1", "line 2"]


def test_line_source_drain_counts_lines_a_reader_left(tmp_path):
    path = tmp_path / "x.log"
    path.write_text("a\nb\nc\nd\n")
    with sources.LineSource(path) as lines:
        lines._block = 3  # several blocks
        it = iter(lines)
        next(it)
        next(it)
        assert lines.drain() == 2
        assert lines.lines_read == 4


def test_line_source_truncated_gzip_is_a_format_error(tmp_path):
    path = tmp_path / "cut.log.gz"
    path.write_bytes(gzip.compress(b"line\n" * 10_000)[:-20])
    with sources.LineSource(path) as lines, pytest.raises(FormatError, match="cannot read past"):
        list(lines)


def test_line_source_small_blocks_give_the_same_lines(tmp_path):
    path = tmp_path / "x.log"
    data = "alpha\r\nbeta\n\ngamma \u00e9\r\n" * 5 + "last\r"
    path.write_bytes(data.encode())
    with sources.LineSource(path) as whole:
        expected = list(whole)
    for block in (1, 2, 3, 7):
        with sources.LineSource(path) as lines:
            lines._block = block
            assert list(lines) == expected
            assert lines.lines_read == len(expected) == 21
    assert expected[-1] == (21, "last")
    assert expected[:3] == [(1, "alpha"), (2, "beta"), (3, "")]
