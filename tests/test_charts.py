"""Charts render for a small store, refuse an empty one clearly, and write valid PNG/SVG files."""

from __future__ import annotations

import struct
import xml.etree.ElementTree as ET
from datetime import datetime

import numpy as np
import pytest

from attrib import charts


def _fill(con, requests: int = 300) -> None:
    """Requests on three routes; /loop runs template c once per row of its parent p."""
    con.execute("INSERT INTO templates VALUES ('p', 'SELECT ?', 'SELECT', [], true)")
    con.execute("INSERT INTO templates VALUES ('c', 'SELECT ? FROM t', 'SELECT', ['t'], true)")
    con.execute(
        f"""
        INSERT INTO requests
        SELECT 1, i, 0, 'r' || i, NULL,
               TIMESTAMP '2026-11-30 09:00:00' + i * INTERVAL 7 SECOND,
               5 + (i % 17) * 3.5, 'GET',
               CASE i % 3 WHEN 0 THEN '/loop' WHEN 1 THEN '/plain$1' ELSE '/idle' END,
               NULL, 200
        FROM range({requests}) t(i)
        """
    )
    # parent (rows = i % 5 + 1) then that many children, on /loop requests only
    con.execute(
        """
        INSERT INTO statements
        SELECT 2, r.line * 10 + k, 0, r.started_at + k * INTERVAL 1 MILLISECOND,
               CASE WHEN k = 0 THEN 1.5 ELSE 0.4 END,
               CASE WHEN k = 0 THEN r.line % 5 + 1 ELSE 1 END,
               CASE WHEN k = 0 THEN 'p' ELSE 'c' END, k, r.request_id,
               NULL, NULL, NULL, NULL, NULL, NULL
        FROM requests r, range(0, 7) t(k)
        WHERE r.route = '/loop' AND k <= r.line % 5 + 1
        """
    )
    con.execute(
        "INSERT INTO links SELECT s.source_id, s.line, s.seq, 1, r.line, 0 FROM statements s "
        "JOIN requests r ON r.request_id = s.request_id"
    )


def _png_size(path) -> tuple[int, int]:
    data = path.read_bytes()
    assert data[:8] == b"\x89PNG\r\n\x1a\n"  # PNG signature (PNG specification, 5.2)
    return struct.unpack(">II", data[16:24])  # IHDR width and height


@pytest.mark.parametrize(
    "draw",
    [
        lambda con: charts.db_fraction(con),
        lambda con: charts.elapsed_histogram(con, by_route=True),
        lambda con: charts.elapsed_histogram(con),
        lambda con: charts.timeline(
            con, interval="5 minutes", markers=[(datetime(2026, 11, 30, 9, 10), "deploy")]
        ),
        lambda con: charts.template_heatmap(con),
        lambda con: charts.nplus1_evidence(
            con, route="/loop", parent_template_id="p", child_template_id="c"
        ),
    ],
    ids=["fraction", "histogram-routes", "histogram", "timeline", "heatmap", "nplus1"],
)
def test_chart_renders_png_and_svg_of_requested_size(con, tmp_path, draw):
    _fill(con)
    fig = draw(con)
    png = charts.save(fig, tmp_path / "c.png")
    assert _png_size(png) == (int(fig.get_figwidth() * 100), int(fig.get_figheight() * 100))
    svg = charts.save(fig, tmp_path / "c.svg")
    root = ET.parse(svg).getroot()
    assert root.tag.endswith("svg")
    assert "<text" in svg.read_text()  # text stays text, so it is searchable and sharp


def test_db_fraction_uses_hexbin_above_threshold_and_draws_route_medians(con, monkeypatch):
    _fill(con)
    monkeypatch.setattr(charts, "HEXBIN_ABOVE", 10)
    fig = charts.db_fraction(con, top=3)
    ax = fig.axes[0]
    assert ax.collections  # the hexbin
    labels = [t.get_text() for t in ax.get_legend().get_texts()]
    # ties (no database time) are ordered by route name; '$' is escaped from mathtext
    assert labels == ["/loop (median)", "/idle (median)", r"/plain\$1 (median)"]


def test_chart_on_empty_store_raises_clear_chart_error(con):
    with pytest.raises(charts.ChartError, match="nothing to plot"):
        charts.db_fraction(con)
    with pytest.raises(charts.ChartError, match="nothing to plot"):
        charts.timeline(con)


def test_chart_on_one_request_store_renders(con, tmp_path):
    _fill(con, requests=1)
    for fig in (charts.db_fraction(con), charts.elapsed_histogram(con), charts.timeline(con)):
        charts.save(fig, tmp_path / "one.png")


def test_per_request_counts_queries_and_db_time_in_duckdb(con):
    _fill(con, requests=30)
    df = charts.per_request(con, route="/loop").set_index("started_at").sort_index()
    first = df.iloc[0]  # request line 0: parent rows 1 -> 1 child
    assert first["queries"] == 2 and first["db_ms"] == pytest.approx(1.9)
    assert first["db_fraction"] == pytest.approx(1.9 / 5)


def test_timeline_rejects_sql_in_interval(con):
    _fill(con)
    with pytest.raises(charts.ChartError, match="bad interval"):
        charts.timeline(con, interval="1 minute'; DROP TABLE requests; --")


def test_ecdf_pair_draws_two_steps_ending_at_one():
    fig = charts.ecdf_pair(np.array([1, 2, 3]), np.array([1, 1]), title="t", xlabel="queries")
    lines = fig.axes[0].get_lines()
    assert len(lines) == 2 and all(line.get_ydata()[-1] == 1.0 for line in lines)


def test_save_refuses_unknown_suffix(tmp_path):
    fig = charts.ecdf_pair(np.array([1.0]), np.array([2.0]), title="t", xlabel="x")
    with pytest.raises(charts.ChartError, match=r"\.png or \.svg"):
        charts.save(fig, tmp_path / "c.jpg")


@pytest.mark.parametrize(
    ("kind", "options"),
    [
        ("fraction", {}),
        ("histogram", {"by_route": True}),
        ("timeline", {}),
        ("heatmap", {}),
        ("nplus1", {}),
        (
            "compare",
            {
                "before": "2026-11-30T09:00/2026-11-30T10:00",
                "after": "2026-11-30T10:00/2026-11-30T11:00",
            },
        ),
        ("whatif", {"scenario": ["remove=0123456789abcdef"]}),
    ],
)
def test_every_chart_kind_on_an_empty_store_says_what_is_missing(kind, options):
    import attrib
    from attrib.errors import AttribError

    with attrib.open(":memory:") as s, pytest.raises(AttribError) as error:
        s.chart(kind, **options)
    message = str(error.value)
    assert "\n" not in message and (
        "nothing to plot" in message
        or "no requests" in message
        or "not in the store" in message
        or "unknown template" in message
    )
