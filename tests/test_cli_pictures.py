"""`attrib chart` and `attrib report` on an ingested demo store (small size)."""

from __future__ import annotations

import re
import struct

import pytest
from click.testing import CliRunner

import attrib
from attrib import demo
from attrib.cli import cli, main


@pytest.fixture(scope="module")
def demo_store(tmp_path_factory):
    out = tmp_path_factory.mktemp("pictures")
    demo.run(out, requests=600, seed=3)
    return out / "demo.duckdb"


def _invoke(*args):
    result = CliRunner().invoke(cli, list(args))
    return result


@pytest.mark.parametrize(
    ("kind", "extra"),
    [
        ("fraction", []),
        ("histogram", ["--by-route"]),
        ("timeline", ["--interval", "10 minutes", "--marker", "2026-11-30T07:00=deploy"]),
        ("heatmap", []),
        ("nplus1", []),
        (
            "compare",
            [
                "--before",
                "2026-11-30T06:00/2026-11-30T07:30",
                "--after",
                "2026-11-30T07:30/2026-11-30T09:00",
            ],
        ),
    ],
)
def test_chart_command_writes_png_of_requested_size(demo_store, tmp_path, kind, extra):
    out = tmp_path / f"{kind}.png"
    result = _invoke(
        "chart",
        kind,
        "--store",
        str(demo_store),
        "--out",
        str(out),
        "--width",
        "640",
        "--height",
        "400",
        *extra,
    )
    assert result.exit_code == 0, result.output
    data = out.read_bytes()
    assert data[:8] == b"\x89PNG\r\n\x1a\n"
    assert struct.unpack(">II", data[16:24]) == (640, 400)


def test_chart_whatif_draws_now_and_projected(demo_store, tmp_path):
    with attrib.open(demo_store, read_only=True) as s:
        child = s.nplus1().iloc[0]["child_template_id"]
    out = tmp_path / "w.svg"
    result = _invoke(
        "chart",
        "whatif",
        "--store",
        str(demo_store),
        "--out",
        str(out),
        "--scenario",
        f"batch={child}",
    )
    assert result.exit_code == 0, result.output
    text = out.read_text()
    assert "projected" in text and "now" in text


def test_chart_compare_without_windows_is_a_one_line_error(demo_store, tmp_path, capsys):
    with pytest.raises(SystemExit) as exit_info:
        main(["chart", "compare", "--store", str(demo_store), "--out", str(tmp_path / "c.png")])
    assert exit_info.value.code == 1
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and err.startswith(
        "Error: the compare chart needs --before and --after"
    )


def test_chart_svg_has_no_statement_literals(demo_store, tmp_path):
    out = tmp_path / "heat.svg"
    assert _invoke("chart", "heatmap", "--store", str(demo_store), "--out", str(out)).exit_code == 0
    text = out.read_text()
    # demo guests have e-mail addresses like guest123@example.net in their statements
    assert not re.search(r"guest\d+@example", text)


def test_report_command_writes_self_contained_html_without_literals(demo_store, tmp_path):
    out = tmp_path / "report.html"
    result = _invoke("report", "--store", str(demo_store), "--out", str(out), "--top", "5")
    assert result.exit_code == 0, result.output
    page = out.read_text()
    assert page.count("data:image/png;base64,") >= 4
    assert not re.search(r"https?://", page)
    assert not re.search(r"guest\d+@example", page)
    assert "First things to look at" in page and "n_plus_one" in page


def test_report_with_whatif_json_adds_section(demo_store, tmp_path):
    with attrib.open(demo_store, read_only=True) as s:
        child = s.nplus1().iloc[0]["child_template_id"]
    whatif = _invoke(
        "whatif",
        "--store",
        str(demo_store),
        "--batch",
        child,
        "--format",
        "json",
        "--resamples",
        "50",
    )
    assert whatif.exit_code == 0, whatif.output
    saved = tmp_path / "whatif.json"
    saved.write_text(whatif.stdout)
    out = tmp_path / "r.html"
    result = _invoke(
        "report", "--store", str(demo_store), "--out", str(out), "--whatif-json", str(saved)
    )
    assert result.exit_code == 0, result.output
    assert "What-if projection" in out.read_text()
