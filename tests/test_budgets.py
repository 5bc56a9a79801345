"""Query budgets: parsing the TOML file, matching routes by glob, checking percentiles and N+1 counts."""

from __future__ import annotations

from datetime import timedelta

import numpy as np
import pytest

from attrib.budgets import check, load_budgets, parse_budgets
from attrib.errors import InputError
from tests.test_whatif import T0, fill_store, loop_request, plain_request

BUDGETS = """
[routes."/huts/{id}/bunks"]
queries_p95 = 5
db_ms_p95 = 50
max_nplus1 = 0

[routes."/huts*"]
queries_p99_9 = 30
"""


@pytest.fixture
def huts(con):
    reqs = [loop_request(T0 + timedelta(seconds=i)) for i in range(10)]
    reqs += [plain_request(T0 + timedelta(seconds=i, milliseconds=500)) for i in range(5)]
    fill_store(con, reqs)
    return con


def test_parse_budgets_reads_patterns_keys_and_percentiles():
    limits = parse_budgets(BUDGETS)
    assert [(lim.pattern, lim.key, lim.metric, lim.percentile, lim.value) for lim in limits] == [
        ("/huts/{id}/bunks", "queries_p95", "queries", 95.0, 5.0),
        ("/huts/{id}/bunks", "db_ms_p95", "db_ms", 95.0, 50.0),
        ("/huts/{id}/bunks", "max_nplus1", "nplus1", None, 0.0),
        ("/huts*", "queries_p99_9", "queries", 99.9, 30.0),
    ]


@pytest.mark.parametrize(
    ("text", "message"),
    [
        ("routes = [", "not valid TOML"),
        ('[routes."/a"]\nqueries_p95 = "20"', "must be a number"),
        ('[routes."/a"]\nqueries_p95 = true', "must be a number"),
        ('[routes."/a"]\nqueries_p95 = -1', "must be 0 or more"),
        ('[routes."/a"]\nqueries_p0 = 3', "unknown limit"),
        ('[routes."/a"]\nrows_p95 = 3', "unknown limit"),
        ('[route."/a"]\nqueries_p95 = 3', "unknown top-level key"),
        ("", "no budgets"),
        ('[routes."/a"]', "no limits"),
    ],
)
def test_parse_budgets_malformed_file_raises_input_error(text, message):
    with pytest.raises(InputError, match=message) as info:
        parse_budgets(text, "b.toml")
    assert str(info.value).startswith("b.toml") and "\n" not in str(info.value)
    assert info.value.exit_code == 3


def test_load_budgets_missing_file_raises_input_error(tmp_path):
    with pytest.raises(InputError, match="cannot read"):
        load_budgets(tmp_path / "none.toml")


def test_check_reports_over_budget_rows_first(huts):
    df = check(huts, parse_budgets(BUDGETS))
    rows = {(r.route, r.budget): (r.actual, r.status) for r in df.itertuples()}
    # The loop route runs 11 statements per request (1 + 10) and 20.5 ms of them; one N+1 finding.
    assert rows[("/huts/{id}/bunks", "queries_p95")] == (11.0, "over")
    assert rows[("/huts/{id}/bunks", "db_ms_p95")] == (pytest.approx(20.5), "ok")
    assert rows[("/huts/{id}/bunks", "max_nplus1")] == (1.0, "over")
    # The glob matches both routes.
    assert rows[("/huts", "queries_p99_9")] == (1.0, "ok")
    assert rows[("/huts/{id}/bunks", "queries_p99_9")] == (11.0, "ok")
    assert list(df["status"][:2]) == ["over", "over"]


def test_check_pattern_without_route_is_reported(huts):
    df = check(huts, parse_budgets('[routes."/trails/*"]\nqueries_p95 = 3'))
    assert list(df["status"]) == ["no route"]


def test_check_percentile_is_hyndman_fan_type_7(con):
    # Reference: numpy.percentile(method="linear") is Hyndman and Fan (1996) definition 7.
    counts = [1, 2, 2, 3, 5, 8, 13, 21, 34, 55, 89]
    fill_store(
        con,
        [
            {
                "route": "/r",
                "start": T0 + timedelta(seconds=i),
                "elapsed": 100.0,
                "statements": [("q", float(k), 0.5, 1, k) for k in range(n)],
            }
            for i, n in enumerate(counts)
        ],
    )
    df = check(con, parse_budgets('[routes."/r"]\nqueries_p90 = 1000\ndb_ms_p37 = 1000'))
    got = dict(zip(df["budget"], df["actual"], strict=True))
    assert got["queries_p90"] == pytest.approx(np.percentile(counts, 90))
    assert got["db_ms_p37"] == pytest.approx(np.percentile(np.array(counts) * 0.5, 37))


def test_check_accepts_a_file_path(huts, tmp_path):
    path = tmp_path / "budgets.toml"
    path.write_text('[routes."/huts"]\ndb_ms_p95 = 1\n')
    df = check(huts, path)
    assert list(df["status"]) == ["over"] and df["actual"][0] == pytest.approx(4.0)
