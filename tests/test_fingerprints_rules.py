"""THE RULE of docs/fingerprints.md, one table row per point: pairs that must share a template and
pairs that must not. Sources are named beside the rows that rest on a manual."""

from __future__ import annotations

import pytest

from fingerprints import FingerprintError, fingerprint, fingerprint_many

# (title, dialect, statement a, statement b)
SAME = [
    # Literal values ------------------------------------------------------------------------------
    ("integer values", "postgres", "SELECT a FROM t WHERE id = 1", "SELECT a FROM t WHERE id = 42"),
    (
        "string values",
        "postgres",
        "SELECT a FROM t WHERE n = 'x'",
        "SELECT a FROM t WHERE n = 'yy'",
    ),
    # PostgreSQL manual, 4.1.2.1 String Constants: a quote inside a string is written twice.
    (
        "doubled quotes",
        "postgres",
        "SELECT a FROM t WHERE n = 'O''Brien'",
        "SELECT a FROM t WHERE n = 'x'",
    ),
    (
        "doubled quote then more SQL",
        "postgres",
        "SELECT a FROM t WHERE n = 'it''s' AND m = 1",
        "SELECT a FROM t WHERE n = 'b' AND m = 2",
    ),
    # PostgreSQL manual, 4.1.2.2 String Constants with C-Style Escapes: E'...' with \' inside.
    (
        "E'' string with \\'",
        "postgres",
        r"SELECT a FROM t WHERE n = E'it\'s'",
        "SELECT a FROM t WHERE n = 'x'",
    ),
    (
        "E'' string with \\n",
        "postgres",
        r"SELECT a FROM t WHERE n = e'a\nb'",
        "SELECT a FROM t WHERE n = 'x'",
    ),
    # PostgreSQL manual, 4.1.2.4 Dollar-Quoted String Constants.
    (
        "dollar quoting",
        "postgres",
        "SELECT a FROM t WHERE n = $$it's$$",
        "SELECT a FROM t WHERE n = 'x'",
    ),
    (
        "tagged dollar quoting",
        "postgres",
        "SELECT a FROM t WHERE n = $q$ a $$ 'b' $q$",
        "SELECT a FROM t WHERE n = 'x'",
    ),
    # PostgreSQL manual, 4.1.2.3 (U&'...'), 4.1.2.5 Bit-String Constants (B'...', X'...').
    (
        "unicode escape string",
        "postgres",
        "SELECT a FROM t WHERE n = U&'d\\0061t'",
        "SELECT a FROM t WHERE n = 'x'",
    ),
    (
        "bit string",
        "postgres",
        "SELECT a FROM t WHERE n = B'1010'",
        "SELECT a FROM t WHERE n = X'1F'",
    ),
    # PostgreSQL manual, 4.1.2.6 Numeric Constants (decimal point, exponent, 0x since 16).
    ("negative number", "postgres", "SELECT a FROM t WHERE x = -5", "SELECT a FROM t WHERE x = 5"),
    (
        "exponent number",
        "postgres",
        "SELECT a FROM t WHERE x = 1.5e-3",
        "SELECT a FROM t WHERE x = 7",
    ),
    ("decimal forms", "postgres", "SELECT a FROM t WHERE x = .5", "SELECT a FROM t WHERE x = 3."),
    ("hex number", "postgres", "SELECT a FROM t WHERE x = 0x1F", "SELECT a FROM t WHERE x = 31"),
    ("negative after keyword", "postgres", "SELECT -1, a FROM t", "SELECT 2, a FROM t"),
    (
        "number vs string value",
        "postgres",
        "SELECT a FROM t WHERE x = 5",
        "SELECT a FROM t WHERE x = '5'",
    ),
    # PostgreSQL manual, 4.2.9 Type Casts: the value inside a cast is a literal.
    (
        "cast ::",
        "postgres",
        "SELECT a FROM t WHERE x = '5'::int",
        "SELECT a FROM t WHERE x = '7'::int",
    ),
    ("cast CAST()", "postgres", "SELECT CAST('5' AS int) FROM t", "SELECT CAST('6' AS int) FROM t"),
    ("cast :: and CAST()", "postgres", "SELECT '5'::int FROM t", "SELECT CAST('6' AS int) FROM t"),
    (
        "typed literal",
        "postgres",
        "SELECT a FROM t WHERE d > DATE '2026-01-01'",
        "SELECT a FROM t WHERE d > DATE '2025-05-05'",
    ),
    (
        "interval",
        "postgres",
        "SELECT a FROM t WHERE d > now() - interval '30 days'",
        "SELECT a FROM t WHERE d > now() - interval '1 hour'",
    ),
    (
        "JSON literal",
        "postgres",
        """SELECT a FROM t WHERE doc @> '{"a":1}'::jsonb""",
        """SELECT a FROM t WHERE doc @> '{"b":[2, 3]}'::jsonb""",
    ),
    ("JSON path operator", "postgres", "SELECT doc->>'name' FROM t", "SELECT doc->>'city' FROM t"),
    # Booleans and NULL as values (THE RULE: TRUE/FALSE/NULL passed where a value stands).
    (
        "booleans",
        "postgres",
        "UPDATE t SET active = TRUE WHERE id = 1",
        "UPDATE t SET active = false WHERE id = 2",
    ),
    (
        "NULL as a value",
        "postgres",
        "INSERT INTO t (a, b) VALUES (NULL, 1)",
        "INSERT INTO t (a, b) VALUES (5, 1)",
    ),
    (
        "= NULL is a value",
        "postgres",
        "SELECT a FROM t WHERE b = NULL",
        "SELECT a FROM t WHERE b = 3",
    ),
    (
        "LIMIT and OFFSET values",
        "postgres",
        "SELECT a FROM t LIMIT 10 OFFSET 20",
        "SELECT a FROM t LIMIT 50 OFFSET 0",
    ),
    # Bind parameters ------------------------------------------------------------------------------
    # PostgreSQL manual, 4.2.2 Positional Parameters.
    ("$n parameters", "postgres", "SELECT a FROM t WHERE id = $1", "SELECT a FROM t WHERE id = 7"),
    ("? parameter", "postgres", "SELECT a FROM t WHERE id = ?", "SELECT a FROM t WHERE id = 7"),
    ("%s parameter", "postgres", "SELECT a FROM t WHERE id = %s", "SELECT a FROM t WHERE id = 7"),
    (
        "%(name)s parameter",
        "postgres",
        "SELECT a FROM t WHERE id = %(id)s",
        "SELECT a FROM t WHERE id = 7",
    ),
    (
        ":name parameter",
        "postgres",
        "SELECT a FROM t WHERE id = :id",
        "SELECT a FROM t WHERE id = 7",
    ),
    (
        "parameter in cast",
        "postgres",
        "SELECT a FROM t WHERE id = $1::int",
        "SELECT a FROM t WHERE id = '7'::int",
    ),
    ("mysql ? parameter", "mysql", "SELECT a FROM t WHERE id = ?", "SELECT a FROM t WHERE id = 7"),
    # SQLite documentation, "SQL Language Expressions", Parameters: ?NNN :AAA @AAA $AAA.
    (
        "sqlite parameters",
        "sqlite",
        "SELECT a FROM t WHERE x = ?1 AND y = @y",
        "SELECT a FROM t WHERE x = :x AND y = $y",
    ),
    # IN lists and VALUES rows ---------------------------------------------------------------------
    (
        "IN list length",
        "postgres",
        "SELECT a FROM t WHERE id IN (1, 2, 3)",
        "SELECT a FROM t WHERE id IN (9)",
    ),
    (
        "IN list without spaces",
        "postgres",
        "SELECT a FROM t WHERE id IN ($1,$2)",
        "SELECT a FROM t WHERE id IN (5)",
    ),
    (
        "IN list of mixed literal kinds",
        "postgres",
        "SELECT a FROM t WHERE id IN (1, -2, 'x')",
        "SELECT a FROM t WHERE id IN (4)",
    ),
    (
        "IN list of rows",
        "postgres",
        "SELECT a FROM t WHERE (x, y) IN ((1, 'a'), (2, 'b'))",
        "SELECT a FROM t WHERE (x, y) IN ((3, 'c'))",
    ),
    (
        "ARRAY length (lists sent as arrays)",
        "postgres",
        "SELECT a FROM t WHERE id = ANY(ARRAY[1, 2, 3])",
        "SELECT a FROM t WHERE id = ANY(ARRAY[4])",
    ),
    (
        "NOT IN list length",
        "postgres",
        "SELECT a FROM t WHERE id NOT IN (1, 2)",
        "SELECT a FROM t WHERE id NOT IN (3)",
    ),
    (
        "VALUES rows",
        "postgres",
        "INSERT INTO t (a, b) VALUES (1, 'x'), (2, 'y'), (3, 'z')",
        "INSERT INTO t (a, b) VALUES (4, 'w')",
    ),
    (
        "VALUES rows with a function",
        "postgres",
        "INSERT INTO t (a, b) VALUES (1, now()), (2, now())",
        "INSERT INTO t (a, b) VALUES (4, now())",
    ),
    (
        "mysql VALUES rows",
        "mysql",
        "INSERT INTO t (a, b) VALUES (1, 'x'), (2, \"y\")",
        "INSERT INTO t (a, b) VALUES (4, 'w')",
    ),
    # Comments, whitespace, keyword case ------------------------------------------------------------
    # sqlcommenter specification: comment appended as /*key='value',...*/.
    (
        "sqlcommenter comment",
        "postgres",
        "SELECT a FROM t WHERE id = 1 /*request_id='r-1',route='%2Fhuts'*/",
        "SELECT a FROM t WHERE id = 2 /*request_id='r-2',traceparent='00-4bf92f3577b34da6a3ce929d0e0e4736-00f067aa0ba902b7-01'*/",
    ),
    ("no comment vs comment", "postgres", "SELECT a FROM t", "SELECT a FROM t /*request_id='r'*/"),
    ("line comment", "postgres", "-- load huts\nSELECT a FROM t", "SELECT a FROM t"),
    ("comment inside", "postgres", "SELECT a /* first */ FROM t", "SELECT a FROM t"),
    # MariaDB manual, Comment Syntax: '#' starts a comment.
    ("mysql # comment", "mysql", "SELECT a FROM t # note", "SELECT a FROM t"),
    (
        "whitespace",
        "postgres",
        "SELECT  a,\n\tb FROM t  WHERE id=1",
        "SELECT a, b FROM t WHERE id = 1",
    ),
    ("keyword case", "postgres", "select a from t where id = 1", "SELECT a FROM t WHERE id = 1"),
    ("trailing semicolon", "postgres", "SELECT a FROM t;", "SELECT a FROM t"),
    (
        "window keyword case",
        "postgres",
        "SELECT sum(a) over (order by b rows between 1 preceding and current row) FROM t",
        "SELECT SUM(a) OVER (ORDER BY b ROWS BETWEEN 3 PRECEDING AND CURRENT ROW) FROM t",
    ),
    (
        "transaction keyword case",
        "postgres",
        "begin isolation level read committed",
        "BEGIN ISOLATION LEVEL READ COMMITTED",
    ),
    # Identifier case where the dialect folds it ----------------------------------------------------
    # PostgreSQL manual, 4.1.1 Identifiers and Key Words: unquoted names fold to lower case, and
    # FOO, foo and "foo" are the same name.
    ("unquoted name case, postgres", "postgres", "SELECT Name FROM Huts", "SELECT name FROM huts"),
    (
        "quoted lower-case name, postgres",
        "postgres",
        'SELECT "name" FROM "huts"',
        "SELECT name FROM huts",
    ),
    # SQLite documentation, "SQLite Keywords": names are case-insensitive, quoted or not.
    ("name case, sqlite", "sqlite", 'SELECT "Name" FROM [Huts]', "SELECT name FROM huts"),
    # MariaDB manual, Identifier Names: backticks quote a name without changing it.
    ("backticks, mysql", "mysql", "SELECT `name` FROM `huts`", "SELECT name FROM huts"),
    ("backticks, generic", "generic", "SELECT `name` FROM huts", "SELECT name FROM huts"),
    # Aliases -----------------------------------------------------------------------------------
    ("optional AS, table alias", "postgres", "SELECT h.a FROM huts h", "SELECT h.a FROM huts AS h"),
    (
        "optional AS, column alias",
        "postgres",
        "SELECT count(*) n FROM huts",
        "SELECT count(*) AS n FROM huts",
    ),
    # Savepoints (generated names) --------------------------------------------------------------------
    ("SAVEPOINT name", "postgres", "SAVEPOINT sp_123", "SAVEPOINT s140234_x1"),
    ("RELEASE SAVEPOINT name", "postgres", "RELEASE SAVEPOINT sp_1", "release savepoint sp_2"),
    (
        "ROLLBACK TO SAVEPOINT name",
        "postgres",
        "ROLLBACK TO SAVEPOINT sp_1",
        "ROLLBACK TO SAVEPOINT sp_99",
    ),
    ("mysql savepoint with backticks", "mysql", "SAVEPOINT `sp_1`", "SAVEPOINT sp_2"),
    # PostgreSQL manual, ROLLBACK TO SAVEPOINT and RELEASE SAVEPOINT: WORK/TRANSACTION and the
    # word SAVEPOINT are optional.
    ("ROLLBACK WORK TO name", "postgres", "ROLLBACK WORK TO SAVEPOINT sp_1", "rollback to sp_2"),
    ("RELEASE without SAVEPOINT", "postgres", "RELEASE sp_1", "RELEASE SAVEPOINT sp_2"),
    # Statements sqlglot keeps opaque (Command): literals were masked first ---------------------------
    ("SET", "postgres", "SET TIME ZONE 'UTC'", "set time zone 'Europe/Vienna'"),
    ("SET with number", "postgres", "SET statement_timeout = 5000", "SET statement_timeout = 100"),
    (
        "EXPLAIN",
        "postgres",
        "EXPLAIN SELECT a FROM t WHERE id = 1",
        "EXPLAIN SELECT a FROM t WHERE id = 2",
    ),
    # Bigger structures ---------------------------------------------------------------------------
    (
        "CTE",
        "postgres",
        "WITH r AS (SELECT hut_id FROM bookings WHERE nights > 2) SELECT * FROM r WHERE hut_id = 5",
        "with r as (select hut_id from bookings where nights > 7) select * from r where hut_id = 9",
    ),
    (
        "window function",
        "postgres",
        "SELECT rank() OVER (PARTITION BY hut_id ORDER BY price DESC) FROM rooms WHERE price > 10",
        "SELECT rank() OVER (PARTITION BY hut_id ORDER BY price DESC) FROM rooms WHERE price > 99.5",
    ),
    (
        "subquery",
        "postgres",
        "SELECT a FROM t WHERE id IN (SELECT t_id FROM u WHERE x = 'a')",
        "SELECT a FROM t WHERE id IN (SELECT t_id FROM u WHERE x = 'b')",
    ),
    (
        "unparseable statements differ only in literals",
        "postgres",
        "SELEC a FRM t WHERE id = 5 AND n = 'x'",
        "selec a frm t where id = -7 and n = 'yy'",
    ),
]

DIFFERENT = [
    ("columns", "postgres", "SELECT a FROM t", "SELECT b FROM t"),
    ("tables", "postgres", "SELECT a FROM t", "SELECT a FROM u"),
    ("schemas", "postgres", "SELECT a FROM s1.t", "SELECT a FROM s2.t"),
    ("predicate column", "postgres", "SELECT a FROM t WHERE x = 1", "SELECT a FROM t WHERE y = 1"),
    ("operator", "postgres", "SELECT a FROM t WHERE x = 1", "SELECT a FROM t WHERE x > 1"),
    (
        "IN vs NOT IN",
        "postgres",
        "SELECT a FROM t WHERE x IN (1)",
        "SELECT a FROM t WHERE x NOT IN (1)",
    ),
    ("= vs IS", "postgres", "SELECT a FROM t WHERE x = NULL", "SELECT a FROM t WHERE x IS NULL"),
    (
        "IS NULL vs IS NOT NULL",
        "postgres",
        "SELECT a FROM t WHERE x IS NULL",
        "SELECT a FROM t WHERE x IS NOT NULL",
    ),
    (
        "IS TRUE vs IS FALSE",
        "postgres",
        "SELECT a FROM t WHERE x IS TRUE",
        "SELECT a FROM t WHERE x IS FALSE",
    ),
    (
        "AND vs OR",
        "postgres",
        "SELECT a FROM t WHERE x = 1 AND y = 2",
        "SELECT a FROM t WHERE x = 1 OR y = 2",
    ),
    # PostgreSQL manual, 4.1.1: quoted names are case-sensitive.
    ("quoted name case", "postgres", 'SELECT "Name" FROM t', 'SELECT "name" FROM t'),
    ("quoted name case, table", "postgres", 'SELECT a FROM "Huts"', "SELECT a FROM huts"),
    # MariaDB manual, Identifier Case-sensitivity: table names are case-sensitive on Linux.
    ("mysql table name case", "mysql", "SELECT a FROM Huts", "SELECT a FROM huts"),
    (
        "join structure",
        "postgres",
        "SELECT a FROM t JOIN u ON u.id = t.u_id",
        "SELECT a FROM t LEFT JOIN u ON u.id = t.u_id",
    ),
    (
        "join condition",
        "postgres",
        "SELECT a FROM t JOIN u ON u.id = t.u_id",
        "SELECT a FROM t JOIN u ON u.id = t.v_id",
    ),
    # PostgreSQL manual, 7.5 Sorting Rows: an ORDER BY item can be an output column number.
    (
        "ORDER BY position",
        "postgres",
        "SELECT a, b FROM t ORDER BY 1",
        "SELECT a, b FROM t ORDER BY 2",
    ),
    (
        "ORDER BY positions with DESC",
        "postgres",
        "SELECT a, b FROM t ORDER BY 1 DESC, 2",
        "SELECT a, b FROM t ORDER BY 2 DESC, 1",
    ),
    (
        "GROUP BY position",
        "postgres",
        "SELECT a, count(*) FROM t GROUP BY 1",
        "SELECT a, count(*) FROM t GROUP BY 2",
    ),
    (
        "ORDER BY position after a name",
        "postgres",
        "SELECT a, b FROM t ORDER BY a, 1",
        "SELECT a, b FROM t ORDER BY a, 2",
    ),
    ("LIMIT vs no LIMIT", "postgres", "SELECT a FROM t LIMIT 5", "SELECT a FROM t"),
    ("DISTINCT", "postgres", "SELECT a FROM t", "SELECT DISTINCT a FROM t"),
    ("value vs column", "postgres", "SELECT a FROM t WHERE x = 1", "SELECT a FROM t WHERE x = y"),
    ("different casts", "postgres", "SELECT '5'::int FROM t", "SELECT '5'::bigint FROM t"),
    ("function", "postgres", "SELECT lower(a) FROM t", "SELECT upper(a) FROM t"),
    (
        "function arity",
        "postgres",
        "SELECT coalesce(a, 1) FROM t",
        "SELECT coalesce(a, 1, 2) FROM t",
    ),
    (
        "ARRAY of values vs of a column",
        "postgres",
        "SELECT ARRAY[1, 2] FROM t",
        "SELECT ARRAY[1, b] FROM t",
    ),
    (
        "IN list with a column",
        "postgres",
        "SELECT a FROM t WHERE x IN (1, 2)",
        "SELECT a FROM t WHERE x IN (1, y)",
    ),
    (
        "VALUES row width",
        "postgres",
        "INSERT INTO t VALUES (1, 2)",
        "INSERT INTO t VALUES (1, 2, 3)",
    ),
    ("INSERT columns", "postgres", "INSERT INTO t (a) VALUES (1)", "INSERT INTO t (b) VALUES (1)"),
    ("UPDATE set columns", "postgres", "UPDATE t SET a = 1", "UPDATE t SET b = 1"),
    ("DELETE vs SELECT", "postgres", "DELETE FROM t WHERE id = 1", "SELECT * FROM t WHERE id = 1"),
    ("identifier with digit", "postgres", "SELECT c1 FROM t1", "SELECT c2 FROM t2"),
    ("quoted name with digits", "postgres", 'SELECT "col 1" FROM t', 'SELECT "col 2" FROM t'),
    ("mysql backtick name with digits", "mysql", "SELECT `col 1` FROM t", "SELECT `col 2` FROM t"),
    ("savepoint vs release", "postgres", "SAVEPOINT sp_1", "RELEASE SAVEPOINT sp_1"),
    ("release vs rollback to", "postgres", "RELEASE SAVEPOINT sp_1", "ROLLBACK TO SAVEPOINT sp_1"),
    ("SET different setting", "postgres", "SET statement_timeout = 5", "SET lock_timeout = 5"),
    ("BEGIN vs COMMIT", "postgres", "BEGIN", "COMMIT"),
    ("jsonb key vs path", "postgres", "SELECT doc->'a' FROM t", "SELECT doc->>'a' FROM t"),
    (
        "subquery table",
        "postgres",
        "SELECT a FROM t WHERE id IN (SELECT x FROM u)",
        "SELECT a FROM t WHERE id IN (SELECT x FROM v)",
    ),
    (
        "CTE body",
        "postgres",
        "WITH r AS (SELECT a FROM t) SELECT * FROM r",
        "WITH r AS (SELECT b FROM t) SELECT * FROM r",
    ),
    (
        "unparseable statements with different words",
        "postgres",
        "SELEC a FRM t WHERE id = 5",
        "SELEC b FRM t WHERE id = 5",
    ),
]


def _ids(case):
    return case[0]


@pytest.mark.parametrize("case", SAME, ids=_ids)
def test_fingerprint_statements_differing_only_in_allowed_ways_share_a_template(case):
    _title, dialect, a, b = case
    fa, fb = fingerprint(a, dialect), fingerprint(b, dialect)
    assert fa.template == fb.template, (fa.template, fb.template)
    assert fa.id == fb.id


@pytest.mark.parametrize("case", DIFFERENT, ids=_ids)
def test_fingerprint_statements_that_can_differ_in_result_get_different_templates(case):
    _title, dialect, a, b = case
    fa, fb = fingerprint(a, dialect), fingerprint(b, dialect)
    assert fa.template != fb.template, fa.template
    assert fa.id != fb.id


LITERAL_LEAKS = [
    (
        "postgres",
        "SELECT a FROM t WHERE n = 'secret_1' AND m = E'secret_2\\'' AND k = $$secret_3$$",
    ),
    (
        "postgres",
        "SELECT a FROM t WHERE n = $tag$secret_4$tag$ AND doc @> '{\"secret_5\":1}'::jsonb",
    ),
    ("postgres", "SET application_name = 'secret_6'"),
    ("postgres", "EXPLAIN SELECT a FROM t WHERE n = 'secret_7'"),
    ("postgres", "SELECT a FROM t WHERE n = 'secret_8"),  # truncated inside the string
    ("postgres", "SELECT \"a FROM t WHERE n = 'secret_9'"),  # truncated inside a quoted name
    ("mysql", "SELECT a FROM t WHERE n = \"secret_10\" AND m = 'sec\\'ret_11'"),
    ("mysql", "INSERT INTO t VALUES (_utf8mb4'secret_12', X'5345435245', 0x5345435245)"),
    ("sqlite", "SELECT a FROM t WHERE n = 'secret_13' AND b = x'5345435245'"),
    ("generic", "SELEC garbage 'secret_14' FRM"),
]


@pytest.mark.parametrize("dialect, sql", LITERAL_LEAKS)
def test_fingerprint_template_never_contains_a_literal_value(dialect, sql):
    fp = fingerprint(sql, dialect)
    assert "secret" not in fp.template.lower(), fp.template
    assert "5345435245" not in fp.template


def test_fingerprint_select_template_is_readable_sql_with_question_marks():
    fp = fingerprint("select a from T where ID in ($1, $2, $3)")
    assert fp.template == "SELECT a FROM t WHERE id IN (?)"
    assert (fp.command, fp.tables, fp.parsed) == ("SELECT", ("t",), True)


@pytest.mark.parametrize(
    "sql, command",
    [
        ("SELECT 1", "SELECT"),
        ("WITH r AS (SELECT 1) SELECT * FROM r", "SELECT"),
        ("SELECT a FROM t UNION SELECT a FROM u", "SELECT"),
        ("INSERT INTO t VALUES (1)", "INSERT"),
        ("WITH r AS (SELECT 1) INSERT INTO t SELECT * FROM r", "INSERT"),
        ("UPDATE t SET a = 1", "UPDATE"),
        ("DELETE FROM t", "DELETE"),
        ("BEGIN", "BEGIN"),
        ("COMMIT", "COMMIT"),
        ("ROLLBACK", "ROLLBACK"),
        ("SET TIME ZONE 'UTC'", "SET"),
        ("SAVEPOINT sp_1", "SAVEPOINT"),
        ("", "other"),
        ("\x00\x01", "other"),
    ],
)
def test_fingerprint_command_names_the_statement_kind(sql, command):
    assert fingerprint(sql).command == command


def test_fingerprint_tables_are_sorted_and_exclude_cte_names():
    fp = fingerprint(
        "WITH r AS (SELECT hut_id FROM bookings) SELECT * FROM r JOIN Huts h ON h.id = r.hut_id "
        "JOIN audit.log l ON l.id = h.id"
    )
    assert fp.tables == ("audit.log", "bookings", "huts")


def test_fingerprint_unknown_dialect_raises_a_clear_error():
    with pytest.raises(FingerprintError, match="unknown SQL dialect 'oracle'; use one of"):
        fingerprint("SELECT 1", "oracle")
    with pytest.raises(ValueError):
        fingerprint_many(["SELECT 1"], dialect="tsql")


def test_fingerprint_many_literals_are_the_literal_tokens_in_order_without_comments():
    batch = fingerprint_many(
        [
            "SELECT a FROM t WHERE x = 5 AND y = 'it''s' AND z = -1.5e3 /*request_id='r1'*/",
            "SELECT a FROM t WHERE x = $1 AND y IS NULL AND z = NULL ORDER BY 2 LIMIT 10",
            "UPDATE t SET b = TRUE, c = $$x$$ WHERE id IN (1, 2)",
        ],
        with_literals=True,
    )
    assert batch.literals == [
        ("5", "'it''s'", "-1.5e3"),
        ("NULL", "10"),
        ("TRUE", "$$x$$", "1", "2"),
    ]
    assert batch.ids[0] != batch.ids[1]


def test_fingerprint_many_distinct_templates_are_listed_once():
    batch = fingerprint_many(["SELECT 1", "SELECT 2", "SELECT a FROM t", "BEGIN", "SELECT 3"])
    assert len(batch.ids) == 5
    assert len(batch.templates) == 3
    assert set(batch.ids) == set(batch.templates)
    for fid, fp in batch.templates.items():
        assert fp.id == fid and len(fid) == 16 and int(fid, 16) >= 0
