"""Coverage figures, hand-computed on the ingest fixture (fixtures/logs/ingest/).

The 9 statements of 020_statements.slow.log, by start (ms after 14:00:00) and id:
 a 10 r1, b 20 r1, c 1010 r2, d 5000 none, e 5100 none, f 6000 r404 (no such request),
 g 4030 trace T2, h 4080 trace T2, i 9000 trace T1.
Requests (010_requests.jsonl, the repeated r1 rejected): r1 0+100 ms (trace T1), r2 1000+50,
r3 2000+200, outer 4000+100 (T2), inner 4020+30 (T2).
Links: a, b, i -> r1; c -> r2; g -> inner (innermost); h -> outer. f and d, e unlinked.
Offsets (statement start - request start): 10, 20, 9000, 10, 10, 80 ms -> median (10 + 20) / 2 = 15 ms;
i starts after r1 ended: 1 of 6 outside the window.
"""

from __future__ import annotations

import pytest

from attrib import coverage, ingest, store

from .test_ingest import REQUESTS, STATEMENTS


@pytest.fixture(scope="module")
def cov():
    con = store.connect(":memory:")  # ingested once for the module's tests, which only read
    ingest.ingest(con, [REQUESTS], [STATEMENTS])
    yield coverage.coverage(con)
    con.close()


def metric(cov, name):
    values = cov.summary.set_index("metric")["value"]
    return values[name]


def test_coverage_counts_match_the_hand_computed_figures(cov):
    assert metric(cov, "statements") == 9
    assert metric(cov, "statements linked to a request") == 6
    assert metric(cov, "share of statements linked") == pytest.approx(6 / 9)
    assert metric(cov, "statements with no request id") == 2
    assert metric(cov, "statements whose id matches no request") == 1
    assert metric(cov, "requests") == 5
    assert metric(cov, "requests with no statements") == 1
    assert metric(cov, "request ids in statements but not in the request log") == 1


def test_coverage_clock_offset_is_the_median_of_linked_statements(cov):
    assert metric(cov, "median statement start minus request start (ms)") == pytest.approx(15.0)
    assert metric(cov, "share of linked statements starting before their request") == 0
    assert metric(cov, "share of linked statements starting after request end") == pytest.approx(
        1 / 6
    )


def test_coverage_warns_when_many_statements_fall_outside_their_request(cov):
    assert len(cov.warnings) == 1
    assert "16.7% of linked statements" in cov.warnings[0]


def test_coverage_lists_missing_request_ids_and_no_id_templates(cov):
    assert list(cov.missing_ids["request_id"]) == ["r404"]
    assert list(cov.no_id["statements"]) == [2]
    assert cov.no_id["template"][0].upper().startswith("DELETE")
    assert cov.no_id["share_of_no_id"][0] == 1.0


def test_coverage_per_template_rows_add_up(cov):
    t = cov.templates
    assert t["statements"].sum() == 9
    assert t["linked"].sum() == 6
    assert t["no_id"].sum() == 2
    assert ((t["linked_share"] >= 0) & (t["linked_share"] <= 1)).all()


def test_coverage_of_an_empty_store_has_no_shares_and_no_warnings(con):
    cov = coverage.coverage(con)
    assert metric(cov, "statements") == 0
    assert metric(cov, "share of statements linked") is None
    assert cov.warnings == []
    assert cov.templates.empty


@pytest.mark.parametrize(
    ("median_ms", "outside", "expected"),
    [
        (15.0, 0.0, 0),
        (1000.0, 0.05, 0),  # at the thresholds: no warning
        (1000.1, 0.0, 1),
        (-2500.0, 0.0, 1),
        (0.0, 0.051, 1),
        (3000.0, 0.5, 2),
        (None, None, 0),
    ],
)
def test_clock_warnings_thresholds(median_ms, outside, expected):
    assert len(coverage.clock_warnings(median_ms, outside)) == expected


def test_clock_warnings_say_which_direction():
    assert "before" in coverage.clock_warnings(-2500.0, 0.0)[0]
    assert "after" in coverage.clock_warnings(2500.0, 0.0)[0]
