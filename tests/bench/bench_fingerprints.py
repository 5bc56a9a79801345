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


def workload(n: int, seed: int = 7, templates: int = 400, repeat_share: float = 0.5) -> list[str]:
    """``n`` statements: Zipf-like template popularity, request ids in comments.

    ``repeat_share`` of the statements (after the first 50,000) repeat the text of an earlier one
    apart from the comment, as hot rows and parameterised ($n) statements do in real logs.
    """
    rng = random.Random(seed)
    skeletons = _templates(rng, templates)
    weights = [1.0 / (rank + 1) for rank in range(len(skeletons))]
    pool = [_fill(s, rng) for s in rng.choices(skeletons, weights, k=min(n, 50_000))]
    out = []
    for i in range(n):
        sql = pool[i % len(pool)] if i >= len(pool) else pool[i]
        if i >= len(pool) and rng.random() >= repeat_share:
            sql = _fill(rng.choices(skeletons, weights)[0], rng)
        request_id = f"{rng.getrandbits(64):016x}"
        route = rng.choice(ROUTES).replace("/", "%2F")
        out.append(f"{sql} /*request_id='{request_id}',route='{route}'*/")
    return out


def _timed(fn):
    """Run ``fn``; return its result, wall seconds and CPU seconds (this process + children)."""
    import resource

    def cpu() -> float:
        own = resource.getrusage(resource.RUSAGE_SELF)
        kids = resource.getrusage(resource.RUSAGE_CHILDREN)
        return own.ru_utime + own.ru_stime + kids.ru_utime + kids.ru_stime

    c0, t0 = cpu(), time.perf_counter()
    result = fn()
    return result, time.perf_counter() - t0, cpu() - c0


def _line(label: str, count: int, wall: float, cpu: float) -> None:
    print(
        f"{label:48s} wall {wall:7.2f} s {count / wall:>11,.0f}/s | "
        f"cpu {cpu:7.2f} s {count / cpu:>11,.0f}/s"
    )


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--statements", type=int, default=2_000_000)
    parser.add_argument("--naive-sample", type=int, default=2_000)
    parser.add_argument("--repeat-share", type=float, default=0.5)
    parser.add_argument("--dialect", default="postgres")
    args = parser.parse_args()
    n = args.statements

    print(f"load average before: {os.getloadavg()}, cpus: {os.cpu_count()}")
    t0 = time.perf_counter()
    statements = workload(n, repeat_share=args.repeat_share)
    texts = {s[: s.rfind("/*")] for s in statements}
    print(
        f"generated {n:,} statements in {time.perf_counter() - t0:.1f} s; "
        f"{len(texts):,} distinct texts once the comment is cut "
        f"({1 - len(texts) / n:.0%} repeats); mean length "
        f"{sum(map(len, statements)) / n:.0f} chars"
    )
    del texts

    from fingerprints.normalize import normalize

    def run(**kwargs):
        normalize.cache_clear()  # every run parses its distinct shapes itself
        return fingerprints.fingerprint_many(statements, dialect=args.dialect, **kwargs)

    one, one_wall, one_cpu = _timed(lambda: run(processes=2))
    _line("fingerprint_many (processes=2, forked)", n, one_wall, one_cpu)
    batch, fast, fast_cpu = _timed(lambda: run())
    _line("fingerprint_many (default: one process)", n, fast, fast_cpu)
    print(f"  {len(batch.templates)} distinct templates")
    lit, lit_wall, lit_cpu = _timed(lambda: run(with_literals=True))
    _line("fingerprint_many (with_literals=True)", n, lit_wall, lit_cpu)
    assert lit.ids == batch.ids == one.ids
    del one, lit

    import sqlglot

    from fingerprints.normalize import SQLGLOT_DIALECT

    sample = statements[: args.naive_sample]

    def naive() -> None:
        for sql in sample:
            try:
                sqlglot.parse_one(sql, read=SQLGLOT_DIALECT[args.dialect] or None)
            except Exception:  # noqa: BLE001 - a failed parse is work done too
                pass

    _, naive_wall, naive_cpu = _timed(naive)
    _line(
        f"naive sqlglot.parse_one loop ({len(sample):,} sample)", len(sample), naive_wall, naive_cpu
    )
    naive_rate = len(sample) / naive_wall
    print(f"ratio fingerprint_many / naive (wall): {n / fast / naive_rate:,.0f}x")
    print(
        f"ratio fingerprint_many / naive (cpu):  {(n / fast_cpu) / (len(sample) / naive_cpu):,.0f}x"
    )

    import duckdb

    with tempfile.TemporaryDirectory() as tmp:
        path = os.path.join(tmp, "statements.txt")
        with open(path, "w", encoding="utf-8") as fh:
            for sql in statements:
                fh.write(sql.replace("\n", " "))
                fh.write("\n")
        con = duckdb.connect()
        reader = (
            "read_csv(?, columns={'line': 'VARCHAR'}, delim='\\x01', quote='', escape='', "
            "header=false, auto_detect=false)"
        )
        rows, floor, floor_cpu = _timed(
            lambda: con.execute(
                f"SELECT count(*), sum(length(line)) FROM {reader}", [path]
            ).fetchone()
        )
        _line("duckdb read_csv, count + sum(length)", n, floor, floor_cpu)
        assert rows[0] == n
        _, floor_py, floor_py_cpu = _timed(
            lambda: con.execute(f"SELECT line FROM {reader}", [path]).fetchall()
        )
        _line("duckdb read_csv into Python strings", n, floor_py, floor_py_cpu)
    print(f"ratio fingerprint_many / bare read (wall): {fast / floor:.1f}x")
    print(f"ratio fingerprint_many / read into Python (wall): {fast / floor_py:.1f}x")
    print(f"load average after: {os.getloadavg()}")


if __name__ == "__main__":
    main()
