"""Benchmark of `attrib ingest` on a generated PostgreSQL stderr log and JSON-lines request log.

Not part of the test run. Prints figures only; targets are stated, never asserted:
>= 250,000 statements/s end to end, peak RSS < 2 GB, memory not growing with input.

    python tests/bench/bench_ingest.py --statements 1000000 --requests 50000
    python tests/bench/bench_ingest.py                    # 5,000,000 statements, 250,000 requests
    python tests/bench/bench_ingest.py --statements 200000 --profile   # cProfile of one ingest

The logs (Debian log_line_prefix '%m [%p] %q%u@%d ', log_min_duration_statement = 0 lines, one
sqlcommenter request id per statement, ~10% multi-line statements, transaction control without
comment) are invented data of a hut-booking service, written once per size into --workdir and reused.
Each ingest runs in a child process so that its peak RSS (ru_maxrss) can be read alone. The baseline
("floor") is DuckDB reading the same statement log as lines and counting them, in the same run.
"""

from __future__ import annotations

import argparse
import json
import os
import random
import subprocess
import sys
import textwrap
import time
from datetime import UTC, datetime
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]
BASE = datetime(2026, 3, 2, 9, 0, 0, tzinfo=UTC).timestamp()
PER_REQUEST_GAP_MS = 40.0  # requests start every 40 ms (25/s): invented load
REGIONS = ["north", "south", "lakes", "ridge", "valley"]
ROUTES = [
    ("GET", "/huts/{id}", "/huts/{n}"),
    ("GET", "/huts", "/huts"),
    ("POST", "/bookings", "/bookings"),
    ("GET", "/guests/{id}/bookings", "/guests/{n}/bookings"),
    ("GET", "/regions/{name}/report", "/regions/{r}/report"),
]


def _statement(rng: random.Random, k: int) -> str:
    """One SQL text of the invented workload (about 10% multi-line)."""
    n = rng.randrange(1, 50_000)
    choice = k % 10
    if choice == 0:
        return (
            "SELECT h.name, count(*) AS nights\n\tFROM huts h JOIN bookings b ON b.hut_id = h.id"
            f"\n\tWHERE h.region = '{rng.choice(REGIONS)}'\n\tGROUP BY h.name"
        )
    if choice in (1, 2, 3):
        return f"SELECT id, name, beds FROM huts WHERE id = {n}"
    if choice == 4:
        return (
            f"SELECT * FROM bookings WHERE guest_id = {n} AND night >= '2026-03-{1 + n % 28:02d}'"
        )
    if choice == 5:
        return f"UPDATE beds SET taken = true WHERE hut_id = {n} AND bed_no = {n % 12}"
    if choice == 6:
        return f"INSERT INTO audit (guest_id, action, at) VALUES ({n}, 'view', now())"
    if choice == 7:
        ids = ", ".join(str(rng.randrange(1, 9999)) for _ in range(1 + n % 6))
        return f"SELECT b.id, b.bed_no FROM beds b WHERE b.hut_id IN ({ids})"
    if choice == 8:
        return f"SELECT price FROM rates WHERE hut_id = {n} AND season = 'winter' LIMIT 1"
    return f"SELECT count(*) FROM reviews WHERE hut_id = {n} AND stars >= {1 + n % 5}"


def generate(workdir: Path, statements: int, requests: int, seed: int = 7) -> tuple[Path, Path]:
    """Write (or reuse) the statement log and request log for this size."""
    workdir.mkdir(parents=True, exist_ok=True)
    pg = workdir / f"pg-{statements}.log"
    web = workdir / f"web-{requests}-{statements}.jsonl"
    if pg.exists() and web.exists():
        return pg, web
    part_pg, part_web = pg.with_suffix(".part"), web.with_suffix(".part")  # renamed when complete
    rng = random.Random(seed)
    per_request = max(1, statements // requests)
    stamp_cache: dict[int, str] = {}

    def stamp(t: float) -> str:
        sec = int(t)
        text = stamp_cache.get(sec)
        if text is None:
            stamp_cache.clear()
            text = datetime.fromtimestamp(sec, UTC).strftime("%Y-%m-%d %H:%M:%S")
            stamp_cache[sec] = text
        return f"{text}.{int((t - sec) * 1000):03d} UTC"

    written = 0
    with open(part_pg, "w") as out_pg, open(part_web, "w") as out_web:
        buf: list[str] = []
        for i in range(requests):
            start = BASE + i * PER_REQUEST_GAP_MS / 1000
            count = per_request if i < requests - 1 else statements - written
            pid = 20_000 + i % 24
            rid = f"req-{i:08d}"
            method, route, path = ROUTES[i % len(ROUTES)]
            elapsed = 5.0 + count * 0.6 + rng.random() * 10
            comment = f" /*request_id='{rid}',route='{route.replace('/', '%2F')}'*/"
            for k in range(count):
                t0 = start + (1.0 + k * 0.55) / 1000
                dur = 0.05 + rng.random() * 0.4
                if k == 0:
                    sql, tail = "BEGIN", ""
                elif k == count - 1:
                    sql, tail = "COMMIT", ""
                else:
                    sql, tail = _statement(rng, k), comment
                buf.append(
                    f"{stamp(t0 + dur / 1000)} [{pid}] hut_app@huts LOG:  duration: {dur:.3f} ms"
                    f"  statement: {sql}{tail}\n"
                )
            written += count
            if i % 5_000 == 0 and i:  # a checkpoint line now and then (skipped, not a statement)
                buf.append(f"{stamp(start)} [77] LOG:  checkpoint starting: time\n")
            end = start + elapsed / 1000
            out_web.write(
                json.dumps(
                    {
                        "timestamp": datetime.fromtimestamp(end, UTC).isoformat(
                            timespec="microseconds"
                        ),
                        "request_id": rid,
                        "method": method,
                        "route": route,
                        "path": path.format(n=i % 997, r=REGIONS[i % 5]),
                        "status": 200,
                        "elapsed_ms": round(elapsed, 3),
                    }
                )
                + "\n"
            )
            if len(buf) >= 50_000:
                out_pg.writelines(buf)
                buf.clear()
        out_pg.writelines(buf)
    part_pg.rename(pg)
    part_web.rename(web)
    return pg, web


_CHILD = """
import json, os, sys, time
from attrib import store as _store
from attrib.ingest import IngestOptions, ingest
opts = json.loads(sys.argv[1])
con = _store.connect(opts["store"])
started = time.perf_counter()
cpu = time.process_time()
options = IngestOptions(workers=opts["workers"], chunk_size=opts["chunk"])
if opts["profile"]:
    import cProfile, pstats
    prof = cProfile.Profile()
    prof.enable()
result = ingest(con, opts["requests"], opts["queries"], options)
seconds = time.perf_counter() - started
cpu = time.process_time() - cpu
if opts["profile"]:
    prof.disable()
    pstats.Stats(prof, stream=sys.stderr).sort_stats("cumulative").print_stats(35)
    pstats.Stats(prof, stream=sys.stderr).sort_stats("tottime").print_stats(25)
con.close()
import resource
rss_self = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
children = resource.getrusage(resource.RUSAGE_CHILDREN)
rss_workers = children.ru_maxrss / 1024
print(json.dumps({"seconds": seconds, "cpu": cpu,
                  "worker_cpu": children.ru_utime + children.ru_stime, "files": [f.__dict__ for f in result.files],
                  "links": result.links_added, "rss_mib": rss_self, "worker_rss_mib": rss_workers}))
"""


def run_ingest(
    store: Path, web: Path | None, pg: Path | None, workers: int, chunk: int, profile: bool
) -> dict:
    """Ingest in a child process; return its figures and its peak RSS in MiB."""
    for suffix in ("", ".wal"):
        Path(f"{store}{suffix}").unlink(missing_ok=True)
    opts = {
        "store": str(store),
        "requests": [str(web)] if web else [],
        "queries": [str(pg)] if pg else [],
        "workers": workers,
        "chunk": chunk,
        "profile": profile,
    }
    wall = time.perf_counter()
    proc = subprocess.run(
        [sys.executable, "-c", _CHILD, json.dumps(opts)],
        cwd=ROOT,
        capture_output=True,
        text=True,
        env={**os.environ, "ATTRIB_SALT": "0123456789abcdef0123456789abcdef"},
    )
    wall = time.perf_counter() - wall
    if proc.returncode != 0:
        sys.exit(f"ingest failed:\n{proc.stderr[-4000:]}")
    if profile:
        print(proc.stderr)
    # the child reports its own ru_maxrss (KiB on Linux) and that of its pool workers, if any
    figures = json.loads(proc.stdout.strip().splitlines()[-1])
    figures["wall"] = wall
    figures["store_mib"] = store.stat().st_size / 2**20
    return figures


def floor_seconds(pg: Path) -> tuple[float, int]:
    """DuckDB reading the statement log as lines (one VARCHAR column) and counting them."""
    import duckdb

    con = duckdb.connect()
    t = time.perf_counter()
    n = con.execute(
        "SELECT count(*) FROM read_csv(?, columns = {'line': 'VARCHAR'}, delim = '\\x01', "
        "quote = '', escape = '', header = false, auto_detect = false)",
        [str(pg)],
    ).fetchone()[0]
    return time.perf_counter() - t, n


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--statements", type=int, default=5_000_000)
    parser.add_argument("--requests", type=int, default=250_000)
    parser.add_argument("--workers", type=int, default=0, help="ingest fingerprint processes")
    parser.add_argument("--chunk", type=int, default=50_000)
    parser.add_argument("--workdir", type=Path, default=Path("/tmp/attrib-bench-ingest"))
    parser.add_argument("--profile", action="store_true", help="cProfile one ingest, no more")
    parser.add_argument(
        "--no-compare", action="store_true", help="skip the run at 1/5 of the size (memory check)"
    )
    args = parser.parse_args()

    t = time.perf_counter()
    pg, web = generate(args.workdir, args.statements, args.requests)
    print(
        f"logs: {pg} ({pg.stat().st_size / 2**20:,.0f} MiB), {web} "
        f"({web.stat().st_size / 2**20:,.0f} MiB), ready in {time.perf_counter() - t:.1f} s"
    )
    store = args.workdir / "bench.duckdb"
    if args.profile:
        run_ingest(store, None, pg, args.workers, args.chunk, profile=True)
        return

    floor, lines = floor_seconds(pg)
    big = run_ingest(store, web, pg, args.workers, args.chunk, profile=False)
    files = {f["format"]: f for f in big["files"]}
    stmts = files["pg-stderr"]["statements"]
    q_seconds = files["pg-stderr"]["seconds"]
    print(
        textwrap.dedent(f"""
        statement log: {lines:,} lines, {stmts:,} statements
        floor (DuckDB reads the lines and counts them): {floor:.1f} s
        statement file ingest: {q_seconds:.1f} s = {stmts / q_seconds:,.0f} statements/s
            ({q_seconds / floor:.1f} x the floor; target >= 250,000 statements/s)
        request file ingest: {files["requests-jsonl"]["seconds"]:.1f} s for
            {files["requests-jsonl"]["requests"]:,} requests
        whole ingest incl. linking: {big["seconds"]:.1f} s
            = {stmts / big["seconds"]:,.0f} statements/s end to end; {big["links"]:,} links
        CPU time of the ingest process: {big["cpu"]:.1f} s
            = {stmts / big["cpu"]:,.0f} statements per CPU-second; pool workers: {big["worker_cpu"]:.1f} s
        load average when done: {os.getloadavg()[0]:.1f} on {os.cpu_count()} CPUs
            (other work on the machine stretches wall-clock figures, not CPU figures)
        child process wall time: {big["wall"]:.1f} s
        peak RSS: {big["rss_mib"]:,.0f} MiB (target < 2048 MiB); largest pool worker:
            {big["worker_rss_mib"]:,.0f} MiB
        store on disk: {big["store_mib"]:,.0f} MiB
    """).strip()
    )
    if args.no_compare:
        return
    small_n, small_r = args.statements // 5, max(1, args.requests // 5)
    pg_s, web_s = generate(args.workdir, small_n, small_r)
    small = run_ingest(store, web_s, pg_s, args.workers, args.chunk, profile=False)
    print(
        textwrap.dedent(f"""
        at 1/5 of the size ({small_n:,} statements): {small["seconds"]:.1f} s,
            {small_n / small["seconds"]:,.0f} statements/s, peak RSS {small["rss_mib"]:,.0f} MiB
        memory ratio full size / one fifth: {big["rss_mib"] / small["rss_mib"]:.2f}
            (1.0 = memory does not grow with input; 5.0 = grows in proportion)
    """).strip()
    )


if __name__ == "__main__":
    main()
