"""Shared fixtures: an in-memory store and paths to the fixture files."""

from __future__ import annotations

from pathlib import Path

import pytest

from attrib import store as _store

ROOT = Path(__file__).resolve().parent.parent
FIXTURES = ROOT / "fixtures"


@pytest.fixture
def con():
    """A fresh in-memory store with the current schema."""
    connection = _store.connect(":memory:")
    yield connection
    connection.close()


@pytest.fixture
def fixtures_dir() -> Path:
    return FIXTURES
