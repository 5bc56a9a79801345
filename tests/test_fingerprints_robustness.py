"""Inputs that must not break fingerprinting: each returns a valid (often parsed=False) template.

No timing assertions here (project rule); time is bounded by construction (statements are read up
to 1,000,000 characters, sqlglot sees at most 20,000 characters and 200 levels of brackets) and
measured in tests/bench/bench_fingerprints.py.
"""

from __future__ import annotations

import pytest

from fingerprints import fingerprint, fingerprint_many
from fingerprints.fallback import MAX_TEMPLATE

DIALECTS = ["postgres", "mysql", "sqlite", "generic"]

ODD_INPUTS = {
    "empty": "",
    "blank": " \n\t ",
    "only a comment": "/*request_id='r1'*/",
    "only a semicolon": ";",
    "truncated after keyword": "SELECT a FROM t WHERE",
    "truncated inside a string": "SELECT a FROM t WHERE n = 'abc",
    "truncated inside E string": "SELECT a FROM t WHERE n = E'ab\\'",
    "truncated inside dollar quote": "SELECT $tag$ abc",
    "truncated inside a comment": "SELECT a /* abc",
    "truncated inside a quoted name": 'SELECT "abc',
    "unbalanced brackets": "SELECT ((a FROM t))) WHERE (",
    "NUL bytes": "SELECT\x00 a FROM t\x00 WHERE x = '\x00'",
    "binary garbage": bytes(range(256)).decode("latin-1"),
    "lone surrogates": b"SELECT \xff\xfe FROM t".decode("utf-8", "surrogateescape"),
    "emoji and right-to-left text": "SELECT '🙂' AS x, name FROM t WHERE note = 'שלום'",
    "two statements": "SELECT 1; SELECT a FROM t WHERE x = 2",
    "only parameters": "$1 ? %s :name",
}


@pytest.mark.parametrize("dialect", DIALECTS)
@pytest.mark.parametrize("name", list(ODD_INPUTS))
def test_fingerprint_odd_input_returns_a_template(name, dialect):
    fp = fingerprint(ODD_INPUTS[name], dialect)
    assert len(fp.id) == 16
    assert isinstance(fp.template, str)
    assert fp.command in {"SELECT", "other"} or fp.command.isalpha()
    if not (name == "truncated inside dollar quote" and dialect in ("mysql", "sqlite")):
        # The unterminated literal's text never leaks (MySQL and SQLite have no dollar quoting,
        # so there "$tag$ abc" is not a literal).
        assert "abc" not in fp.template


def test_fingerprint_empty_statement_is_not_parsed():
    fp = fingerprint("")
    assert (fp.template, fp.command, fp.tables, fp.parsed) == ("", "other", (), False)


@pytest.mark.parametrize("depth", [2_000, 5_000])
def test_fingerprint_deep_nesting_falls_back_to_a_bounded_template(depth):
    sql = "SELECT " + "(" * depth + "1" + ")" * depth + " FROM t"
    fp = fingerprint(sql)
    assert fp.parsed is False
    assert len(fp.template) < MAX_TEMPLATE + 100
    assert "1" not in fp.template.split("...[truncated")[0]  # the literal is masked


def test_fingerprint_deep_nesting_with_subqueries_does_not_raise():
    sql = "SELECT a FROM t WHERE id IN " * 1000 + "(1)"
    fp = fingerprint(sql)
    assert fp.parsed is False and fp.template.startswith("SELECT a FROM t WHERE id IN")


def test_fingerprint_five_megabyte_statement_has_a_bounded_template():
    sql = "SELECT " + ", ".join(f"col_{i} + {i}" for i in range(400_000))
    assert len(sql) > 5_000_000
    fp = fingerprint(sql)
    assert len(fp.template) < MAX_TEMPLATE + 100
    assert "...[truncated" in fp.template


def test_fingerprint_huge_multi_row_insert_collapses_to_one_row():
    rows = ", ".join(f"({i}, 'guest {i}')" for i in range(20_000))
    fp = fingerprint(f"INSERT INTO guests (id, name) VALUES {rows}")
    assert fp.template == "INSERT INTO guests (id, name) VALUES (?, ?)" and fp.parsed


def test_fingerprint_many_accepts_a_generator_and_non_str_items():
    batch = fingerprint_many(x for x in ["SELECT 1", b"SELECT 2", None])
    assert len(batch.ids) == 3
    assert batch.ids[0] == batch.ids[1]
