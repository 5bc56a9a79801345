"""Throughput of ``fingerprints.fingerprint_many`` against two baselines measured in the same run.

Not part of the test run. Usage::

    /work/venv/bin/python tests/bench/bench_fingerprints.py --statements 2000000

Prints statements/s of ``fingerprint_many``, of a naive loop calling ``sqlglot.parse_one`` on every
statement (timed on a sample), and the time DuckDB needs merely to read the same statements as lines
from a file (the floor), with the ratios between them. The workload is synthetic (a made-up
mountain-hut booking application): a few hundred templates, IN lists and multi-row INSERTs of
varying length, sqlcommenter comments carrying request ids, and literals of every kind.
"""

from __future__ import annotations

import argparse
import os
import random
import string
import sys
import tempfile
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parents[2]))

import fingerprints  # noqa: E402

TABLES = ["huts", "bookings", "guests", "rooms", "trails", "reviews", "payments_ledger", "meals"]
COLUMNS = ["id", "hut_id", "guest_id", "name", "created_at", "status", "price", "nights", "note"]
ROUTES = ["/huts", "/huts/{id}", "/bookings", "/bookings/{id}/pay", "/trails/{id}", "/me"]


def _string(rng: random.Random, kind: int | None = None) -> str:
    kind = rng.randrange(6) if kind is None else kind
    word = "".join(rng.choices(string.ascii_letters + " ", k=rng.randrange(3, 14)))
    if kind == 0:
        return "'" + word.replace("'", "''") + "'"
    if kind == 1:
        return "'O''Brien " + word + "'"
    if kind == 2:
        return "E'line\\n" + word + "\\''"
    if kind == 3:
        return "$$" + word + "$$"
    if kind == 4:
        return '\'{"k": ' + str(rng.randrange(100)) + "}'::jsonb"
    return "'2026-0" + str(rng.randrange(1, 10)) + "-1" + str(rng.randrange(10)) + "'"


def _number(rng: random.Random, kind: int | None = None) -> str:
    kind = rng.randrange(5) if kind is None else kind
    if kind == 0:
        return str(rng.randrange(1, 10_000_000))
    if kind == 1:
        return "-" + str(rng.randrange(1, 1000))
    if kind == 2:
        return f"{rng.random() * 1000:.2f}"
    if kind == 3:
        return f"{rng.random():.3e}"
    return str(rng.randrange(0, 100))


def _value(rng: random.Random, code: int) -> str:
    """A value of one kind; each hole of a skeleton keeps its kind, as application code does."""
    if code < 5:
        return _number(rng, code)
    if code < 11:
        return _string(rng, code - 5)
    if code == 11:
        return rng.choice(["TRUE", "FALSE"])
    return rng.choice(["NULL", str(rng.randrange(100))])


def _typed_holes(skeleton: str, rng: random.Random) -> str:
    """Give every value hole a fixed kind: {v} -> {v:K}, {rows:W} -> {rows:W:K1,K2,...}."""
    while "{v}" in skeleton:
        skeleton = skeleton.replace("{v}", "{v:" + str(rng.randrange(13)) + "}", 1)
    start = skeleton.find("{rows:")
    if start >= 0:
        end = skeleton.index("}", start)
        width = int(skeleton[start + 6 : end])
        kinds = ",".join(str(rng.randrange(13)) for _ in range(width))
        skeleton = skeleton[:start] + f"{{rows:{width}:{kinds}}}" + skeleton[end + 1 :]
    return skeleton


def _templates(rng: random.Random, count: int) -> list[str]:
    """Statement skeletons with ``{v}`` (one value), ``{in}`` (IN list) and ``{rows}`` holes."""
    out = []
    for i in range(count):
        table = TABLES[i % len(TABLES)]
        cols = rng.sample(COLUMNS, rng.randrange(2, 5))
        kind = i % 10
        where = " AND ".join(f"{c} {rng.choice(['=', '>', '<>', '<='])} {{v}}" for c in cols[:2])
        if kind < 4:
            extra = rng.choice(
                ["", " ORDER BY created_at DESC LIMIT {n}", " ORDER BY 1", " LIMIT {n}"]
            )
            out.append(f"SELECT {', '.join(cols)} FROM {table} WHERE {where}{extra}")
        elif kind == 4:
            out.append(f"SELECT {', '.join(cols)} FROM {table} WHERE {cols[0]} IN ({{in}})")
        elif kind == 5:
            other = TABLES[(i + 3) % len(TABLES)]
            out.append(
                f"SELECT t.{cols[0]}, o.id FROM {table} t JOIN {other} o ON o.id = t.{cols[1]} "
                f"WHERE t.{cols[0]} = {{v}} AND o.status NOT IN ({{in}})"
            )
        elif kind == 6:
            out.append(f"INSERT INTO {table} ({', '.join(cols)}) VALUES {{rows:{len(cols)}}}")
        elif kind == 7:
            out.append(f"UPDATE {table} SET {cols[0]} = {{v}}, {cols[1]} = {{v}} WHERE id = {{v}}")
        elif kind == 8:
            out.append(f"DELETE FROM {table} WHERE {where}")
        else:
            out.append(
                f"WITH recent AS (SELECT {cols[0]}, count(*) AS n FROM {table} WHERE created_at > {{v}} "
                f"GROUP BY {cols[0]}) SELECT * FROM recent WHERE n >= {{v}} ORDER BY n DESC"
            )
    out = [_typed_holes(s, rng) for s in out]
    return out + ["BEGIN", "COMMIT", "ROLLBACK", "SAVEPOINT sp_{sp}", "RELEASE SAVEPOINT sp_{sp}"]


def _fill(skeleton: str, rng: random.Random) -> str:
    parts = []
    pos = 0
    while True:
        start = skeleton.find("{", pos)
        if start < 0:
            parts.append(skeleton[pos:])
            break
        end = skeleton.index("}", start)
        parts.append(skeleton[pos:start])
        hole = skeleton[start + 1 : end]
        if hole.startswith("v:"):
            parts.append(_value(rng, int(hole[2:])))
        elif hole == "n":
            parts.append(str(rng.randrange(1, 200)))
        elif hole == "in":
            parts.append(", ".join(_number(rng) for _ in range(rng.randrange(1, 30))))
        elif hole == "sp":
            parts.append(str(rng.randrange(1_000_000)))
        else:
            kinds = [int(k) for k in hole.split(":")[2].split(",")]
            rows = [
                "(" + ", ".join(_value(rng, k) for k in kinds) + ")"
                for _ in range(rng.choice([1, 1, 2, 3, 5, 10]))
            ]
            parts.append(", ".join(rows))
        pos = end + 1
    return "".join(parts)


def workload(n: int, seed: int = 7, templates: int = 400) -> list[str]:
    """``n`` realistic statements: Zipf-like template popularity, request ids in comments."""
    rng = random.Random(seed)
    skeletons = _templates(rng, templates)
    weights = [1.0 / (rank + 1) for rank in range(len(skeletons))]
    pool = [_fill(s, rng) for s in rng.choices(skeletons, weights, k=min(n, 50_000))]
    out = []
    for i in range(n):
        sql = pool[i % len(pool)] if i >= len(pool) else pool[i]
        if i >= len(pool) and rng.random() < 0.5:
            sql = _fill(rng.choices(skeletons, weights)[0], rng)
        request_id = f"{rng.getrandbits(64):016x}"
        route = rng.choice(ROUTES).replace("/", "%2F")
        out.append(f"{sql} /*request_id='{request_id}',route='{route}'*/")
    return out


def _rate(count: int, seconds: float) -> str:
    return f"{count / seconds:,.0f} statements/s"


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--statements", type=int, default=2_000_000)
    parser.add_argument("--naive-sample", type=int, default=2_000)
    parser.add_argument("--dialect", default="postgres")
    args = parser.parse_args()

    t0 = time.perf_counter()
    statements = workload(args.statements)
    print(f"generated {len(statements):,} statements in {time.perf_counter() - t0:.1f} s")

    t0 = time.perf_counter()
    batch = fingerprints.fingerprint_many(statements, dialect=args.dialect)
    fast = time.perf_counter() - t0
    print(
        f"fingerprint_many: {fast:.2f} s, {_rate(len(statements), fast)}, "
        f"{len(batch.templates)} distinct templates"
    )

    t0 = time.perf_counter()
    batch_lit = fingerprints.fingerprint_many(statements, dialect=args.dialect, with_literals=True)
    fast_lit = time.perf_counter() - t0
    print(
        f"fingerprint_many(with_literals=True): {fast_lit:.2f} s, {_rate(len(statements), fast_lit)}"
    )
    assert batch_lit.ids == batch.ids

    import sqlglot

    sample = statements[: args.naive_sample]
    t0 = time.perf_counter()
    for sql in sample:
        try:
            sqlglot.parse_one(sql, read=args.dialect)
        except Exception:  # noqa: BLE001 - the naive loop just counts failures as work done
            pass
    naive = time.perf_counter() - t0
    naive_rate = len(sample) / naive
    print(f"naive sqlglot.parse_one loop ({len(sample):,} sample): {naive_rate:,.0f} statements/s")
    print(f"ratio fingerprint_many / naive: {len(statements) / fast / naive_rate:,.0f}x")

    import duckdb

    with tempfile.TemporaryDirectory() as tmp:
        path = os.path.join(tmp, "statements.txt")
        with open(path, "w", encoding="utf-8") as fh:
            for sql in statements:
                fh.write(sql.replace("\n", " "))
                fh.write("\n")
        con = duckdb.connect()
        t0 = time.perf_counter()
        rows = con.execute(
            "SELECT count(*), sum(length(line)) FROM read_csv(?, columns={'line': 'VARCHAR'}, "
            "delim='\\x01', quote='', escape='', header=false, auto_detect=false)",
            [path],
        ).fetchone()
        floor = time.perf_counter() - t0
        t0 = time.perf_counter()
        lines = con.execute(
            "SELECT line FROM read_csv(?, columns={'line': 'VARCHAR'}, delim='\\x01', quote='', "
            "escape='', header=false, auto_detect=false)",
            [path],
        ).fetchall()
        floor_py = time.perf_counter() - t0
        del lines
    print(
        f"duckdb read_csv of the same lines (count + sum(length)): {floor:.2f} s, rows={rows[0]:,}"
    )
    print(f"duckdb read_csv into Python strings (fetchall): {floor_py:.2f} s")
    print(
        f"ratio fingerprint_many / bare read: {fast / floor:.1f}x (vs fetchall: {fast / floor_py:.1f}x)"
    )


if __name__ == "__main__":
    main()
