"""The HTML report: self-contained, escaped, free of literals, and rendered by a real browser."""

from __future__ import annotations

import os
import re
import shutil
import subprocess
from html.parser import HTMLParser

import pandas as pd
import pytest

from attrib import charts
from attrib.report import ReportData, render_html

HOSTILE_ROUTE = "/huts/<script>alert(1)</script>"
HOSTILE_TEMPLATE = 'SELECT "<img src=x onerror=alert(2)>" FROM t WHERE a = ?'


class _Collector(HTMLParser):
    """Collects tags, attributes and script elements; raises nothing on odd markup by design."""

    def __init__(self) -> None:
        super().__init__()
        self.tags: list[tuple[str, dict[str, str | None]]] = []
        self.open: list[str] = []

    def handle_starttag(self, tag, attrs):
        self.tags.append((tag, dict(attrs)))
        if tag not in {"meta", "img", "br", "link"}:
            self.open.append(tag)

    def handle_endtag(self, tag):
        assert self.open and self.open[-1] == tag, f"</{tag}> closes <{self.open[-1:]}>"
        self.open.pop()


def _data(figures=None) -> ReportData:
    routes = pd.DataFrame(
        [{"route": HOSTILE_ROUTE, "requests": 3, "db_share": 0.5, "elapsed_ms_p50": 12.5}]
    )
    templates = pd.DataFrame(
        [
            {
                "template_id": "0123456789abcdef",
                "template": HOSTILE_TEMPLATE,
                "calls": 9,
                "share": 0.5,
                "routes": [{"route": HOSTILE_ROUTE, "share": 1.0}],
            }
        ]
    )
    return ReportData(
        title="Database time by route: a&b.duckdb",
        generated_at="2026-12-01 10:00 UTC",
        sources=pd.DataFrame([{"path": "logs/<b>.log", "format": "pg-stderr", "lines_read": 10}]),
        coverage=pd.DataFrame([{"metric": "statements linked", "value": 0.9}]),
        time_range=("2026-11-30 09:00:00", "2026-11-30 10:00:00"),
        findings=[f"{HOSTILE_ROUTE} runs template 01234567 12.0 times per request."],
        routes=routes,
        templates=templates,
        nplus1=pd.DataFrame(),
        figures=figures or {},
    )


def test_render_html_is_well_formed_and_escapes_log_strings():
    page = render_html(_data())
    parser = _Collector()
    parser.feed(page)
    parser.close()
    assert parser.open == ["html"] or parser.open == []
    # OWASP XSS Prevention Cheat Sheet, output encoding for HTML contexts: < > & " ' are encoded.
    assert "<script" not in page
    assert "&lt;script&gt;alert(1)&lt;/script&gt;" in page
    assert "onerror=alert(2)&gt;" in page and "<img src=x" not in page
    assert not [
        tag for tag, _ in parser.tags if tag in {"script", "iframe", "object", "embed", "link"}
    ]


def test_render_html_references_nothing_on_the_network():
    page = render_html(_data())
    assert not re.search(r"https?://", page)
    assert "default-src 'none'" in page


def test_render_html_inlines_figures_as_png_data_uris():
    fig = charts.ecdf_pair(
        pd.Series([1.0, 2.0]).to_numpy(), pd.Series([1.0]).to_numpy(), title="t", xlabel="x"
    )
    page = render_html(_data({"cdf": fig}))
    sources = re.findall(r'<img alt="[^"]*" src="([^"]+)"', page)
    assert len(sources) == 1 and sources[0].startswith("data:image/png;base64,iVBORw0KGgo")


def _browser() -> str | None:
    return shutil.which("chromium") or shutil.which("chromium-browser")


@pytest.mark.skipif(
    _browser() is None and not os.environ.get("CI"), reason="chromium not installed"
)
def test_report_renders_in_headless_chromium_with_all_images_and_no_console_errors(tmp_path):
    browser = _browser()
    assert browser, "CI must install Debian's chromium package (.ci/run does)"
    fig = charts.ecdf_pair(
        pd.Series([1.0, 2.0]).to_numpy(), pd.Series([1.0]).to_numpy(), title="t", xlabel="x"
    )
    report = tmp_path / "report.html"
    report.write_text(render_html(_data({"cdf": fig, "again": fig})))
    # The harness (a test page, not the report) inspects the report inside a same-origin iframe.
    harness = tmp_path / "harness.html"
    harness.write_text(
        "<!DOCTYPE html><html><body><iframe id=f src='report.html' width=1200 height=900></iframe>"
        "<pre id=out>pending</pre><script>"
        "document.getElementById('f').onload = function () {"
        " var d = this.contentDocument, imgs = Array.from(d.images);"
        " var ok = imgs.filter(function (i) { return i.complete && i.naturalWidth > 0; }).length;"
        " document.getElementById('out').textContent = 'images ' + imgs.length + ' loaded ' + ok"
        "  + ' scripts ' + d.scripts.length + ' title ' + d.title; };"
        "</script></body></html>"
    )
    flags = [
        "--headless",
        "--no-sandbox",
        "--disable-gpu",
        "--disable-quic",
        "--no-first-run",
        "--disable-background-networking",
        "--disable-component-update",
        "--disable-sync",
        f"--user-data-dir={tmp_path / 'profile'}",
        "--allow-file-access-from-files",
        "--enable-logging=stderr",
        "--v=0",
        "--virtual-time-budget=5000",
    ]
    dom = subprocess.run(
        [browser, *flags, "--dump-dom", harness.as_uri()],
        capture_output=True,
        text=True,
        timeout=120,
    )
    match = re.search(r"images (\d+) loaded (\d+) scripts (\d+)", dom.stdout)
    assert match, dom.stdout[-2000:] + dom.stderr[-2000:]
    assert match.group(1) == match.group(2) == "2"
    assert match.group(3) == "0"
    console = [
        line for line in dom.stderr.splitlines() if "CONSOLE" in line and "report.html" in line
    ]
    assert console == []
    shot = tmp_path / "report.png"
    subprocess.run(
        [browser, *flags, f"--screenshot={shot}", "--window-size=1200,900", report.as_uri()],
        capture_output=True,
        timeout=120,
    )
    assert shot.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
