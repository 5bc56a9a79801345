"""The whatif, compare and check commands: output keys, exit codes and one-line errors."""

from __future__ import annotations

import json

import pytest

from attrib import store
from attrib.cli import main
from tests.test_compare import MONDAY, NEXT_MONDAY, _week
from tests.test_whatif import fill_store


def run_main(args, capsys):
    try:
        main(args)
        code = 0
    except SystemExit as exc:
        code = exc.code
    out = capsys.readouterr()
    return code, out.out, out.err


@pytest.fixture
def two_weeks(tmp_path):
    path = tmp_path / "s.duckdb"
    con = store.connect(path)
    fill_store(con, _week(MONDAY, batched=False) + _week(NEXT_MONDAY, batched=True))
    con.close()
    return str(path)


def _one_line_error(err: str) -> None:
    assert err.startswith("Error: ") and err.count("\n") == 1 and "Traceback" not in err


WHATIF_KEYS = {
    "route",
    "requests_affected",
    "db_ms_per_request_before",
    "db_ms_per_request_after",
    "elapsed_p50_before",
    "elapsed_p50_after",
    "elapsed_p50_after_ci_low",
    "elapsed_p50_after_ci_high",
    "elapsed_p99_before",
    "elapsed_p99_after",
    "amdahl_speedup",
    "busy_connections_before",
    "busy_connections_after",
    "db_ms_saved_per_hour",
    "db_ms_saved_per_day",
}


def test_whatif_json_has_the_documented_keys(two_weeks, capsys):
    code, out, _ = run_main(
        [
            "whatif",
            "--store",
            two_weeks,
            "--batch",
            "bunk",
            "--resamples",
            "50",
            "--format",
            "json",
        ],
        capsys,
    )
    assert code == 0
    rows = json.loads(out)
    assert WHATIF_KEYS <= set(rows[0])
    assert [r["route"] for r in rows] == ["/huts/{id}/bunks", "(all routes)"]
    assert rows[0]["requests_affected"] == 30


def test_whatif_bad_factor_is_a_usage_error(two_weeks, capsys):
    code, _, err = run_main(["whatif", "--store", two_weeks, "--faster", "bunk=fast"], capsys)
    assert code == 2
    _one_line_error(err)


def test_whatif_unknown_template_is_a_usage_error(two_weeks, capsys):
    code, _, err = run_main(["whatif", "--store", two_weeks, "--remove", "nope"], capsys)
    assert code == 2 and "not in the store" in err
    _one_line_error(err)


def test_whatif_missing_store_is_a_store_error(tmp_path, capsys):
    code, _, err = run_main(
        ["whatif", "--store", str(tmp_path / "x.duckdb"), "--batch", "b"], capsys
    )
    assert code == 4
    _one_line_error(err)


COMPARE_KEYS = {
    "route",
    "requests_before",
    "requests_after",
    "queries_per_request_before",
    "queries_per_request_after",
    "queries_verdict",
    "elapsed_p50_before",
    "elapsed_p50_after",
    "elapsed_verdict",
    "p_value",
}


def test_compare_same_hours_reports_fewer_queries(two_weeks, capsys):
    args = ["compare", "--store", two_weeks, "--tz", "Europe/Zurich", "--hours", "09:00-10:00"]
    args += ["--before-date", "2026-11-23", "--after-date", "2026-11-30", "--format", "json"]
    code, out, err = run_main([*args, "--resamples", "50"], capsys)
    assert code == 0 and err == ""
    rows = {r["route"]: r for r in json.loads(out)}
    assert COMPARE_KEYS <= set(rows["/huts"])
    assert rows["/huts/{id}/bunks"]["queries_verdict"] == "fewer"
    assert rows["/huts"]["queries_verdict"] == "unchanged"


def test_compare_different_weekdays_warn_on_stderr(two_weeks, capsys):
    args = ["compare", "--store", two_weeks, "--tz", "Europe/Zurich", "--resamples", "20"]
    args += ["--before", "2026-11-23T09:00/2026-11-23T10:00"]
    args += ["--after", "2026-11-29T09:00/2026-12-01T10:00", "--by", "template"]
    code, out, err = run_main(args, capsys)
    assert code == 0
    assert "warning: the windows fall on different weekdays (Monday before, Sunday after)" in err
    assert "calls_per_request_before" in out


def test_compare_two_stores_and_one_store_together_is_a_usage_error(two_weeks, capsys):
    args = [
        "compare",
        "--store",
        two_weeks,
        "--before-store",
        two_weeks,
        "--after-store",
        two_weeks,
    ]
    code, _, err = run_main(args, capsys)
    assert code == 2 and "either --store" in err


def test_compare_two_stores(two_weeks, capsys):
    args = ["compare", "--before-store", two_weeks, "--after-store", two_weeks, "--resamples", "20"]
    code, out, _ = run_main([*args, "--format", "csv"], capsys)
    assert code == 0 and out.startswith("route,requests_before,requests_after")


def test_compare_hours_without_dates_is_a_usage_error(two_weeks, capsys):
    code, _, err = run_main(["compare", "--store", two_weeks, "--hours", "09:00-10:00"], capsys)
    assert code == 2 and "--before-date" in err
    _one_line_error(err)


def test_check_over_budget_exits_1_and_lists_the_rows(two_weeks, tmp_path, capsys):
    budgets = tmp_path / "b.toml"
    budgets.write_text('[routes."/huts/*"]\nqueries_p95 = 5\n\n[routes."/huts"]\nqueries_p95 = 5\n')
    code, out, err = run_main(["check", "--store", two_weeks, "--budgets", str(budgets)], capsys)
    assert code == 1
    assert "over" in out.splitlines()[2] and "/huts/{id}/bunks" in out
    assert err.startswith("Error: 1 budget(s) exceeded, e.g. /huts/{id}/bunks queries_p95 = 11 > 5")


def test_check_within_budget_exits_0(two_weeks, tmp_path, capsys):
    budgets = tmp_path / "b.toml"
    budgets.write_text('[routes."*"]\nqueries_p95 = 20\ndb_ms_p99 = 100\n')
    code, out, _ = run_main(
        ["check", "--store", two_weeks, "--budgets", str(budgets), "--format", "json"], capsys
    )
    assert code == 0
    assert {r["status"] for r in json.loads(out)} == {"ok"}


def test_check_malformed_budgets_exit_3_with_one_line(two_weeks, tmp_path, capsys):
    budgets = tmp_path / "b.toml"
    budgets.write_text('[routes."*"]\nqueries_p95 = "many"\n')
    code, _, err = run_main(["check", "--store", two_weeks, "--budgets", str(budgets)], capsys)
    assert code == 3 and "must be a number" in err
    _one_line_error(err)


def test_whatif_table_shows_a_compact_column_set(two_weeks, capsys):
    code, out, err = run_main(
        ["whatif", "--store", two_weeks, "--batch", "bunk", "--resamples", "20"], capsys
    )
    header = out.splitlines()[0].split()
    assert code == 0 and header[0] == "route" and "amdahl_speedup" in header
    assert "span_s" not in header and "(--format csv or json for every column)" in err


def test_compare_one_store_without_windows_is_a_usage_error(two_weeks, capsys):
    code, _, err = run_main(["compare", "--store", two_weeks], capsys)
    assert code == 2 and "needs both --before and --after" in err
    _one_line_error(err)
