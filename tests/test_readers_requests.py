"""Request-log readers: JSON lines, CSV and access logs, on fixture files and inline lines.

Fixtures live in fixtures/logs/<format>/: 0xx_* are ordinary logs, 9xx_* hostile ones. Files are read the
way ingest reads them: bytes decoded as UTF-8 with replacement, split on newlines.
"""

from __future__ import annotations

import json
from pathlib import Path
from zoneinfo import ZoneInfo

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from attrib.errors import MappingError, TimezoneError
from attrib.readers import access_log, otlp, requests_csv, requests_jsonl
from attrib.records import ReadOptions, Reject, Request, Skip

LOGS = Path(__file__).resolve().parent.parent / "fixtures" / "logs"
READERS = {
    "requests-jsonl": requests_jsonl,
    "requests-csv": requests_csv,
    "access-log": access_log,
    "otlp-json": otlp,
}
NGINX_TIMED = "nginx {request_id} {elapsed_s}"
# Options a fixture needs; fixtures not listed read with the defaults.
OPTIONS = {
    "requests-jsonl/004_naive_times.log": ReadOptions(tz=ZoneInfo("Europe/Berlin")),
    "requests-jsonl/005_nested_mapped.log": ReadOptions(
        request_fields={
            "timestamp": "at",
            "request_id": "req.id",
            "method": "req.verb",
            "path": "req.path",
            "status": "res.code",
            "elapsed_s": "took",
        }
    ),
    "requests-csv/002_semicolon_mapped.log": ReadOptions(
        request_fields={
            "timestamp": "when",
            "request_id": "rid",
            "method": "verb",
            "path": "url",
            "status": "code",
            "elapsed_s": "secs",
            "traceparent": "tp",
        }
    ),
    "access-log/001_nginx_timed.log": ReadOptions(access_format=NGINX_TIMED),
    "access-log/002_apache_combined_us.log": ReadOptions(
        access_format="combined {elapsed_us} {request_id}"
    ),
    "access-log/003_keyvalue_traceparent.log": ReadOptions(
        access_format='nginx rid={request_id} rt={elapsed_s} urt={_} ts={epoch_end} tp="{traceparent}"'
    ),
    "access-log/900_hostile.log": ReadOptions(access_format=NGINX_TIMED),
}
# Ordinary fixtures whose format is recognisable without options.
SNIFFABLE = [
    "requests-jsonl/001_basic.log",
    "requests-jsonl/002_epoch_seconds.log",
    "requests-jsonl/003_start_and_units.log",
    "requests-jsonl/004_naive_times.log",
    "requests-csv/001_basic.log",
    "requests-csv/003_multiline_quoted.log",
    "access-log/001_nginx_timed.log",
    "access-log/002_apache_combined_us.log",
    "access-log/003_keyvalue_traceparent.log",
    "otlp-json/001_current_semconv.log",
    "otlp-json/002_older_semconv.log",
]
US = 1_000_000
T0 = 1709647331  # 2024-03-05T14:02:11Z, see test_timeparse.py


def lines_of(path: Path) -> list[str]:
    """The decoded lines of a file, as ingest hands them to a reader."""
    text = path.read_bytes().decode("utf-8", errors="replace")
    lines = text.split("\n")
    if lines and lines[-1] == "":
        lines.pop()
    return lines


def read(rel: str, options: ReadOptions | None = None) -> list:
    fmt = rel.split("/")[0]
    lines = lines_of(LOGS / rel)
    opts = options or OPTIONS.get(rel, ReadOptions())
    return list(READERS[fmt].read(enumerate(lines, 1), opts))


def all_fixtures() -> list[str]:
    return sorted(str(p.relative_to(LOGS)) for fmt in READERS for p in (LOGS / fmt).glob("*.log"))


def requests(records: list) -> list[Request]:
    return [r for r in records if isinstance(r, Request)]


def rejects(records: list) -> list[tuple[int, str]]:
    return [(r.line, r.reason) for r in records if isinstance(r, Reject)]


def skips(records: list) -> list[tuple[int, str]]:
    return [(r.line, r.category) for r in records if isinstance(r, Skip)]


# --- every fixture -----------------------------------------------------------------------------


@pytest.mark.parametrize("rel", all_fixtures())
def test_read_fixture_line_counts_add_up_in_file_order(rel):
    records = read(rel)
    total = len(lines_of(LOGS / rel))
    assert total > 0
    assert sum(r.lines for r in records) == total
    starts = [r.line for r in records]
    assert starts == sorted(starts)
    covered = [r.line + i for r in records for i in range(r.lines)]
    assert covered == list(range(1, total + 1))


@pytest.mark.parametrize("rel", SNIFFABLE)
def test_sniff_accepts_own_format_and_refuses_the_others(rel):
    fmt = rel.split("/")[0]
    head = lines_of(LOGS / rel)[:20]
    accepted = {name for name, module in READERS.items() if module.sniff(head)}
    assert accepted == {fmt}


# --- JSON lines --------------------------------------------------------------------------------


def test_requests_jsonl_basic_fixture_gives_exact_requests():
    records = read("requests-jsonl/001_basic.log")
    got = requests(records)
    assert skips(records) == [(3, "blank")]
    assert [(r.request_id, r.method, r.route, r.path, r.status) for r in got] == [
        ("r-0001", "GET", "/orders/{id}", "/orders/9051", 200),
        ("r-0002", "POST", "/orders/{id}/loaves", "/orders/9051/loaves", 201),
        ("r-0003", "GET", "/loaves/{uuid}", "/loaves/3f9a1c27-d45e-4b08-a6c2-e19b7d05f3a1", 404),
        ("7", "GET", "/customers/{email}/orders", "/customers/ann%40example.org/orders", 200),
    ]
    # "time" is the end of the request: start = end - elapsed.
    assert got[0].start_us == (T0 * US + 540_000) - 34_000
    assert got[0].elapsed_ms == 34.0
    assert got[1].start_us == (T0 * US + 600_000) - 12_500
    assert got[2].start_us == (T0 + 1) * US - 2_250 and got[2].elapsed_ms == 2.25
    # W3C Trace Context, "Traceparent Header" example value; upper-case trace_id normalised.
    assert got[2].trace_id == "4bf92f3577b34da6a3ce929d0e0e4736"
    assert got[3].trace_id == "4bf92f3577b34da6a3ce929d0e0e4736"


def test_requests_jsonl_query_strings_never_reach_a_record():
    records = requests(read("requests-jsonl/001_basic.log"))
    assert all("?" not in (r.path or "") and "ANN-42" not in (r.route or "") for r in records)


def test_requests_jsonl_epoch_seconds_and_request_time_in_seconds():
    got = requests(read("requests-jsonl/002_epoch_seconds.log"))
    assert [(r.request_id, r.method, r.route, r.status, r.elapsed_ms) for r in got] == [
        ("a1", "GET", "/reports/{date}", 200, 34.0),
        ("a2", "DELETE", "/orders/{id}", 204, 2.0),
    ]
    assert got[0].start_us == 1709647331_540000 - 34_000


def test_requests_jsonl_start_field_is_taken_as_start_and_units_follow_names():
    got = requests(read("requests-jsonl/003_start_and_units.log"))
    assert [(r.route, r.elapsed_ms, r.status) for r in got] == [
        ("/orders/{id}", 34.12, 200),
        ("/loaves", 7.0, 200),
    ]
    assert got[0].start_us == T0 * US + 500_000
    assert got[1].start_us == T0 * US + 690_000


def test_requests_jsonl_naive_times_without_tz_raise_timezone_error():
    with pytest.raises(TimezoneError, match="--tz"):
        read("requests-jsonl/004_naive_times.log", ReadOptions())


def test_requests_jsonl_naive_times_use_tz():
    (got,) = requests(read("requests-jsonl/004_naive_times.log"))
    # 15:02:11.540 in Berlin (UTC+1 in March) is 14:02:11.540Z; minus 40 ms.
    assert got.start_us == T0 * US + 540_000 - 40_000


def test_requests_jsonl_nested_mapping_reads_dotted_fields():
    got = requests(read("requests-jsonl/005_nested_mapped.log"))
    assert [(r.request_id, r.method, r.route, r.status, r.elapsed_ms) for r in got] == [
        ("n1", "GET", "/orders/{id}", 200, 500.0),
        ("n2", "GET", "/orders/{id}", 500, 1500.0),
    ]


def test_requests_jsonl_mapping_to_absent_field_raises_mapping_error():
    options = ReadOptions(request_fields={"elapsed_ms": "elapsed"})
    with pytest.raises(MappingError, match="no field 'elapsed'.*--request-field elapsed_ms=NAME"):
        read("requests-jsonl/001_basic.log", options)


def test_requests_jsonl_unknown_mapping_key_raises_mapping_error():
    with pytest.raises(MappingError, match="unknown request field 'latency'"):
        read("requests-jsonl/001_basic.log", ReadOptions(request_fields={"latency": "x"}))


def test_requests_jsonl_log_without_duration_raises_mapping_error():
    lines = ['{"time":"2024-03-05T14:02:11Z","path":"/a"}'] * 3
    with pytest.raises(MappingError, match="no duration field"):
        list(requests_jsonl.read(enumerate(lines, 1), ReadOptions()))


def test_requests_jsonl_invalid_json_lines_are_rejected():
    records = read("requests-jsonl/900_invalid_json.log")
    assert len(requests(records)) == 1
    assert rejects(records) == [
        (2, "invalid JSON"),
        (3, "invalid JSON"),
        (4, "not a JSON object"),
        (5, "not a JSON object"),
        (6, "invalid JSON"),  # truncated last line
    ]


def test_requests_jsonl_missing_fields_are_rejected_per_line():
    records = read("requests-jsonl/901_missing_fields.log")
    assert len(requests(records)) == 1
    assert rejects(records) == [
        (2, "no timestamp"),
        (3, "no elapsed time"),
        (4, "no route or path"),
        (5, "no timestamp"),
    ]


def test_requests_jsonl_bad_values_are_rejected_and_large_durations_kept():
    records = read("requests-jsonl/902_bad_values.log")
    assert rejects(records) == [
        (1, "bad status"),
        (2, "bad status"),
        (3, "bad status"),
        (4, "negative elapsed time"),
        (5, "negative elapsed time"),
        (6, "bad elapsed time"),
        (7, "bad elapsed time"),
        (9, "timestamp out of range"),
        (10, "timestamp out of range"),
        (11, "timestamp out of range"),
        (12, "bad method"),
        (13, "bad method"),
        (14, "bad field value"),
        (15, "bad elapsed time"),
    ]
    (day,) = requests(records)
    assert day.line == 8 and day.elapsed_ms == 86_400_000.0


def test_requests_jsonl_nul_bytes_and_invalid_utf8_do_not_stop_reading():
    records = read("requests-jsonl/903_nul_and_bad_utf8.log")
    got = requests(records)
    assert [(r.line, r.path) for r in got] == [(1, "/caf\ufffd/1"), (3, "/a\x00b/2")]
    assert rejects(records) == [(2, "invalid JSON"), (4, "invalid JSON"), (5, "invalid JSON")]


def test_requests_jsonl_ten_megabyte_line_is_rejected_without_parsing():
    big = (
        '{"time":"2024-03-05T14:02:11Z","path":"/a","duration_ms":1,"pad":"'
        + "x" * 10_000_000
        + '"}'
    )
    lines = ['{"time":"2024-03-05T14:02:11Z","path":"/a","duration_ms":1}', big]
    records = list(requests_jsonl.read(enumerate(lines, 1), ReadOptions()))
    assert [type(r) for r in records] == [Request, Reject]
    assert records[1].reason == "line longer than 1 MiB" and len(records[1].excerpt) == 200


def test_requests_jsonl_only_blank_lines_are_all_skipped():
    records = list(requests_jsonl.read(enumerate(["", "  ", "\t"], 1), ReadOptions()))
    assert skips(records) == [(1, "blank"), (2, "blank"), (3, "blank")]


@pytest.mark.parametrize(
    ("value", "unit", "expected"),
    [
        (34, "ms", 34.0),
        ("34ms", "s", 34.0),
        ("0.034s", "ms", 34.0),
        ("34120us", "ms", 34.12),
        ("34120µs", "ms", 34.12),
        ("5000000ns", "ms", 5.0),
        (1500, "us", 1.5),
        ("2.5", "s", 2500.0),
    ],
)
def test_to_elapsed_ms_converts_units(value, unit, expected):
    assert requests_jsonl.to_elapsed_ms(value, unit) == pytest.approx(expected)


# --- CSV ---------------------------------------------------------------------------------------


def test_requests_csv_basic_fixture_gives_exact_requests():
    records = read("requests-csv/001_basic.log")
    assert skips(records) == [(1, "header"), (4, "blank")]
    got = requests(records)
    assert [
        (r.line, r.request_id, r.method, r.route, r.path, r.status, r.elapsed_ms) for r in got
    ] == [
        (2, "r-0001", "GET", "/orders/{id}", "/orders/9051", 200, 34.0),
        (3, "r-0002", "POST", "/orders/{id}/loaves", "/orders/9051/loaves", 201, 12.5),
        (5, "r-0003", "GET", "/search/rye,spelt", "/search/rye,spelt", 200, 3.0),
        (6, None, "GET", "/loaves/", "/loaves/", None, 1.0),
    ]
    assert got[0].start_us == T0 * US + 540_000 - 34_000


def test_requests_csv_semicolons_bom_mapping_and_traceparent():
    got = requests(read("requests-csv/002_semicolon_mapped.log"))
    assert [(r.request_id, r.route, r.elapsed_ms, r.trace_id) for r in got] == [
        ("a1", "/orders/{id}", 34.0, "4bf92f3577b34da6a3ce929d0e0e4736"),
        ("a2", "/orders/{id}", 500.0, None),
    ]
    assert got[1].start_us == (T0 + 1) * US - 500_000


def test_requests_csv_quoted_line_breaks_consume_several_lines():
    records = read("requests-csv/003_multiline_quoted.log")
    got = requests(records)
    assert [(r.line, r.lines, r.request_id, r.path) for r in got] == [
        (2, 2, "m1", "/notes/1\ncontinued"),
        (4, 1, "m2", '/notes/2 "quoted"'),
        (6, 1, "m3", "/notes/3"),
    ]
    assert skips(records) == [(1, "header"), (5, "header")]


def test_requests_csv_mapping_to_absent_column_raises_mapping_error():
    with pytest.raises(MappingError, match="no field 'took'"):
        read("requests-csv/001_basic.log", ReadOptions(request_fields={"elapsed_ms": "took"}))


def test_requests_csv_hostile_rows_are_rejected_and_a_stray_quote_costs_one_line():
    records = read("requests-csv/900_hostile.log")
    assert rejects(records) == [
        (3, "expected 6 columns, found 5"),
        (4, "expected 6 columns, found 7"),
        (5, "bad quoting"),
        (6, "bad status"),
        (7, "negative elapsed time"),
        (8, "bad ISO 8601 timestamp"),
        (11, "unterminated quoted field"),
        (13, "expected 6 columns, found 4"),  # truncated last line
    ]
    assert [(r.line, r.path) for r in requests(records)] == [
        (2, "/ok"),
        (9, "/caf\ufffd"),
        (10, "/a\x00b"),
        (12, "/after-stray"),
    ]


def test_requests_csv_ten_megabyte_line_is_rejected():
    lines = ["time,path,duration_ms", "2024-03-05T14:02:11Z,/" + "a" * 10_000_000 + ",1"]
    records = list(requests_csv.read(enumerate(lines, 1), ReadOptions()))
    assert rejects(records) == [(2, "line longer than 1 MiB")]


# --- access logs -------------------------------------------------------------------------------


def test_access_log_nginx_timed_end_time_minus_request_time_is_start():
    records = read("access-log/001_nginx_timed.log")
    got = requests(records)
    assert [(r.request_id, r.method, r.route, r.path, r.status, r.elapsed_ms) for r in got] == [
        ("5f0c9a3e7b2d41c88e6a0b1d2c3f4e5a", "GET", "/orders/{id}", "/orders/9051", 200, 34.0),
        (
            "6a1d0b4f8c3e52d99f7b1c2e3d4f5a6b",
            "POST",
            "/orders/{id}/loaves",
            "/orders/9051/loaves",
            201,
            1250.0,
        ),
        (None, "GET", "/static/app.css", "/static/app.css", 304, 0.0),
    ]
    # nginx $time_local is taken at log write (nginx docs, ngx_http_log_module): start = end - $request_time.
    assert got[0].start_us == T0 * US - 34_000
    assert got[1].start_us == (T0 + 1) * US - 1_250_000
    assert skips(records) == [(3, "blank"), (4, "invalid request line")]


def test_access_log_apache_percent_d_is_microseconds_and_percent_t_is_start():
    got = requests(read("access-log/002_apache_combined_us.log"))
    # Apache mod_log_config: %D is the time to serve the request in microseconds, %t when it was received.
    assert [(r.start_us, r.elapsed_ms, r.request_id, r.route) for r in got] == [
        (T0 * US, 34.12, "5f0c9a3e7b2d41c88e6a0b1d2c3f4e5a", "/orders/{id}"),
        (T0 * US, 1.2, None, "/customers/{email}"),
    ]


def test_access_log_key_value_fields_epoch_end_and_traceparent():
    got = requests(read("access-log/003_keyvalue_traceparent.log"))
    # log-formats.md §6 "joinable" example: ts=$msec (end, ms precision) wins over $time_local.
    assert [(r.start_us, r.elapsed_ms, r.trace_id) for r in got] == [
        (1709647331_540000 - 34_000, 34.0, "3f9a1c27d45e4b08a6c2e19b7d05f3a1"),
        (1709647332_012000 - 12_000, 12.0, None),
    ]


def test_access_log_hostile_lines_are_rejected_or_skipped():
    records = read("access-log/900_hostile.log")
    assert rejects(records) == [
        (2, "line does not match the access format"),
        (4, "bad status"),
        (5, "negative elapsed time"),
        (6, "no elapsed time"),
        (8, "bad NCSA timestamp"),
        (9, "timestamp out of range"),
        (12, "line does not match the access format"),  # truncated
    ]
    assert skips(records) == [(3, "invalid request line"), (11, "invalid request line")]
    assert [(r.line, r.path, r.elapsed_ms) for r in requests(records)] == [
        (1, "/ok", 10.0),
        (7, "/a", 86_400_000.0),
        (10, "/caf\ufffd", 10.0),
    ]


@pytest.mark.parametrize("fmt", [None, "", "common", "combined", "nginx {request_id}"])
def test_access_log_format_without_duration_raises_mapping_error(fmt):
    lines = lines_of(LOGS / "access-log/001_nginx_timed.log")
    with pytest.raises(MappingError, match="duration"):
        list(access_log.read(enumerate(lines, 1), ReadOptions(access_format=fmt)))


@pytest.mark.parametrize(
    ("fmt", "message"),
    [
        ("nginx {rid} {elapsed_s}", "unknown field {rid}"),
        ('"{request}" {elapsed_s}', "no time field"),
        ("[{time}] {elapsed_s}", "no {request}, {path} or {route}"),
        ("combined {elapsed_us}", "matches none of the first 4 lines"),
    ],
)
def test_access_log_unusable_format_raises_mapping_error(fmt, message):
    lines = lines_of(LOGS / "access-log/001_nginx_timed.log")
    with pytest.raises(MappingError, match=message.replace("{", r"\{").replace("}", r"\}")):
        list(access_log.read(enumerate(lines, 1), ReadOptions(access_format=fmt)))


def test_access_log_ten_megabyte_line_is_rejected():
    ok = '192.0.2.1 - - [05/Mar/2024:14:02:11 +0000] "GET /a HTTP/1.1" 200 1 "-" "ua" r 0.001'
    big = ok.replace("/a", "/" + "a" * 10_000_000)
    records = list(access_log.read(enumerate([ok, big], 1), ReadOptions(access_format=NGINX_TIMED)))
    assert rejects(records) == [(2, "line longer than 1 MiB")]


def test_access_log_method_and_path_fields_instead_of_request_line():
    line = "2024-03-05T14:02:11+00:00 GET /orders/12?x=1 200 12"
    options = ReadOptions(access_format="{iso} {method} {path} {status} {elapsed_ms}")
    (got,) = access_log.read([(1, line)], options)
    assert (got.start_us, got.method, got.route, got.path, got.status, got.elapsed_ms) == (
        T0 * US,
        "GET",
        "/orders/{id}",
        "/orders/12",
        200,
        12.0,
    )


@pytest.mark.parametrize(
    ("traceparent", "expected"),
    [
        # W3C Trace Context, "Traceparent Header" examples and rules (version ff and all-zero ids invalid).
        (
            "00-4bf92f3577b34da6a3ce929d0e0e4736-00f067aa0ba902b7-01",
            "4bf92f3577b34da6a3ce929d0e0e4736",
        ),
        (
            "00-4bf92f3577b34da6a3ce929d0e0e4736-00f067aa0ba902b7-00",
            "4bf92f3577b34da6a3ce929d0e0e4736",
        ),
        ("ff-4bf92f3577b34da6a3ce929d0e0e4736-00f067aa0ba902b7-01", None),
        ("00-00000000000000000000000000000000-00f067aa0ba902b7-01", None),
        ("00-4BF92F3577B34DA6A3CE929D0E0E4736-00F067AA0BA902B7-01", None),  # upper case: not valid
        ("-", None),
    ],
)
def test_requests_jsonl_traceparent_field_gives_trace_id(traceparent, expected):
    line = json.dumps(
        {"time": "2024-03-05T14:02:11Z", "path": "/a", "duration_ms": 1, "traceparent": traceparent}
    )
    (got,) = requests_jsonl.read([(1, line)], ReadOptions())
    assert got.trace_id == expected


# Property check (hypothesis): after a well-formed first line, arbitrary lines never raise and every
# line is accounted for exactly once.
VALID_FIRST = {
    "requests-jsonl": '{"time":"2024-03-05T14:02:11Z","path":"/a","duration_ms":1}',
    "requests-csv": "time,path,duration_ms",
    "access-log": '192.0.2.1 - - [05/Mar/2024:14:02:11 +0000] "GET /a HTTP/1.1" 200 1 "-" "ua" r 0.001',
    "otlp-json": '{"resourceSpans":[]}',
}
_NOISE = st.lists(
    st.sampled_from(
        [*'{}[]",:;/\\ -.0123456789aeTZ\x00\ufffd', "null", "GET ", '"time"', "+0000]"]
    ),
    max_size=40,
).map("".join)


@pytest.mark.parametrize("fmt", sorted(VALID_FIRST))
@settings(max_examples=40, deadline=None)
@given(noise=st.lists(_NOISE, max_size=12))
def test_read_arbitrary_lines_are_all_accounted_for(fmt, noise):
    lines = [VALID_FIRST[fmt], *noise]
    options = ReadOptions(access_format=NGINX_TIMED)
    records = list(READERS[fmt].read(enumerate(lines, 1), options))
    covered = [r.line + i for r in records for i in range(r.lines)]
    assert covered == list(range(1, len(lines) + 1))


def test_requests_csv_tab_delimited_header_is_detected():
    lines = ["time\tpath\tduration_ms", "2024-03-05T14:02:11Z\t/orders/5\t2"]
    assert requests_csv.sniff(lines)
    records = list(requests_csv.read(enumerate(lines, 1), ReadOptions()))
    assert [(r.route, r.elapsed_ms) for r in requests(records)] == [("/orders/{id}", 2.0)]


def test_requests_csv_stray_quote_gives_up_after_max_row_lines():
    row = "2024-03-05T14:02:11Z,/orders/{n},2"
    lines = ["time,path,duration_ms", '2024-03-05T14:02:11Z,"/stray,2']
    lines += [row.format(n=n) for n in range(requests_csv.MAX_ROW_LINES + 10)]
    records = list(requests_csv.read(enumerate(lines, 1), ReadOptions()))
    assert rejects(records) == [(2, "unterminated quoted field")]
    assert len(requests(records)) == requests_csv.MAX_ROW_LINES + 10
    assert sum(r.lines for r in records) == len(lines)


def test_requests_jsonl_field_names_are_found_after_a_long_garbage_preamble():
    good = '{"time":"2024-03-05T14:02:11Z","path":"/orders/5","duration_ms":2}'
    lines = ["Traceback (most recent call last):"] * 150 + [good] * 3
    records = list(requests_jsonl.read(enumerate(lines, 1), ReadOptions()))
    assert len(rejects(records)) == 150
    assert [r.line for r in requests(records)] == [151, 152, 153]


def test_requests_jsonl_two_duration_mappings_raise_mapping_error():
    options = ReadOptions(request_fields={"elapsed_ms": "duration_ms", "elapsed_s": "duration_ms"})
    with pytest.raises(MappingError, match="only one duration field"):
        read("requests-jsonl/001_basic.log", options)


def test_access_log_repeated_field_raises_mapping_error():
    lines = lines_of(LOGS / "access-log/001_nginx_timed.log")
    options = ReadOptions(access_format="nginx {request_id} {elapsed_s} {request_id}")
    with pytest.raises(MappingError, match=r"\{request_id\} appears twice"):
        list(access_log.read(enumerate(lines, 1), options))
