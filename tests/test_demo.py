"""The Ridgeline demo: deterministic logs, readable by our readers, planted findings recovered.

The planted patterns are our own invention (attrib.demo); the checks below compare attrib's findings
with that ground truth. Run with ``-s`` to see the recall/precision line.
"""

from __future__ import annotations

import json
import re
from collections import defaultdict
from pathlib import Path

import pandas as pd
import pytest
from click.testing import CliRunner

import attrib
from attrib import demo
from attrib.cli import cli
from attrib.readers import get as get_reader
from attrib.records import ReadOptions, Reject, Request, Skip, Statement
from fingerprints import fingerprint

SMALL = 1_200  # requests: big enough for every planted pattern to run, small enough to be quick
SEED = 11


@pytest.fixture(scope="module")
def demo_run(tmp_path_factory: pytest.TempPathFactory):
    """`attrib demo --format json` on a small size, and the truth of the same logs."""
    out = tmp_path_factory.mktemp("demo")
    result = CliRunner().invoke(
        cli,
        [
            "demo",
            "--out",
            str(out),
            "--seed",
            str(SEED),
            "--requests",
            str(SMALL),
            "--format",
            "json",
        ],
    )
    truth = demo.generate(tmp_path_factory.mktemp("truth"), seed=SEED, requests=SMALL)
    return out, result, truth


def _sha(path: Path) -> bytes:
    return path.read_bytes()


def test_generate_same_seed_writes_identical_bytes(tmp_path: Path) -> None:
    a = demo.generate(tmp_path / "a", seed=3, requests=600)
    b = demo.generate(tmp_path / "b", seed=3, requests=600)
    assert a.queries_path.read_bytes() == b.queries_path.read_bytes()
    assert a.requests_path.read_bytes() == b.requests_path.read_bytes()
    assert a.planted == b.planted


def test_generate_other_seed_writes_other_bytes(tmp_path: Path) -> None:
    a = demo.generate(tmp_path / "a", seed=3, requests=600)
    b = demo.generate(tmp_path / "b", seed=4, requests=600)
    assert a.queries_path.read_bytes() != b.queries_path.read_bytes()
    assert a.requests_path.read_bytes() != b.requests_path.read_bytes()


def test_generate_counts_match_the_files(tmp_path: Path) -> None:
    t = demo.generate(tmp_path, requests=800)
    assert t.requests_path.read_text().count("\n") == t.request_lines == t.requests == 800
    text = t.queries_path.read_text()
    assert text.count("\n") == t.query_lines
    assert text.count("  statement: ") == t.statements
    assert text.count(" ERROR:  ") == t.failed_statements
    assert len(re.findall(r"LOG:  (connection|disconnection|checkpoint)", text)) == t.other_lines


def test_generate_log_lines_follow_postgresql_stderr_format(tmp_path: Path) -> None:
    # Shapes as written by a real PostgreSQL 15 server with log_line_prefix '%m [%p] %q%u@%d '
    # (captured on this machine; see docs/demo.md): prefixed lines, TAB continuation lines only.
    t = demo.generate(tmp_path, requests=400)
    prefixed = re.compile(
        r"\d{4}-\d\d-\d\d \d\d:\d\d:\d\d\.\d{3} UTC \[\d+\] "
        r"(?:(?:ridge@ridgeline|\[unknown\]@\[unknown\]) )?(?:LOG|ERROR|DETAIL|STATEMENT):  \S"
    )
    times = []
    for line in t.queries_path.read_text().splitlines():
        if line.startswith("\t"):
            continue
        assert prefixed.match(line), line
        times.append(line[:23])
    assert times == sorted(times)  # written in log-time order, like a server does


def test_generate_requests_are_json_lines_with_utc_times(tmp_path: Path) -> None:
    t = demo.generate(tmp_path, requests=300)
    rows = [json.loads(line) for line in t.requests_path.read_text().splitlines()]
    assert list(rows[0]) == [
        "timestamp", "request_id", "method", "route", "path", "status", "elapsed_ms",
    ]  # fmt: skip
    assert all(r["timestamp"].endswith("Z") for r in rows)
    assert len({r["request_id"] for r in rows}) == 300
    assert {r["status"] for r in rows} >= {200}


def test_generate_only_planted_templates_repeat_within_a_request(tmp_path: Path) -> None:
    # The truth must be the whole truth: outside the planted patterns no statement shape runs twice
    # in one request; a planted loop sends other values on every call, a planted repeat the same
    # ones. Shapes here are a crude literal mask, independent of attrib's fingerprints.
    t = demo.generate(tmp_path, seed=5, requests=1_000)
    mask = re.compile(r"'(?:[^']|'')*'|\b\d+(?:\.\d+)?\b")

    def shape(sql: str) -> str:
        return re.sub(r"\?(, \?)+", "?", mask.sub("?", sql))

    tagged = re.compile(r"statement: (.*) /\*request_id='([^']+)',route='([^']+)'\*/$")
    calls: dict[str, dict[str, list[str]]] = defaultdict(lambda: defaultdict(list))
    routes = {}
    for line in t.queries_path.read_text().splitlines():
        m = tagged.search(line)
        if m:
            sql, rid, _route = m.groups()
            calls[rid][shape(sql)].append(sql)
    for line in t.requests_path.read_text().splitlines():
        row = json.loads(line)
        routes[row["request_id"]] = row["route"]
    kinds = {(p.route, shape(p.child_sql)): p.kind for p in t.planted}
    repeated = set()
    for rid, by_shape in calls.items():
        for sh, texts in by_shape.items():
            if len(texts) >= 2:
                key = (routes[rid], sh)
                repeated.add(key)
                distinct = len(set(texts))
                assert distinct == (len(texts) if kinds.get(key) == "n_plus_one" else 1), key
    assert repeated == set(kinds)


def test_generate_files_read_without_rejects(demo_run) -> None:
    _out, _result, t = demo_run
    options = ReadOptions()
    for path, reader, kinds in (
        (t.queries_path, "pg-stderr", (Statement, Skip)),
        (t.requests_path, "requests-jsonl", (Request,)),
    ):
        lines = path.read_text(encoding="utf-8").splitlines()
        records = list(get_reader(reader).read(enumerate(lines, 1), options))
        assert sum(r.lines for r in records) == len(lines)  # every line accounted for
        assert not [r for r in records if isinstance(r, Reject)]
        assert all(isinstance(r, kinds) for r in records)
        if reader == "pg-stderr":
            statements = [r for r in records if isinstance(r, Statement)]
            assert len(statements) == t.statements + t.failed_statements
            assert sum(1 for r in statements if r.error) == t.failed_statements
            skipped = sum(r.lines for r in records if isinstance(r, Skip))
            assert skipped == t.other_lines


def test_demo_cli_writes_the_same_logs_as_generate(demo_run) -> None:
    out, result, t = demo_run
    assert result.exit_code == 0, result.output
    assert (out / demo.QUERIES_FILE).read_bytes() == t.queries_path.read_bytes()
    assert (out / demo.REQUESTS_FILE).read_bytes() == t.requests_path.read_bytes()


def test_demo_store_accounts_for_every_line(demo_run) -> None:
    out, _result, t = demo_run
    with attrib.open(out / demo.STORE_FILE, read_only=True) as s:
        rows = dict(
            s.con.execute(
                "SELECT format, [lines_read, lines_rejected, requests, statements, lines_skipped] "
                "FROM sources"
            ).fetchall()
        )
    assert rows["requests-jsonl"] == [t.request_lines, 0, t.requests, 0, 0]
    assert rows["pg-stderr"] == [
        t.query_lines, 0, 0, t.statements + t.failed_statements, t.other_lines,
    ]  # fmt: skip


def test_demo_statements_fall_inside_their_requests(demo_run) -> None:
    # Request lines carry the end time (reader: start = timestamp - elapsed); statement lines carry
    # their end time too. Both are cut to milliseconds, hence the 1 ms tolerance.
    out, _result, t = demo_run
    with attrib.open(out / demo.STORE_FILE, read_only=True) as s:
        linked, outside = s.con.execute(
            """
            SELECT count(*),
                   count(*) FILTER (WHERE s.started_at < r.started_at - INTERVAL 1 MILLISECOND
                       OR s.started_at + to_microseconds(CAST(s.duration_ms * 1000 AS BIGINT))
                          > r.started_at + to_microseconds(CAST(r.elapsed_ms * 1000 AS BIGINT))
                            + INTERVAL 1 MILLISECOND)
            FROM statements s JOIN requests r USING (request_id)
            """
        ).fetchone()
    assert linked > t.statements * 0.9
    assert outside == 0


def test_nplus1_recovers_every_planted_pattern(demo_run) -> None:
    out, _result, t = demo_run
    min_repeats = 3  # attrib's default
    with attrib.open(out / demo.STORE_FILE, read_only=True) as s:
        found = s.nplus1(min_repeats=min_repeats)
    expected = {
        (p.route, p.kind, fingerprint(p.child_sql, "postgres").id): p
        for p in t.planted
        if p.requests(min_repeats)
    }
    got = {(r.route, r.kind, r.child_template_id): r for r in found.itertuples(index=False)}
    hits = expected.keys() & got.keys()
    recall, precision = len(hits) / len(expected), len(hits) / max(len(got), 1)
    print(f"\ndemo N+1 recovery: recall {recall:.2f} ({len(hits)}/{len(expected)}), "
          f"precision {precision:.2f} ({len(hits)}/{len(got)})")  # fmt: skip
    assert len(expected) == 12
    assert recall == 1.0
    # Every other template runs at most once per request (previous test), so any extra finding
    # would be a false one: precision must be exact too.
    assert precision == 1.0
    for key in hits:  # and the counts are the planted ones
        assert got[key].requests == expected[key].requests(min_repeats)
        assert got[key].repeats_mean == pytest.approx(expected[key].repeats_mean(min_repeats))
        assert got[key].repeats_max == max(expected[key].lengths)


def _distinctive(literals: tuple[str, ...]) -> list[str]:
    # Short search words ("col", "lake") could occur in ordinary output text; e-mails, names,
    # tokens, phones, notes and longer words cannot.
    return [lit for lit in literals if len(lit) >= 6]


def test_demo_cli_prints_summary_as_json(demo_run) -> None:
    _out, result, _t = demo_run
    doc = json.loads(result.stdout)
    assert set(doc) == {"routes", "templates", "nplus1", "advice", "next_commands"}
    assert 1 <= len(doc["routes"]) <= 5 and 1 <= len(doc["nplus1"]) <= 5
    assert doc["advice"] and any("N+1" in a for a in doc["advice"])
    assert any(c.startswith("attrib nplus1 --store ") for c in doc["next_commands"])
    assert "Ingesting" in result.stderr


def test_demo_cli_output_shows_no_literal_values(demo_run) -> None:
    _out, result, t = demo_run
    assert len(t.literals) > 100
    leaked = [lit for lit in _distinctive(t.literals) if lit in result.stdout]
    assert leaked == []
    assert "@example." not in result.stdout


def test_demo_cli_table_output_has_titles_and_advice(tmp_path: Path) -> None:
    out = tmp_path / "out"
    result = CliRunner().invoke(cli, ["demo", "--out", str(out), "--requests", "150"])
    assert result.exit_code == 0, result.output
    for title in ("Top routes", "Top query templates", "Top N+1", "What to look at first"):
        assert title in result.stdout
    assert f"attrib routes --store {out / demo.STORE_FILE}" in result.stdout
    truth = demo.generate(tmp_path / "again", requests=150)  # the default seed: the same logs
    assert [lit for lit in _distinctive(truth.literals) if lit in result.stdout] == []


def test_demo_cli_csv_output_has_one_block_per_listing(tmp_path: Path) -> None:
    result = CliRunner().invoke(
        cli, ["demo", "--out", str(tmp_path), "--requests", "100", "--format", "csv"]
    )
    assert result.exit_code == 0, result.output
    blocks = result.stdout.split("\n\n")
    assert [b.splitlines()[0] for b in blocks if b.strip()] == [
        "# routes",
        "# templates",
        "# nplus1",
    ]
    assert blocks[0].splitlines()[1].startswith("route,requests,")


def test_demo_cli_out_that_is_a_file_fails_with_one_line_error(tmp_path: Path, capsys) -> None:
    from attrib.cli import main

    target = tmp_path / "taken"
    target.write_text("not a folder")
    with pytest.raises(SystemExit) as exit_info:
        main(["demo", "--out", str(target), "--requests", "10"])
    err = capsys.readouterr().err
    assert exit_info.value.code != 0
    assert "Error:" in err and "Traceback" not in err


def test_advice_names_repeat_busiest_route_slow_route_and_top_template() -> None:
    routes = pd.DataFrame(
        {
            "route": ["/a", "/slow", "/rare"],
            "requests": [100, 40, 5],
            "db_ms_total": [500.0, 5.0, 0.1],
            "db_share": [0.98, 0.01, 0.01],
            "db_fraction_p50": [0.6, 0.004, 0.01],
            "elapsed_ms_p50": [10.0, 500.0, 800.0],
            "elapsed_ms_p95": [20.0, 900.0, 5000.0],
        }
    )
    nplus1 = pd.DataFrame(
        {
            "route": ["/a", "/a"],
            "kind": ["redundant", "n_plus_one"],
            "child_template_id": ["0123456789abcdef", "fedcba9876543210"],
            "parent_template_id": [None, "0123456789abcdef"],
            "requests": [100, 100],
            "repeats_mean": [5.0, 8.0],
            "saving_ms_estimate": [200.0, 150.0],
        }
    )
    templates = pd.DataFrame(
        {
            "template_id": ["abcdef0123456789"],
            "template": ["SELECT ?"],
            "calls": [3],
            "total_ms": [100.0],
            "share": [0.4],
            "p95_ms": [50.0],
        }
    )
    lines = demo.advice(routes, templates, nplus1)
    assert len(lines) == 4  # one finding per route; the second finding of /a is left to the table
    assert lines[0] == (
        "/a runs template 01234567… 5.0 times per request with the same values (a redundant "
        "repeat); reusing the first result would save about 2.0 ms per request (median response "
        "time 10.0 ms)."
    )
    assert lines[1].startswith("/a has the largest share of database time (98% over 100 requests)")
    # /rare is slower but has too few requests to judge
    assert lines[2].startswith(
        "/slow is slow (p95 900 ms) but spends only 0.4% of a typical request"
    )
    assert lines[3] == (
        "The most expensive template, abcdef01…, takes 40% of all database time over 3 calls "
        "(p95 50.0 ms)."
    )


def test_planted_pattern_counts_by_minimum_length() -> None:
    p = demo.PlantedPattern("GET", "/x", "n_plus_one", "SELECT 1", None, {2: 4, 3: 1, 5: 1})
    assert p.requests() == 6 and p.requests(3) == 2
    assert p.repeats_mean(3) == pytest.approx(4.0)
    assert p.repeats_mean(6) == 0.0
