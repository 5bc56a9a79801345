"""The routes, templates, route and nplus1 commands: output formats, keys, filters and errors."""

from __future__ import annotations

import csv
import io
import json

import pytest
from click.testing import CliRunner

from attrib import store as _store
from attrib.cli import cli, main
from tests.test_attribute import fill_huts


@pytest.fixture
def huts_path(tmp_path):
    """The store of tests/test_attribute.py, as a file (commands open it read-only)."""
    path = tmp_path / "huts.duckdb"
    con = _store.connect(path)
    fill_huts(con)
    con.close()
    return str(path)


@pytest.fixture
def empty_path(tmp_path):
    path = tmp_path / "empty.duckdb"
    _store.connect(path).close()
    return str(path)


def _run(*args: str) -> str:
    result = CliRunner().invoke(cli, list(args), catch_exceptions=False)
    assert result.exit_code == 0, result.output
    return result.output


def test_routes_json_has_the_documented_keys(huts_path):
    rows = json.loads(_run("routes", "--store", huts_path, "--format", "json"))
    assert [r["route"] for r in rows] == ["/huts/{id}", "/search"]
    keys = {
        "route", "requests", "queries_per_request_mean", "queries_per_request_p50",
        "queries_per_request_p95", "queries_per_request_max", "db_ms_total", "db_share",
        "db_fraction_p50", "elapsed_ms_p50", "elapsed_ms_p95", "elapsed_ms_p99",
        "db_ms_per_request_p50", "db_ms_per_request_p95", "db_fraction_aggregate",
        "distinct_templates_per_request_mean", "repeat_fraction",
    }  # fmt: skip
    assert set(rows[0]) == keys
    assert rows[0]["requests"] == 2 and rows[0]["db_share"] == pytest.approx(23 / 38)


def test_routes_csv_and_table_show_the_same_routes(huts_path):
    rows = list(
        csv.DictReader(io.StringIO(_run("routes", "--store", huts_path, "--format", "csv")))
    )
    assert [r["route"] for r in rows] == ["/huts/{id}", "/search"]
    assert float(rows[1]["db_ms_total"]) == 7.0
    table = _run("routes", "--store", huts_path)
    lines = table.splitlines()
    assert lines[0].split()[:3] == ["route", "requests", "queries_per_request_mean"]
    assert lines[2].startswith("/huts/{id}") and lines[3].startswith("/search")


def test_routes_sort_top_route_and_time_filters(huts_path):
    def routes(*args: str) -> list[dict]:
        return json.loads(_run("routes", "--store", huts_path, "--format", "json", *args))

    assert [r["route"] for r in routes("--sort", "repeat_fraction", "--top", "1")] == ["/search"]
    assert [r["route"] for r in routes("--sort", "repeat_fraction", "--reverse")] == [
        "/huts/{id}",
        "/search",
    ]
    assert [r["route"] for r in routes("--route", "/hut*")] == ["/huts/{id}"]
    since = routes("--since", "2026-05-04T10:00:01")
    assert since[0]["requests"] == 1 and since[0]["db_share"] == pytest.approx(12 / 27)
    # an offset is converted to UTC: 12:00:01+02:00 is 10:00:01 UTC, so R1 is left out
    until = routes("--until", "2026-05-04T12:00:01+02:00")
    assert [(r["route"], r["requests"]) for r in until] == [("/huts/{id}", 1)]


def test_templates_json_routes_are_objects_and_csv_is_compact(huts_path):
    rows = json.loads(_run("templates", "--store", huts_path, "--format", "json"))
    assert [r["template_id"] for r in rows] == ["h", "b", "s", "c"]
    h = rows[0]
    assert h["routes"] == [
        {"route": "/huts/{id}", "share": pytest.approx(10 / 18)},
        {"route": "(no request)", "share": pytest.approx(8 / 18)},
    ]
    assert (h["first_seen"], h["last_seen"]) == ("2026-05-04T10:00:00", "2026-05-04T10:00:05")
    assert {"template_id", "template", "calls", "calls_per_request", "total_ms", "share"} <= set(h)
    assert {"mean_ms", "p50_ms", "p95_ms", "p99_ms", "rows_per_call", "last_seen"} <= set(h)
    text = list(
        csv.DictReader(io.StringIO(_run("templates", "--store", huts_path, "--format", "csv")))
    )
    assert text[0]["routes"] == "/huts/{id} 56%, (no request) 44%"
    assert "/search 67%, /huts/{id} 33%" in _run("templates", "--store", huts_path)


def test_nplus1_json_keys_and_min_repeats(huts_path):
    rows = json.loads(_run("nplus1", "--store", huts_path, "--format", "json"))
    assert [(r["kind"], r["child_template_id"]) for r in rows] == [
        ("n_plus_one", "b"),
        ("redundant", "c"),
    ]
    keys = {
        "route", "kind", "parent_template_id", "child_template_id", "requests", "repeats_mean",
        "repeats_max", "wasted_ms_total", "saving_ms_estimate", "parent_rows_match_share",
        "child_template", "parent_template", "fixed_cost_ms", "gap_ms_median",
    }  # fmt: skip
    assert set(rows[0]) == keys
    assert rows[1]["fixed_cost_ms"] is None  # NaN becomes null
    more = json.loads(
        _run("nplus1", "--store", huts_path, "--format", "json", "--min-repeats", "2")
    )
    assert more[0]["requests"] == 2
    assert (
        _run("nplus1", "--store", huts_path, "--route", "/search", "--format", "csv").count("\n")
        == 2
    )  # header + the redundant finding


def test_route_table_shows_both_listings(huts_path):
    out = _run("route", "/huts/{id}", "--store", huts_path)
    assert out.startswith("Route /huts/{id}: 2 requests\n")
    assert "\nTemplates\n" in out and "\nN+1 loops and redundant repeats\n" in out


def test_route_json_and_csv_with_only(huts_path):
    doc = json.loads(_run("route", "/huts/{id}", "--store", huts_path, "--format", "json"))
    assert doc["route"] == "/huts/{id}" and doc["requests"] == 2
    assert [t["template_id"] for t in doc["templates"]] == ["b", "h", "c"]
    assert [f["child_template_id"] for f in doc["nplus1"]] == ["b"]
    out = _run("route", "/huts/{id}", "--store", huts_path, "--format", "csv", "--only", "nplus1")
    rows = list(csv.DictReader(io.StringIO(out)))
    assert len(rows) == 1 and rows[0]["parent_template_id"] == "h"


def test_route_csv_without_only_is_a_usage_error(huts_path):
    result = CliRunner().invoke(
        cli, ["route", "/huts/{id}", "--store", huts_path, "--format", "csv"]
    )
    assert result.exit_code == 2 and "--only" in result.output


def test_empty_store_gives_empty_listings(empty_path):
    for command in ("routes", "templates", "nplus1"):
        assert json.loads(_run(command, "--store", empty_path, "--format", "json")) == []
        assert _run(command, "--store", empty_path) == "(no rows)\n"
        header = _run(command, "--store", empty_path, "--format", "csv").strip()
        assert header.startswith("route" if command != "templates" else "template_id")


def _main(capsys, *args: str) -> tuple[int, str]:
    with pytest.raises(SystemExit) as exc:
        main(list(args))
    return exc.value.code, capsys.readouterr().err


def test_unknown_sort_column_is_one_line_error_exit_2(capsys, huts_path):
    code, err = _main(capsys, "routes", "--store", huts_path, "--sort", "nope")
    assert code == 2 and err.startswith("Error: cannot sort by 'nope'") and err.count("\n") == 1


def test_unknown_route_is_one_line_error(capsys, huts_path):
    code, err = _main(capsys, "route", "/nope", "--store", huts_path)
    assert code == 2 and "no requests for route '/nope'" in err


def test_missing_store_is_a_store_error(capsys, tmp_path):
    code, err = _main(capsys, "routes", "--store", str(tmp_path / "none.duckdb"))
    assert code == 4 and "no such store" in err


def test_bad_since_is_a_usage_error(capsys, huts_path):
    code, err = _main(capsys, "templates", "--store", huts_path, "--since", "yesterday-ish")
    assert code == 2 and "ISO 8601" in err
