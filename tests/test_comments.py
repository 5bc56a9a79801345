"""sqlcommenter comments and W3C traceparent values inside statement text."""

from __future__ import annotations

import pytest

from attrib.comments import comment_tags, request_keys, trace_id


def test_comment_tags_spec_example_decodes_all_pairs():
    # opentelemetry-sqlcommenter "Specifications": sorted key='value' pairs, URL-encoded values.
    sql = (
        "SELECT * FROM FOO /*action='%2Fparam*d',controller='index',framework='spring',"
        "traceparent='00-5bd66ef5095369c7b0d1f8f4bd33716a-c532cb4098ac3dd2-01',"
        "tracestate='congo%3Dt61rcWkgMzE%2Crojo%3D00f067aa0ba902b7'*/"
    )
    tags = comment_tags(sql)
    assert tags["action"] == "/param*d"
    assert tags["controller"] == "index"
    assert tags["tracestate"] == "congo=t61rcWkgMzE,rojo=00f067aa0ba902b7"
    assert request_keys(sql) == (None, "5bd66ef5095369c7b0d1f8f4bd33716a")


def test_comment_tags_escaped_quote_in_value_is_unescaped():
    # sqlcommenter "Comment escaping": a ' inside a value is sent as \'.
    assert comment_tags(r"SELECT 1 /*request_id='o\'brien'*/") == {"request_id": "o'brien"}


@pytest.mark.parametrize(
    "sql",
    [
        "SELECT 1",
        "SELECT 1 /*request_id='a'*/ FROM t",  # comment not at the end
        "SELECT '/*request_id=''x''*/'",  # inside a literal, not a comment at the end
        "",
        "*/",
    ],
)
def test_comment_tags_without_trailing_comment_is_empty(sql):
    assert comment_tags(sql) == {}


def test_comment_tags_allow_trailing_semicolon_and_spaces():
    # MariaDB's slow log appends ';' to every statement (see docs/input-formats.md).
    assert request_keys("SELECT 1 /*request_id='r-1'*/;\n") == ("r-1", None)


@pytest.mark.parametrize(
    ("value", "expected"),
    [
        # W3C Trace Context, "Traceparent Header" example value.
        (
            "00-4bf92f3577b34da6a3ce929d0e0e4736-00f067aa0ba902b7-01",
            "4bf92f3577b34da6a3ce929d0e0e4736",
        ),
        (
            "00-4bf92f3577b34da6a3ce929d0e0e4736-00f067aa0ba902b7-00",
            "4bf92f3577b34da6a3ce929d0e0e4736",
        ),
        # all-zero trace id or parent id is invalid (same section)
        ("00-00000000000000000000000000000000-00f067aa0ba902b7-01", None),
        ("00-4bf92f3577b34da6a3ce929d0e0e4736-0000000000000000-01", None),
        # version ff is invalid; uppercase hex is not in the grammar
        ("ff-4bf92f3577b34da6a3ce929d0e0e4736-00f067aa0ba902b7-01", None),
        ("00-4BF92F3577B34DA6A3CE929D0E0E4736-00f067aa0ba902b7-01", None),
        # version 00 must be exactly 55 characters; a higher version may carry more after '-'
        ("00-4bf92f3577b34da6a3ce929d0e0e4736-00f067aa0ba902b7-01-extra", None),
        (
            "01-4bf92f3577b34da6a3ce929d0e0e4736-00f067aa0ba902b7-01-extra",
            "4bf92f3577b34da6a3ce929d0e0e4736",
        ),
        ("", None),
        (None, None),
    ],
)
def test_trace_id_follows_w3c_trace_context(value, expected):
    assert trace_id(value) == expected
