"""Promise 6: upgrades. The store records its schema version; an older store is migrated in one
transaction (or refused with what to do); a newer one is refused (exit 4); a failed migration leaves
the store as it was.

Future versions are simulated by appending a migration to ``attrib.store.MIGRATIONS`` for the test.
"""

from __future__ import annotations

from pathlib import Path

import duckdb
import pytest

from attrib import ingest
from attrib import store as _store
from attrib.cli import main
from attrib.errors import StoreError, StoreVersionError

ROOT = Path(__file__).resolve().parent.parent
REQUESTS = ROOT / "fixtures" / "logs" / "requests-jsonl" / "001_basic.log"


def snapshot(path: Path) -> dict[str, list[tuple]]:
    """Every table's columns and rows (sorted), read without migrating."""
    con = duckdb.connect(str(path), read_only=True)
    try:
        out = {}
        for (table,) in con.execute(
            "SELECT table_name FROM information_schema.tables ORDER BY table_name"
        ).fetchall():
            cols = con.execute(
                "SELECT column_name FROM information_schema.columns WHERE table_name = ? "
                "ORDER BY ordinal_position",
                [table],
            ).fetchall()
            rows = con.execute(f'SELECT * FROM "{table}"').fetchall()
            out[table] = [tuple(c[0] for c in cols), *sorted(rows, key=repr)]
        return out
    finally:
        con.close()


@pytest.fixture
def filled(tmp_path):
    """A current store with one ingested request log."""
    path = tmp_path / "filled.duckdb"
    con = _store.connect(path)
    ingest.ingest(con, requests=[REQUESTS])
    con.close()
    return path


def test_connect_new_store_records_the_current_schema_version(tmp_path):
    con = _store.connect(tmp_path / "new.duckdb")
    version = con.execute("SELECT value FROM meta WHERE key = 'schema_version'").fetchone()[0]
    con.close()
    assert int(version) == _store.SCHEMA_VERSION


def test_connect_version_0_store_is_migrated_to_the_current_schema(tmp_path):
    path = tmp_path / "v0.duckdb"
    duckdb.connect(str(path)).close()  # a DuckDB file without attrib tables: version 0
    con = _store.connect(path)
    tables = {
        r[0] for r in con.execute("SELECT table_name FROM information_schema.tables").fetchall()
    }
    assert _store.schema_version(con) == _store.SCHEMA_VERSION
    con.close()
    assert {"meta", "sources", "requests", "statements", "templates", "links"} <= tables


def test_connect_meta_saying_version_0_with_tables_is_refused_and_left_unchanged(filled):
    con = duckdb.connect(str(filled))
    con.execute("UPDATE meta SET value = '0' WHERE key = 'schema_version'")
    con.close()
    before = snapshot(filled)
    with pytest.raises(StoreError, match="cannot create or upgrade the store"):
        _store.connect(filled)
    assert snapshot(filled) == before


def test_connect_newer_store_is_refused_and_cli_exits_4(filled, capsys):
    con = duckdb.connect(str(filled))
    con.execute(
        "UPDATE meta SET value = ? WHERE key = 'schema_version'", [str(_store.SCHEMA_VERSION + 1)]
    )
    con.close()
    before = snapshot(filled)
    with pytest.raises(StoreVersionError, match="upgrade attrib"):
        _store.connect(filled)
    with pytest.raises(SystemExit) as exit_info:
        main(["routes", "--store", str(filled)])
    err = capsys.readouterr().err
    assert exit_info.value.code == 4
    assert err.startswith("Error: ") and "upgrade attrib" in err and len(err.splitlines()) == 1
    assert snapshot(filled) == before


def _future(monkeypatch, step) -> None:
    """Pretend this attrib knows one more schema version, reached by ``step``."""
    version = _store.SCHEMA_VERSION + 1
    monkeypatch.setattr(_store, "SCHEMA_VERSION", version)
    monkeypatch.setattr(_store, "MIGRATIONS", [*_store.MIGRATIONS, (version, "test", step)])


def test_connect_older_store_migrates_in_one_transaction_keeping_rows(filled, monkeypatch):
    before = snapshot(filled)

    def add_column(con):
        con.execute("ALTER TABLE requests ADD COLUMN user_agent VARCHAR")

    _future(monkeypatch, add_column)
    con = _store.connect(filled)
    assert _store.schema_version(con) == _store.SCHEMA_VERSION
    con.close()
    after = snapshot(filled)
    assert after["requests"][0] == (*before["requests"][0], "user_agent")
    assert [r[:-1] for r in after["requests"][1:]] == before["requests"][1:]
    assert after["statements"] == before["statements"]


def test_connect_failed_migration_leaves_the_store_unchanged(filled, monkeypatch):
    before = snapshot(filled)

    def half_done(con):
        con.execute("ALTER TABLE requests ADD COLUMN user_agent VARCHAR")
        con.execute("DELETE FROM requests")
        raise RuntimeError("migration bug")

    _future(monkeypatch, half_done)
    with pytest.raises(RuntimeError, match="migration bug"):
        _store.connect(filled)
    monkeypatch.undo()
    assert snapshot(filled) == before
    con = _store.connect(filled)  # the current attrib still opens it
    assert _store.schema_version(con) == _store.SCHEMA_VERSION
    con.close()


def test_connect_read_only_older_store_says_what_to_do(filled, monkeypatch):
    _future(monkeypatch, lambda con: None)
    with pytest.raises(StoreError, match="run any ingest on it first"):
        _store.connect(filled, read_only=True)
