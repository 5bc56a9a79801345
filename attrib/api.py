"""The Python API: a Store object whose methods return pandas DataFrames.

Every CLI command calls one method here; the logic lives in the stage modules
(ingest, join, coverage, attribute, nplus1, ...).
"""

from __future__ import annotations

import os
from typing import TYPE_CHECKING, Any

import duckdb

from attrib import store as _store

if TYPE_CHECKING:  # analysis modules are imported when first used
    from collections.abc import Iterable
    from datetime import datetime

    import pandas as pd
    from matplotlib.figure import Figure

    from attrib.attribute import RouteDetail
    from attrib.coverage import Coverage
    from attrib.ingest import IngestOptions, IngestResult, ProgressCallback


class Store:
    """An attrib store (a DuckDB file) and the analyses over it.

    Args:
        path: the store file (created when missing unless ``read_only``), or ``":memory:"``.
        read_only: open without writing, so several readers can share the file.
    """

    def __init__(self, path: str | os.PathLike[str], *, read_only: bool = False) -> None:
        self.path = str(path)
        self.con: duckdb.DuckDBPyConnection = _store.connect(path, read_only=read_only)

    @property
    def schema_version(self) -> int:
        """The schema version recorded in the store."""
        return _store.schema_version(self.con)

    def close(self) -> None:
        """Close the store."""
        self.con.close()

    def __enter__(self) -> Store:
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()

    # Analyses are added below, one method per CLI command.

    def chart(self, kind: str, **options: Any) -> Figure:
        """Draw one chart kind (see :data:`attrib.charts.KINDS`); see :func:`attrib.charts.draw`."""
        from attrib import charts

        return charts.draw(self, kind, **options)

    def report_html(self, *, top: int = 20, progress: Any = None, **sections: Any) -> str:
        """The self-contained HTML report as a string; see :mod:`attrib.report`."""
        from attrib import report

        return report.render_html(report.collect(self, top=top, progress=progress, **sections))

    def ingest(
        self,
        requests: Iterable[str | os.PathLike[str]] = (),
        queries: Iterable[str | os.PathLike[str]] = (),
        options: IngestOptions | None = None,
        progress: ProgressCallback | None = None,
        **settings: Any,
    ) -> IngestResult:
        """Read logs into the store and link statements; see :func:`attrib.ingest.ingest`.

        ``settings`` are :class:`attrib.ingest.IngestOptions` fields (e.g. ``tz="UTC"``), used when
        ``options`` is not given.
        """
        from attrib import ingest

        options = options or ingest.IngestOptions(**settings)
        return ingest.ingest(self.con, requests, queries, options, progress)

    def coverage(self, top: int = 10) -> Coverage:
        """Linking and clock figures; see :func:`attrib.coverage.coverage`."""
        from attrib import coverage

        return coverage.coverage(self.con, top=top)

    def routes(
        self,
        *,
        since: datetime | None = None,
        until: datetime | None = None,
        route: str | None = None,
        sort: str = "db_share",
        top: int | None = None,
        reverse: bool = False,
    ) -> pd.DataFrame:
        """Routes ranked by share of database time; see :func:`attrib.attribute.routes`."""
        from attrib import attribute

        return attribute.routes(
            self.con, since=since, until=until, route=route, sort=sort, top=top, reverse=reverse
        )

    def templates(
        self,
        *,
        since: datetime | None = None,
        until: datetime | None = None,
        sort: str = "total_ms",
        top: int | None = None,
        reverse: bool = False,
    ) -> pd.DataFrame:
        """Query templates ranked by total time; see :func:`attrib.attribute.templates`."""
        from attrib import attribute

        return attribute.templates(
            self.con, since=since, until=until, sort=sort, top=top, reverse=reverse
        )

    def route(
        self,
        name: str,
        *,
        since: datetime | None = None,
        until: datetime | None = None,
        min_repeats: int = 3,
    ) -> RouteDetail:
        """One route's templates and N+1 findings; see :func:`attrib.attribute.route_detail`."""
        from attrib import attribute

        return attribute.route_detail(
            self.con, name, since=since, until=until, min_repeats=min_repeats
        )

    def nplus1(
        self,
        *,
        min_repeats: int = 3,
        since: datetime | None = None,
        until: datetime | None = None,
        route: str | None = None,
        top: int | None = None,
    ) -> pd.DataFrame:
        """N+1 loops and redundant repeats by estimated saving; see :func:`attrib.nplus1.find`."""
        from attrib import nplus1

        return nplus1.find(
            self.con, min_repeats=min_repeats, since=since, until=until, route=route, top=top
        )

    def whatif(
        self,
        scenario: Any = None,
        *,
        since: datetime | None = None,
        until: datetime | None = None,
        resamples: int = 1000,
        seed: int = 0,
        **changes: Any,
    ) -> pd.DataFrame:
        """Projected per-route figures under a scenario; see :func:`attrib.whatif.whatif`.

        ``scenario`` is an :class:`attrib.whatif.Scenario`, or give the changes as CLI-style lists:
        ``s.whatif(batch=["3f2a9c1e0b7d4a55"], faster=["9b0e77aa01c3d2f4=3x"])``.
        """
        from attrib import whatif

        scenario = scenario or whatif.Scenario.parse(**changes)
        return whatif.whatif(
            self.con, scenario, since=since, until=until, resamples=resamples, seed=seed
        )

    def compare(
        self, before: Any = None, after: Any = None, *, other: Store | None = None, **kw: Any
    ) -> Any:
        """Before/after per-route changes; see :func:`attrib.compare.compare`.

        ``other`` is the store of the "after" side (default: this store).
        """
        from attrib import compare

        after_con = other.con if other is not None else None
        return compare.compare(self.con, after_con, before=before, after=after, **kw)

    def check(
        self, budgets: Any, *, since: datetime | None = None, until: datetime | None = None
    ) -> pd.DataFrame:
        """Budget checks per route (``budgets``: a file path or limits); see :func:`attrib.budgets.check`."""
        from attrib import budgets as _budgets

        return _budgets.check(self.con, budgets, since=since, until=until)


def open(path: str | os.PathLike[str], *, read_only: bool = False) -> Store:  # noqa: A001
    """Open (or create) the store at ``path``; see :class:`Store`."""
    return Store(path, read_only=read_only)
