"""The store: schema versions, migrations, refusal of newer stores, locking."""

from __future__ import annotations

import subprocess
import sys

import duckdb
import pytest

from attrib import store
from attrib.errors import StoreError, StoreLockedError, StoreVersionError


def test_connect_new_store_records_schema_version_and_salt(tmp_path):
    con = store.connect(tmp_path / "s.duckdb")
    assert store.schema_version(con) == store.SCHEMA_VERSION
    assert len(store.salt(con)) == 16
    con.close()


def test_connect_twice_keeps_the_same_salt(tmp_path):
    path = tmp_path / "s.duckdb"
    con = store.connect(path)
    first = store.salt(con)
    con.close()
    con = store.connect(path)
    assert store.salt(con) == first
    con.close()


def test_connect_store_from_newer_version_refuses_clearly(tmp_path):
    path = tmp_path / "s.duckdb"
    con = store.connect(path)
    con.execute("UPDATE meta SET value = '999' WHERE key = 'schema_version'")
    con.close()
    with pytest.raises(StoreVersionError, match="schema version 999.*upgrade attrib"):
        store.connect(path)


def test_connect_read_only_missing_store_names_the_file(tmp_path):
    with pytest.raises(StoreError, match="no such store"):
        store.connect(tmp_path / "nope.duckdb", read_only=True)


def test_connect_non_duckdb_file_is_a_store_error(tmp_path):
    path = tmp_path / "s.duckdb"
    path.write_bytes(b"\x89PNG\r\n\x1a\n" + b"\0" * 4096)
    with pytest.raises(StoreError):
        store.connect(path)


def test_connect_store_held_by_another_process_reports_lock(tmp_path):
    path = tmp_path / "s.duckdb"
    store.connect(path).close()
    holder = subprocess.Popen(
        [
            sys.executable,
            "-c",
            "import duckdb, sys, time; c = duckdb.connect(sys.argv[1]); print('ready', flush=True); "
            "time.sleep(30)",
            str(path),
        ],
        stdout=subprocess.PIPE,
        text=True,
    )
    try:
        assert holder.stdout.readline().strip() == "ready"
        with pytest.raises(StoreLockedError, match="another attrib process"):
            store.connect(path)
    finally:
        holder.kill()
        holder.wait()


def test_migrations_run_in_one_transaction_so_a_failure_leaves_no_tables(tmp_path, monkeypatch):
    def broken(con: duckdb.DuckDBPyConnection) -> None:
        con.execute("CREATE TABLE half_done (x INTEGER)")
        raise RuntimeError("boom")

    monkeypatch.setattr(store, "MIGRATIONS", [*store.MIGRATIONS, (2, "broken", broken)])
    monkeypatch.setattr(store, "SCHEMA_VERSION", 2)
    path = tmp_path / "s.duckdb"
    with pytest.raises(RuntimeError):
        store.connect(path)
    con = duckdb.connect(str(path))
    tables = {
        r[0] for r in con.execute("SELECT table_name FROM information_schema.tables").fetchall()
    }
    assert tables == set()
    con.close()
