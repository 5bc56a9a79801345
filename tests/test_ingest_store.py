"""Store schema changes made for ingest: migration from version 1 keeps rows and drops the keys."""

from __future__ import annotations

import duckdb
import pytest

from attrib import store


def make_v1_store(path):
    con = duckdb.connect(str(path))
    con.execute(store._V1)
    con.execute("INSERT INTO meta VALUES ('salt', '00ff'), ('schema_version', '1')")
    con.execute(
        "INSERT INTO requests VALUES (1, 3, 0, 'r1', NULL, TIMESTAMP '2024-03-05 14:00:00', 5.0, "
        "'GET', '/huts', '/huts', 200)"
    )
    con.execute(
        "INSERT INTO statements VALUES (2, 7, 0, TIMESTAMP '2024-03-05 14:00:00.001', 1.0, 1, "
        "'t1', 42, 'r1', NULL, NULL, NULL, NULL, NULL, NULL)"
    )
    con.execute("INSERT INTO links VALUES (2, 7, 0, 1, 3, 0)")
    con.close()


def test_connect_migrates_version_1_keeping_rows_and_dropping_row_keys(tmp_path):
    path = tmp_path / "old.duckdb"
    make_v1_store(path)
    con = store.connect(path)
    assert store.schema_version(con) == store.SCHEMA_VERSION == 2
    assert con.execute("SELECT request_id, route FROM requests").fetchall() == [("r1", "/huts")]
    assert con.execute("SELECT param_hash, request_id FROM statements").fetchall() == [(42, "r1")]
    assert con.execute("SELECT * FROM links").fetchall() == [(2, 7, 0, 1, 3, 0)]
    keys = con.execute(
        "SELECT table_name FROM information_schema.table_constraints "
        "WHERE constraint_type = 'PRIMARY KEY' ORDER BY 1"
    ).fetchall()
    assert keys == [("meta",), ("skipped",), ("sources",), ("templates",)]
    assert store.salt(con) == bytes.fromhex("00ff")
    con.close()


def test_connect_migrated_store_keeps_not_null_columns(tmp_path):
    path = tmp_path / "old.duckdb"
    make_v1_store(path)
    con = store.connect(path)
    nullable = dict(
        con.execute(
            "SELECT column_name, is_nullable FROM information_schema.columns "
            "WHERE table_name = 'statements'"
        ).fetchall()
    )
    assert nullable["template_id"] == "NO" and nullable["started_at"] == "NO"
    assert nullable["raw_sql"] == "YES"
    con.close()


def test_connect_read_only_refuses_a_store_that_needs_migrating(tmp_path):
    path = tmp_path / "old.duckdb"
    make_v1_store(path)
    with pytest.raises(store.StoreError, match="needs upgrading"):
        store.connect(path, read_only=True)
