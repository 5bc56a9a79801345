"""Listings rendered as aligned tables, CSV and JSON."""

from __future__ import annotations

import io
import json
import math

import pandas as pd
import pytest

from attrib.present import render


@pytest.fixture
def df():
    return pd.DataFrame(
        {
            "route": ["/huts/{id}", "/search"],
            "requests": [12, 3],
            "db_share": [0.75, math.nan],
            "routes": [[{"route": "/a", "share": 1.0}], []],
        }
    )


def test_render_json_turns_nan_into_null_and_keeps_nested_lists(df):
    rows = json.loads(render(df, "json"))
    assert rows[1]["db_share"] is None
    assert rows[0]["routes"] == [{"route": "/a", "share": 1.0}]
    assert list(rows[0]) == ["route", "requests", "db_share", "routes"]


def test_render_csv_round_trips_through_pandas(df):
    back = pd.read_csv(io.StringIO(render(df[["route", "requests"]], "csv")))
    assert back["requests"].tolist() == [12, 3]


def test_render_table_aligns_numbers_right_and_cuts_long_cells():
    long = "x" * 100
    text = render(pd.DataFrame({"name": [long, "b"], "n": [1, 1000]}), "table", max_width=20)
    lines = text.splitlines()
    assert len({len(line) for line in lines[:2]}) == 1
    assert lines[2].endswith("    1") and "…" in lines[2]


def test_render_table_of_empty_frame_says_so():
    assert render(pd.DataFrame({"a": []}), "table") == "(no rows)\n"


def test_render_unknown_format_raises():
    with pytest.raises(ValueError, match="unknown output format"):
        render(pd.DataFrame(), "xml")
