"""Properties checked with hypothesis: literal values never change an id, the bulk path equals the
single path, and no input makes either raise."""

from __future__ import annotations

import string

from hypothesis import given, settings
from hypothesis import strategies as st

from fingerprints import fingerprint, fingerprint_many

DIALECTS = ["postgres", "mysql", "sqlite", "generic"]

# Statement skeletons with one kind of literal per hole; {s} string, {n} number, {b} boolean/NULL.
SKELETONS = [
    "SELECT a, b FROM huts WHERE id = {n} AND name = {s}",
    "SELECT a FROM huts WHERE id IN ({n}, {n}, {n}) AND flag = {b}",
    "INSERT INTO bookings (hut_id, note, paid) VALUES ({n}, {s}, {b}), ({n}, {s}, {b})",
    "UPDATE rooms SET price = {n}, note = {s} WHERE id = {n} /*request_id={s}*/",
    "DELETE FROM trails WHERE length > {n} OR name = {s}",
    "WITH r AS (SELECT hut_id FROM bookings WHERE nights > {n}) SELECT * FROM r WHERE hut_id = {n}",
    "SELECT count(*) FROM guests WHERE created_at > {s} GROUP BY 1 ORDER BY 1 LIMIT {n}",
]

safe_text = st.text(
    alphabet=string.ascii_letters + string.digits + " _-./:;,()*%$?'\"\\\n", max_size=20
)


def _string(dialect: str, text: str) -> str:
    if dialect == "mysql":
        return "'" + text.replace("\\", "\\\\").replace("'", "''") + "'"
    return "'" + text.replace("'", "''") + "'"


numbers = st.one_of(
    st.integers(min_value=-(10**12), max_value=10**12).map(str),
    st.floats(allow_nan=False, allow_infinity=False, width=32).map(lambda f: repr(abs(f))),
    st.integers(min_value=0, max_value=10**6).map(lambda i: f"{i}e-3"),
)
keywords = st.sampled_from(["TRUE", "FALSE", "NULL", "true", "null"])


@st.composite
def filled(draw, dialect: str, skeleton: str | None = None):
    if skeleton is None:
        skeleton = draw(st.sampled_from(SKELETONS))
    out = []
    for part in skeleton.split("{"):
        if "}" not in part:
            out.append(part)
            continue
        hole, rest = part.split("}", 1)
        if hole == "s":
            out.append(_string(dialect, draw(safe_text)))
        elif hole == "n":
            out.append(draw(numbers))
        else:
            out.append(draw(keywords))
        out.append(rest)
    return "".join(out)


@settings(max_examples=200, deadline=None)
@given(st.sampled_from(DIALECTS), st.data())
def test_fingerprint_different_literal_values_never_change_the_id(dialect, data):
    skeleton = data.draw(st.sampled_from(SKELETONS))
    first = data.draw(filled(dialect, skeleton))
    second = data.draw(filled(dialect, skeleton))
    assert fingerprint(first, dialect).id == fingerprint(second, dialect).id, (first, second)


@settings(max_examples=200, deadline=None)
@given(
    st.sampled_from(DIALECTS),
    st.lists(st.one_of(st.text(max_size=80), filled("postgres")), max_size=12),
)
def test_fingerprint_many_equals_fingerprint_statement_by_statement(dialect, statements):
    batch = fingerprint_many(statements, dialect, with_literals=True, processes=1)
    assert len(batch.ids) == len(statements) == len(batch.literals)
    for sql, fid in zip(statements, batch.ids, strict=True):
        assert batch.templates[fid] == fingerprint(sql, dialect)


sql_alphabet = st.sampled_from(
    list("()'\"`$?:;,.-+*/%#=<>[]\\\n\t \x00")
    + [
        "SELECT ",
        "FROM ",
        "WHERE ",
        "IN ",
        "E'",
        "$$",
        "$a$",
        "/*",
        "*/",
        "--",
        "1",
        "1e5",
        "NULL",
        "ORDER BY ",
        "VALUES ",
        "SAVEPOINT ",
    ]
)


@settings(max_examples=200, deadline=None)
@given(
    st.sampled_from(DIALECTS),
    st.one_of(
        st.text(max_size=200),
        st.lists(sql_alphabet, max_size=60).map("".join),
        st.binary(max_size=200).map(lambda b: b.decode("utf-8", "surrogateescape")),
        st.integers(min_value=0, max_value=400).map(lambda d: "SELECT " + "(" * d + "1" + ")" * d),
    ),
)
def test_fingerprint_no_input_makes_it_raise(dialect, sql):
    fp = fingerprint(sql, dialect)
    assert len(fp.id) == 16 and fp.id == fp.id.lower()
    assert isinstance(fp.template, str) and len(fp.template) < 5000
    batch = fingerprint_many([sql, sql], dialect, processes=1)
    assert batch.ids == [fp.id, fp.id]


def test_fingerprint_many_two_processes_equal_one_process():
    statements = [
        f"SELECT a FROM t{i % 7} WHERE id = {i} /*request_id='r{i}'*/" for i in range(3_000)
    ] + ["SELEC broken", "", "SAVEPOINT sp_9"]
    one = fingerprint_many(statements, with_literals=True, processes=1)
    two = fingerprint_many(statements, with_literals=True, processes=2)
    assert two.ids == one.ids
    assert two.templates == one.templates
    assert two.literals == one.literals
    assert len(one.templates) == 7 + 3


@settings(max_examples=200, deadline=None)
@given(
    st.sampled_from(DIALECTS),
    st.lists(
        st.one_of(st.lists(sql_alphabet, max_size=30).map("".join), filled("mysql")), max_size=8
    ),
)
def test_fingerprint_many_ids_do_not_depend_on_with_literals(dialect, statements):
    plain = fingerprint_many(statements, dialect, processes=1)
    with_values = fingerprint_many(statements, dialect, with_literals=True, processes=1)
    assert plain.ids == with_values.ids
    assert plain.literals is None and len(with_values.literals) == len(statements)
