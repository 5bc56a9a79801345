"""Linking statements to requests: by request id, by trace id, innermost window, late requests."""

from __future__ import annotations

from attrib import join

T = "4bf92f3577b34da6a3ce929d0e0e4736"
BASE = 1_709_647_200_000_000  # 2024-03-05 14:00:00 UTC in microseconds


def add_request(con, line, start_ms, elapsed_ms, request_id=None, trace_id=None, source_id=1):
    con.execute(
        "INSERT INTO requests VALUES (?, ?, 0, ?, ?, make_timestamp(?), ?, 'GET', '/r', NULL, 200)",
        [source_id, line, request_id, trace_id, BASE + int(start_ms * 1000), elapsed_ms],
    )


def add_statement(con, line, start_ms, request_id=None, trace_id=None, source_id=2):
    con.execute(
        "INSERT INTO statements VALUES (?, ?, 0, make_timestamp(?), 1.0, 1, 't', 0, ?, ?, "
        "NULL, NULL, NULL, NULL, NULL)",
        [source_id, line, BASE + int(start_ms * 1000), request_id, trace_id],
    )


def links(con):
    return con.execute(
        "SELECT line, req_line FROM links WHERE source_id = 2 ORDER BY line"
    ).fetchall()


def test_link_by_request_id(con):
    add_request(con, 1, 0, 100, request_id="a")
    add_request(con, 2, 0, 100, request_id="b")
    add_statement(con, 1, 10, request_id="b")
    add_statement(con, 2, 10, request_id="a")
    add_statement(con, 3, 10, request_id="zzz")
    assert join.link(con) == 2
    assert links(con) == [(1, 2), (2, 1)]


def test_link_request_id_wins_over_trace_id(con):
    add_request(con, 1, 0, 100, request_id="a")
    add_request(con, 2, 0, 100, trace_id=T)
    add_statement(con, 1, 10, request_id="a", trace_id=T)
    join.link(con)
    assert links(con) == [(1, 1)]


def test_link_by_trace_id_single_request_even_outside_its_window(con):
    add_request(con, 1, 0, 100, trace_id=T)
    add_statement(con, 1, 5000, trace_id=T)
    join.link(con)
    assert links(con) == [(1, 1)]


def test_link_by_trace_id_picks_the_innermost_window(con):
    add_request(con, 1, 0, 100, trace_id=T)  # outer: 0-100 ms
    add_request(con, 2, 20, 30, trace_id=T)  # inner: 20-50 ms
    add_request(con, 3, 10, 80, trace_id=T)  # middle: 10-90 ms
    add_statement(con, 1, 30, trace_id=T)  # in all three: the latest start (inner)
    add_statement(con, 2, 60, trace_id=T)  # in outer and middle: middle
    add_statement(con, 3, 95, trace_id=T)  # only in outer
    add_statement(con, 4, 500, trace_id=T)  # in none: not linked
    assert join.link(con) == 3
    assert links(con) == [(1, 2), (2, 3), (3, 1)]


def test_link_window_end_is_inclusive(con):
    add_request(con, 1, 0, 100, trace_id=T)
    add_request(con, 2, 200, 100, trace_id=T)
    add_statement(con, 1, 100, trace_id=T)
    join.link(con)
    assert links(con) == [(1, 1)]


def test_link_requests_ingested_after_statements_are_linked_later(con):
    add_statement(con, 1, 10, request_id="late")
    add_statement(con, 2, 10, trace_id=T)
    assert join.link(con) == 0
    add_request(con, 1, 0, 100, request_id="late")
    add_request(con, 2, 0, 100, trace_id=T)
    assert join.link(con) == 2
    assert links(con) == [(1, 1), (2, 2)]


def test_link_existing_links_are_kept_and_not_duplicated(con):
    add_request(con, 1, 0, 100, request_id="a", trace_id=T)
    add_statement(con, 1, 10, trace_id=T)
    join.link(con)
    add_request(con, 2, 0, 100, trace_id=T)  # a second request with the trace arrives later
    assert join.link(con) == 0
    assert links(con) == [(1, 1)]
