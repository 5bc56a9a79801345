"""`attrib ingest`, `attrib coverage`, `attrib fingerprint`: exit codes and one-line messages.

Most tests call attrib.cli.main in-process; one runs the real `python -m attrib` and the lock test
runs two processes.
"""

from __future__ import annotations

import json
import os
import subprocess
import sys
import textwrap

import pytest
from click.testing import CliRunner

from attrib.cli import cli, main

from .conftest import ROOT
from .test_ingest import NAIVE, REQUESTS, STATEMENTS


@pytest.fixture(autouse=True)
def fixed_salt(monkeypatch):
    monkeypatch.setenv("ATTRIB_SALT", "00112233445566778899aabbccddeeff")


def run_main(args, capsys):
    try:
        main(args)
        code = 0
    except SystemExit as exc:
        code = exc.code
    out = capsys.readouterr()
    return code, out.out, out.err


def test_ingest_prints_a_summary_row_per_file(tmp_path, capsys):
    store = str(tmp_path / "s.duckdb")
    code, out, err = run_main(
        [
            "ingest",
            "--store",
            store,
            "--requests",
            str(REQUESTS),
            "--queries",
            str(STATEMENTS),
            "--format",
            "json",
        ],
        capsys,
    )
    assert code == 0, err
    rows = json.loads(out)
    assert [
        (r["format"], r["lines"], r["requests"], r["statements"], r["rejected"]) for r in rows
    ] == [
        ("requests-jsonl", 7, 5, 0, 2),
        ("mysql-slow", 45, 0, 9, 0),
    ]
    assert "6 statements newly linked" in err
    assert "\r" not in err  # no progress display when stderr is not a terminal


def test_ingest_again_says_already_ingested(tmp_path, capsys):
    store = str(tmp_path / "s.duckdb")
    args = ["ingest", "--store", store, "--requests", str(REQUESTS)]
    assert run_main(args, capsys)[0] == 0
    code, out, _ = run_main(args, capsys)
    assert code == 0
    assert "already ingested (same SHA-256)" in out


@pytest.mark.parametrize(
    ("args", "code", "message"),
    [
        (["--requests", "{tmp}/missing.jsonl"], 3, "Error: {tmp}/missing.jsonl: no such file"),
        (["--requests", str(NAIVE)], 3, f"Error: {NAIVE}: "),
        (["--requests", str(REQUESTS), "--tz", "Nowhere/Land"], 3, "unknown time zone"),
        (["--requests", str(REQUESTS), "--requests-format", "xml"], 3, "unknown format 'xml'"),
        (["--requests", str(REQUESTS), "--request-field", "route"], 2, "expected OURS=THEIRS"),
        (["--requests", str(REQUESTS), "--id-sources", "comment,header"], 2, "--id-sources"),
        ([], 2, "give at least one --requests or --queries"),
    ],
)
def test_ingest_errors_are_one_line_with_exit_codes(tmp_path, capsys, args, code, message):
    args = [a.replace("{tmp}", str(tmp_path)) for a in args]
    got, _out, err = run_main(["ingest", "--store", str(tmp_path / "s.duckdb"), *args], capsys)
    assert got == code
    assert message.replace("{tmp}", str(tmp_path)) in err
    assert "Traceback" not in err
    assert len(err.strip().splitlines()) == 1


def test_ingest_naive_timestamps_message_names_the_file_and_tz(tmp_path, capsys):
    _, _, err = run_main(
        ["ingest", "--store", str(tmp_path / "s.duckdb"), "--requests", str(NAIVE)], capsys
    )
    assert err.startswith(f"Error: {NAIVE}: ")
    assert "--tz" in err
    assert len(err.strip().splitlines()) == 1


def test_coverage_prints_summary_and_warnings(tmp_path, capsys):
    store = str(tmp_path / "s.duckdb")
    run_main(
        ["ingest", "--store", store, "--requests", str(REQUESTS), "--queries", str(STATEMENTS)],
        capsys,
    )
    code, out, err = run_main(["coverage", "--store", store], capsys)
    assert code == 0
    assert "statements linked to a request" in out and "missing-ids:" in out
    assert err.startswith("Warning: 16.7% of linked statements")
    code, out, _ = run_main(["coverage", "--store", store, "--format", "json"], capsys)
    payload = json.loads(out)
    assert set(payload) == {"summary", "templates", "no-id", "missing-ids", "warnings"}
    code, out, _ = run_main(
        ["coverage", "--store", store, "--format", "csv", "--section", "missing-ids"], capsys
    )
    assert out.splitlines()[0] == "request_id,statements,first_seen"


def test_coverage_missing_store_is_a_store_error(tmp_path, capsys):
    code, _, err = run_main(["coverage", "--store", str(tmp_path / "none.duckdb")], capsys)
    assert code == 4
    assert "no such store" in err


def test_fingerprint_command_prints_templates_without_literals(tmp_path):
    sql = tmp_path / "q.sql"
    sql.write_text("SELECT * FROM huts WHERE id = 7;\nSELECT * FROM huts WHERE id = 8;\n")
    result = CliRunner().invoke(cli, ["fingerprint", str(sql), "--split", "--format", "json"])
    assert result.exit_code == 0, result.output
    rows = json.loads(result.output)
    assert len(rows) == 2
    assert rows[0]["id"] == rows[1]["id"]
    assert "7" not in rows[0]["template"]
    assert set(rows[0]) == {"id", "command", "parsed", "template"}


def test_fingerprint_command_reads_standard_input_one_statement_per_line():
    result = CliRunner().invoke(
        cli, ["fingerprint", "--format", "csv"], input="SELECT 1\n\nUPDATE t SET a = 2\n"
    )
    assert result.exit_code == 0, result.output
    assert len(result.output.strip().splitlines()) == 3  # header + 2 statements


def test_real_process_missing_file_exits_3_with_one_line(tmp_path):
    proc = subprocess.run(
        [
            sys.executable,
            "-m",
            "attrib",
            "ingest",
            "--store",
            str(tmp_path / "s.duckdb"),
            "--requests",
            str(tmp_path / "nope.jsonl"),
        ],
        capture_output=True,
        text=True,
        cwd=ROOT,
        timeout=60,
    )
    assert proc.returncode == 3
    assert proc.stderr == f"Error: {tmp_path / 'nope.jsonl'}: no such file\n"


def test_second_process_on_a_held_store_gets_store_locked(tmp_path):
    store = tmp_path / "s.duckdb"
    holder = subprocess.Popen(
        [
            sys.executable,
            "-c",
            textwrap.dedent(f"""
            import sys, time
            from attrib import store
            con = store.connect({str(store)!r})
            print("ready", flush=True)
            sys.stdin.readline()
        """),
        ],
        stdin=subprocess.PIPE,
        stdout=subprocess.PIPE,
        text=True,
        cwd=ROOT,
    )
    try:
        assert holder.stdout.readline().strip() == "ready"
        proc = subprocess.run(
            [
                sys.executable,
                "-m",
                "attrib",
                "ingest",
                "--store",
                str(store),
                "--requests",
                str(REQUESTS),
            ],
            capture_output=True,
            text=True,
            cwd=ROOT,
            timeout=60,
            env={**os.environ, "ATTRIB_SALT": "00"},
        )
    finally:
        holder.stdin.close()
        holder.wait(timeout=30)
    assert proc.returncode == 4
    assert "another attrib process is using this store" in proc.stderr
    assert len(proc.stderr.strip().splitlines()) == 1
