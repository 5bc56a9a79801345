"""Promise 5: the HTML report cannot be turned against its reader.

Routes, request paths, table names and statements crafted as HTML or script are ingested from real
log files; in the report they must appear only as text. Rule: OWASP Cross Site Scripting Prevention
Cheat Sheet, "Output Encoding" (HTML entity encoding of untrusted data in HTML content and quoted
attributes; no untrusted data in script, style or URL contexts). The report is parsed with
html.parser: no script, iframe, object or embed element, no event-handler attribute, no
``javascript:`` URL, and the crafted strings are in the text content.
"""

from __future__ import annotations

import json
from html.parser import HTMLParser

import pytest

import attrib
from attrib import ingest
from attrib import store as _store

PAYLOADS = [
    "<script>alert(1)</script>",
    '"><img src=x onerror=alert(1)>',
    "javascript:alert(1)",
    "</style><script>alert(2)</script>",
    "<iframe src=//evil.example>",
]


class _Page(HTMLParser):
    def __init__(self) -> None:
        super().__init__(convert_charrefs=True)
        self.tags: list[tuple[str, list[tuple[str, str | None]]]] = []
        self.text: list[str] = []
        self.raw: list[str] = []

    def handle_starttag(self, tag, attrs):
        self.tags.append((tag, attrs))

    def handle_startendtag(self, tag, attrs):
        self.tags.append((tag, attrs))

    def handle_data(self, data):
        self.text.append(data)


@pytest.fixture(scope="module")
def report(tmp_path_factory):
    """Ingest hostile routes and statements from log files, render the report."""
    d = tmp_path_factory.mktemp("xss")
    requests, statements = [], []
    for i, payload in enumerate(PAYLOADS * 3):
        rid = f"x-{i}"
        requests.append(
            {
                "time": f"2026-12-02T00:00:{i:02d}.500Z",
                "request_id": rid,
                "method": "GET",
                "route": f"/a/{payload}",
                "path": f"/a/{payload}?q={payload}",
                "status": 200,
                "duration_ms": 40,
            }
        )
        table = payload.replace('"', "")
        for _ in range(3):  # repeats, so the statement shows as an N+1 finding too
            statements.append(
                {
                    "ts": f"2026-12-02T00:00:{i:02d}.400Z",
                    "sql": f'SELECT "{table}" FROM "{table}" WHERE note = \'{payload}\'',
                    "duration_ms": 3,
                    "request_id": rid,
                }
            )
    (d / "requests.jsonl").write_text("\n".join(json.dumps(r) for r in requests) + "\n")
    (d / "sql.jsonl").write_text("\n".join(json.dumps(s) for s in statements) + "\n")
    path = d / "xss.duckdb"
    con = _store.connect(path)
    ingest.ingest(con, [d / "requests.jsonl"], [d / "sql.jsonl"])
    routes = [r[0] for r in con.execute("SELECT DISTINCT route FROM requests").fetchall()]
    tables = con.execute(
        "SELECT list(DISTINCT t) FROM templates, unnest(tables) AS u(t)"
    ).fetchone()[0]
    con.close()
    with attrib.open(path, read_only=True) as s:
        page = s.report_html()
    return page, routes, tables


def test_report_hostile_strings_were_really_ingested(report):
    _, routes, tables = report
    assert any("<script>" in r for r in routes), routes
    assert any("onerror" in r for r in routes), routes
    assert any("<script>" in (t or "") for t in tables), tables


def test_report_has_no_active_content(report):
    page, _, _ = report
    parser = _Page()
    parser.feed(page)
    parser.close()
    tags = {t for t, _ in parser.tags}
    assert not tags & {"script", "iframe", "object", "embed", "frame", "base"}, tags
    # the report's own charts are images embedded as data: URLs; an injected <img src=x> is not
    for tag, attrs in parser.tags:
        if tag == "img":
            src = dict(attrs).get("src") or ""
            assert src.startswith("data:image/png;base64,"), src[:80]
    for tag, attrs in parser.tags:
        for name, value in attrs:
            assert not name.lower().startswith("on"), (tag, name, value)
            if name.lower() in ("href", "src", "action", "formaction", "xlink:href"):
                assert not (value or "").strip().lower().startswith("javascript:"), (tag, value)
    # a </style> inside data would end the style element early: only the report's own styles
    styles = page.lower().count("<style")
    assert page.lower().count("</style>") == styles


def test_report_shows_the_hostile_strings_as_text(report):
    page, _, _ = report
    parser = _Page()
    parser.feed(page)
    text = "".join(parser.text)
    assert "<script>alert(1)</script>" in text
    assert "onerror=alert(1)" in text
    assert "&lt;script&gt;" in page  # entity-encoded in the source (OWASP output encoding)
