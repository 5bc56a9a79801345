"""Ingest end to end on small fixture logs (fixtures/logs/ingest/): accounting, idempotence, privacy,
duplicate request ids, errors, transactions.

Fixture 010_requests.jsonl holds 6 requests (one repeats request id r1) and one line that is not JSON;
020_statements.slow.log holds 9 MySQL slow-log entries of 5 lines each, with sqlcommenter comments.
"""

from __future__ import annotations

import gzip
import shutil
from types import SimpleNamespace

import pytest

from attrib import ingest, readers, store
from attrib.errors import FormatError, InputError, MappingError, TimezoneError
from attrib.records import Statement

from .conftest import FIXTURES

LOGS = FIXTURES / "logs" / "ingest"
REQUESTS = LOGS / "010_requests.jsonl"
STATEMENTS = LOGS / "020_statements.slow.log"
NAIVE = LOGS / "030_naive_requests.jsonl"
PLANTED = "secret-alpaca-42@example.com"
TABLES = ["meta", "sources", "skipped", "rejects", "requests", "statements", "templates", "links"]


@pytest.fixture(autouse=True)
def fixed_salt(monkeypatch):
    monkeypatch.setenv("ATTRIB_SALT", "00112233445566778899aabbccddeeff")


def dump(con) -> dict[str, list[tuple]]:
    """Every row of every table (without the wall-clock ingested_at), in a fixed order."""
    out = {}
    for table in TABLES:
        cols = [
            r[0]
            for r in con.execute(
                "SELECT column_name FROM information_schema.columns WHERE table_name = ? "
                "ORDER BY ordinal_position",
                [table],
            ).fetchall()
            if r[0] != "ingested_at"
        ]
        out[table] = con.execute(f"SELECT {', '.join(cols)} FROM {table} ORDER BY ALL").fetchall()
    return out


def text_cells(con) -> list[str]:
    """Every text value in the store: VARCHAR cells and the items of VARCHAR[] cells."""
    cells = []
    for table, column, dtype in con.execute(
        "SELECT table_name, column_name, data_type FROM information_schema.columns"
    ).fetchall():
        if dtype == "VARCHAR":
            cells += [r[0] for r in con.execute(f"SELECT {column} FROM {table}").fetchall()]
        elif dtype == "VARCHAR[]":
            for (items,) in con.execute(f"SELECT {column} FROM {table}").fetchall():
                cells += list(items or [])
    return [c for c in cells if c is not None]


def run(con, **kwargs):
    return ingest.ingest(con, [REQUESTS], [STATEMENTS], ingest.IngestOptions(**kwargs))


def test_ingest_fixture_logs_account_for_every_line(con):
    result = run(con)
    rows = con.execute(
        "SELECT path, lines_read, lines_ingested, lines_skipped, lines_rejected, requests, "
        "statements FROM sources ORDER BY source_id"
    ).fetchall()
    assert rows == [
        (str(REQUESTS), 7, 5, 0, 2, 5, 0),
        (str(STATEMENTS), 45, 45, 0, 0, 0, 9),
    ]
    for source_id, _read, rejected, skipped in con.execute(
        "SELECT source_id, lines_read, lines_rejected, lines_skipped FROM sources"
    ).fetchall():
        in_rejects = con.execute(
            "SELECT coalesce(sum(lines), 0) FROM rejects WHERE source_id = ?", [source_id]
        ).fetchone()[0]
        in_skipped = con.execute(
            "SELECT coalesce(sum(lines), 0) FROM skipped WHERE source_id = ?", [source_id]
        ).fetchone()[0]
        assert (in_rejects, in_skipped) == (rejected, skipped)
    summary = result.summary()
    assert list(summary["status"]) == ["ingested", "ingested"]
    assert list(summary["statements"]) == [0, 9]


def test_ingest_duplicate_request_id_is_rejected_naming_the_first(con):
    run(con)
    reasons = con.execute("SELECT line, reason FROM rejects ORDER BY line").fetchall()
    assert (4, f"duplicate request id (first seen in {REQUESTS} line 1)") in reasons
    assert con.execute("SELECT count(*) FROM requests WHERE request_id = 'r1'").fetchone()[0] == 1


def test_ingest_duplicate_request_id_across_files_is_rejected(con, tmp_path):
    run(con)
    again = tmp_path / "more.jsonl"
    again.write_text(
        '{"start_time": "2024-03-05T15:00:00Z", "elapsed_ms": 5, "request_id": "r2", '
        '"route": "/huts"}\n'
    )
    result = ingest.ingest(con, [again])
    assert result.files[0].rejected == 1
    reason = con.execute("SELECT reason FROM rejects WHERE source_id = 3").fetchone()[0]
    assert reason == f"duplicate request id (first seen in {REQUESTS} line 2)"


def test_ingest_same_files_again_changes_nothing_and_says_so(con):
    run(con)
    before = dump(con)
    result = run(con)
    assert [f.status for f in result.files] == [ingest.ALREADY] * 2
    assert result.links_added == 0
    assert dump(con) == before


def test_ingest_same_inputs_in_same_order_give_identical_stores(tmp_path):
    stores = []
    for name in ("a.duckdb", "b.duckdb"):
        con = store.connect(tmp_path / name)
        run(con)
        stores.append(dump(con))
        con.close()
    assert stores[0] == stores[1]
    assert stores[0]["statements"]  # the comparison is over real rows


def test_ingest_without_keep_raw_stores_no_statement_text(con):
    run(con)
    cells = text_cells(con)
    assert cells  # templates, paths, ids ... are there
    assert not [c for c in cells if PLANTED in c]
    assert not [c for c in cells if "secret-alpaca" in c]


def test_ingest_with_keep_raw_stores_statement_text(con):
    run(con, keep_raw=True)
    assert [c for c in text_cells(con) if PLANTED in c]
    raw = con.execute("SELECT count(raw_sql) FROM statements").fetchone()[0]
    assert raw == 9


def test_ingest_keep_rejected_text_stores_a_short_excerpt_only_when_asked(con, tmp_path):
    bad = tmp_path / "bad.jsonl"
    good = REQUESTS.read_text()
    bad.write_text(good + "x" * 500 + PLANTED + "\n")
    ingest.ingest(con, [bad])
    assert not [c for c in text_cells(con) if "xxxx" in c]
    con2 = store.connect(":memory:")
    ingest.ingest(con2, [bad], options=ingest.IngestOptions(keep_rejected_text=True))
    excerpts = [r[0] for r in con2.execute("SELECT excerpt FROM rejects").fetchall() if r[0]]
    assert excerpts and max(len(e) for e in excerpts) <= ingest.EXCERPT_MAX
    assert not [e for e in excerpts if PLANTED in e]  # cut before the planted value


def test_ingest_param_hash_tells_equal_from_different_values(con, tmp_path):
    log = tmp_path / "s.log"
    text = STATEMENTS.read_text()
    log.write_text(text + text.replace("2024-03-05T14", "2024-03-05T16"))
    ingest.ingest(con, queries=[log])
    rows = con.execute(
        "SELECT s.line, s.param_hash, t.template FROM statements s JOIN templates t "
        "USING (template_id) ORDER BY line"
    ).fetchall()
    first, second = rows[:9], rows[9:]
    assert [r[1] for r in first] == [r[1] for r in second]  # same values, same hash
    delete = [r for r in first if r[2].upper().startswith("DELETE")]
    assert len(delete) == 2 and delete[0][2] == delete[1][2]  # same template ...
    assert delete[0][1] != delete[1][1]  # ... different values


def test_param_hash_depends_on_the_key():
    assert ingest.param_hash(b"a", ("7",), None) != ingest.param_hash(b"b", ("7",), None)
    assert ingest.param_hash(b"a", ("7",), ("x",)) != ingest.param_hash(b"a", ("7", "x"), None)


def test_ingest_request_ids_come_from_comments(con):
    run(con)
    ids = con.execute("SELECT line, request_id, trace_id FROM statements ORDER BY line").fetchall()
    assert [i[1] for i in ids] == ["r1", "r1", "r2", None, None, "r404", None, None, None]
    assert ids[6][2] == "3f9a1c27d45e4b08a6c2e19b7d05f3a1"


def test_ingest_id_sources_without_comment_ignores_comments(con):
    run(con, id_sources="field,trace")
    assert con.execute("SELECT count(request_id) FROM statements").fetchone()[0] == 0


def test_ingest_comment_key_option_reads_another_key(con, tmp_path):
    log = tmp_path / "s.log"
    log.write_text(STATEMENTS.read_text().replace("request_id=", "req="))
    ingest.ingest(con, queries=[log], options=ingest.IngestOptions(comment_key="req"))
    assert con.execute("SELECT count(request_id) FROM statements").fetchone()[0] == 4


def test_ingest_gzip_file_gives_the_same_rows_as_plain(con, tmp_path):
    packed = tmp_path / "statements.log"
    packed.write_bytes(gzip.compress(STATEMENTS.read_bytes()))
    con2 = store.connect(":memory:")
    ingest.ingest(con, queries=[STATEMENTS])
    ingest.ingest(con2, queries=[packed])
    q = "SELECT * EXCLUDE (source_id) FROM statements ORDER BY line"
    assert con.execute(q).fetchall() == con2.execute(q).fetchall()


def test_ingest_templates_are_stored_once(con):
    run(con)
    n_templates = con.execute("SELECT count(*) FROM templates").fetchone()[0]
    n_distinct = con.execute("SELECT count(DISTINCT template_id) FROM statements").fetchone()[0]
    assert n_templates == n_distinct < 9


def test_ingest_naive_timestamps_without_tz_names_the_file(con):
    with pytest.raises(TimezoneError, match=f"^{NAIVE}"):
        ingest.ingest(con, [NAIVE])
    assert con.execute("SELECT count(*) FROM sources").fetchone()[0] == 0


def test_ingest_naive_timestamps_with_tz_are_converted_to_utc(con):
    ingest.ingest(con, [NAIVE], options=ingest.IngestOptions(tz="Europe/Berlin"))
    started = con.execute("SELECT strftime(started_at, '%H:%M') FROM requests").fetchone()[0]
    assert started == "13:00"  # 14:00 CET (UTC+1 in March 2024) is 13:00 UTC


def test_ingest_unknown_time_zone_is_a_timezone_error(con):
    with pytest.raises(TimezoneError, match="unknown time zone 'Mars/Olympus'"):
        ingest.ingest(con, [REQUESTS], options=ingest.IngestOptions(tz="Mars/Olympus"))


def test_ingest_missing_file_is_an_input_error(con, tmp_path):
    with pytest.raises(InputError, match="no such file"):
        ingest.ingest(con, [REQUESTS, tmp_path / "missing.jsonl"])
    assert con.execute("SELECT count(*) FROM sources").fetchone()[0] == 0


def test_ingest_unknown_format_lists_the_formats(con):
    with pytest.raises(FormatError, match="unknown format 'xml'.*requests-jsonl"):
        ingest.ingest(con, [REQUESTS], options=ingest.IngestOptions(requests_format="xml"))


def test_ingest_statement_format_given_for_requests_is_a_format_error(con):
    with pytest.raises(FormatError, match="mysql-slow is a statements log format"):
        ingest.ingest(con, [REQUESTS], options=ingest.IngestOptions(requests_format="mysql-slow"))


def test_ingest_binary_file_is_a_format_error_not_a_traceback(con, tmp_path):
    png = tmp_path / "photo.png"
    png.write_bytes(b"\x89PNG\r\n\x1a\n\x00\x00\x00\rIHDR" + bytes(range(256)) * 8)
    with pytest.raises(FormatError, match="photo.png: not a text log"):
        ingest.ingest(con, queries=[png])


def test_ingest_empty_file_is_recorded_with_no_lines(con, tmp_path):
    empty = tmp_path / "empty.log"
    empty.write_bytes(b"")
    result = ingest.ingest(con, queries=[empty])
    assert (result.files[0].format, result.files[0].lines_read) == ("empty", 0)


def test_ingest_failure_midway_leaves_no_partial_file(con, monkeypatch):
    monkeypatch.setattr(ingest, "PROGRESS_EVERY", 2)  # report after the first chunk was stored
    calls = []

    def stop_after_first_chunk(progress):
        calls.append(progress)
        raise KeyboardInterrupt

    with pytest.raises(KeyboardInterrupt):
        ingest.ingest(
            con,
            queries=[STATEMENTS],
            options=ingest.IngestOptions(chunk_size=2),
            progress=stop_after_first_chunk,
        )
    assert calls and not calls[0].done
    for table in ("sources", "statements", "templates", "rejects"):
        assert con.execute(f"SELECT count(*) FROM {table}").fetchone()[0] == 0, table


def test_ingest_reader_that_loses_lines_fails_the_accounting_check(con, monkeypatch, tmp_path):
    def read(lines, options):  # covers only the first of every two lines
        for n, _text in lines:
            if n % 2:
                yield Statement(n, 1_700_000_000_000_000, 1.0, "SELECT 1")

    fake = SimpleNamespace(NAME="lossy", KIND="statements", sniff=lambda head: True, read=read)
    monkeypatch.setattr(readers, "get", lambda name: fake)
    log = tmp_path / "s.log"
    log.write_text("a\nb\nc\nd\n")
    with pytest.raises(AssertionError, match="accounted for 2 lines of 4"):
        ingest.ingest(con, queries=[log], options=ingest.IngestOptions(queries_format="lossy"))
    assert con.execute("SELECT count(*) FROM sources").fetchone()[0] == 0


def test_ingest_progress_reports_each_file_done(con):
    seen = []
    ingest.ingest(con, [REQUESTS], [STATEMENTS], progress=seen.append)
    done = [(p.path, p.lines) for p in seen if p.done]
    assert done == [(str(REQUESTS), 7), (str(STATEMENTS), 45)]


def test_ingest_chunks_and_workers_give_the_same_store(tmp_path):
    results = []
    for name, options in (
        ("one.duckdb", ingest.IngestOptions()),
        ("chunked.duckdb", ingest.IngestOptions(chunk_size=2, workers=1)),
    ):
        con = store.connect(tmp_path / name)
        ingest.ingest(con, [REQUESTS], [STATEMENTS], options)
        results.append(dump(con))
        con.close()
    assert results[0] == results[1]


def test_ingest_dialect_of_the_store_is_kept(con, tmp_path):
    run(con)  # mysql-slow sets the store's dialect to mysql
    assert con.execute("SELECT value FROM meta WHERE key = 'dialect'").fetchone()[0] == "mysql"
    copy = tmp_path / "copy.log"
    shutil.copy(STATEMENTS, copy)
    with open(copy, "a") as f:
        f.write("\n")
    with pytest.raises(Exception, match="holds mysql statements"):
        ingest.ingest(con, queries=[copy], options=ingest.IngestOptions(dialect="postgres"))


@pytest.mark.parametrize(
    ("text", "message"),
    [("route", "expected OURS=THEIRS"), ("=x", "expected OURS=THEIRS")],
)
def test_parse_mapping_rejects_malformed_pairs(text, message):
    with pytest.raises(Exception, match=message):
        ingest.parse_mapping([text], "--request-field")


def test_parse_id_sources_rejects_unknown_and_repeated_names():
    with pytest.raises(Exception, match="at most once"):
        ingest.parse_id_sources("comment,comment")
    with pytest.raises(Exception, match="at most once"):
        ingest.parse_id_sources("header")


@pytest.mark.parametrize(
    "sql",
    [
        "SELECT 1",
        "SELECT 1 /*request_id='r%2F1'*/",
        "SELECT 1 /*request_id='a',traceparent='00-4bf92f3577b34da6a3ce929d0e0e4736-00f067aa0ba902b7-01'*/;",
        "SELECT '/*' /*request_id='x\\'y'*/  ",
        "SELECT 1 /* plain comment */",
        "SELECT 1 */",
        "/*request_id='only'*/",
    ],
)
def test_comment_ids_agree_with_request_keys(sql):
    from attrib.comments import request_keys

    req, trace = ingest.comment_ids([sql, sql], "request_id")
    assert (req[0], trace[0]) == (req[1], trace[1]) == request_keys(sql, "request_id")


def test_ingest_requests_after_their_statements_links_them_then(con):
    first = ingest.ingest(con, queries=[STATEMENTS])
    assert first.links_added == 0
    second = ingest.ingest(con, [REQUESTS])
    assert second.links_added == 6
    assert con.execute("SELECT count(*) FROM links").fetchone()[0] == 6


def test_ingest_mapping_error_from_a_reader_names_the_file(con):
    options = ingest.IngestOptions(request_fields={"route": "no_such_field"})
    with pytest.raises(MappingError, match=f"^{REQUESTS}: "):
        ingest.ingest(con, [REQUESTS], options=options)


def test_store_ingest_accepts_a_single_path_and_option_keywords(tmp_path):
    from attrib import api

    with api.open(tmp_path / "s.duckdb") as s:
        result = s.ingest(requests=str(REQUESTS), queries=STATEMENTS, keep_raw=True)
        assert [f.status for f in result.files] == ["ingested", "ingested"]
        assert s.con.execute("SELECT count(raw_sql) FROM statements").fetchone()[0] == 9
        assert s.coverage().summary["value"][0] == 9


def test_remove_stale_staging_deletes_folders_of_dead_processes_only(tmp_path):
    import os
    import subprocess
    import sys

    dead = subprocess.run(
        [sys.executable, "-c", "import os; print(os.getpid())"],
        capture_output=True,
        text=True,
        check=True,
    )
    dead_pid = int(dead.stdout)
    stale = tmp_path / f"{ingest.STAGE_PREFIX}{dead_pid}-abc"
    live = tmp_path / f"{ingest.STAGE_PREFIX}{os.getpid()}-def"
    other = tmp_path / "attrib-ingest-notapid-x"
    for folder in (stale, live, other):
        folder.mkdir()
        (folder / "000000.parquet").write_bytes(b"x")
    assert ingest.remove_stale_staging(str(tmp_path)) == 1
    assert not stale.exists() and live.exists() and other.exists()


def test_ingest_leaves_no_staging_folder_behind(con, tmp_path, monkeypatch):
    import tempfile

    monkeypatch.setattr(tempfile, "tempdir", str(tmp_path))
    staged = []
    write = ingest.pq.write_table

    def spy(table, where):
        staged.append(where)
        write(table, where)

    monkeypatch.setattr(ingest.pq, "write_table", spy)
    ingest.ingest(con, [REQUESTS], [STATEMENTS])
    assert staged and all(str(p).startswith(str(tmp_path)) for p in staged)
    assert not list(tmp_path.glob(f"{ingest.STAGE_PREFIX}*"))
