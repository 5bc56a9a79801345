"""Speed and memory of the demo log generator (``attrib.demo.generate``) against a baseline.

Not part of the test run. Usage::

    /work/venv/bin/python tests/bench/bench_demo.py --requests 250000

Prints statements/s of the generator (wall and CPU time), its peak memory, and the time the cheapest
possible writer needs for the same number of statement lines (one f-string per line, written in
blocks: the floor for any pure-Python generator), measured in the same run, with the ratio. The
target is 200,000 statements/s (project brief).
"""

from __future__ import annotations

import argparse
import resource
import sys
import tempfile
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parents[2]))

from attrib.demo import generate  # noqa: E402


def _baseline(n: int, path: Path) -> tuple[float, float]:
    """Write ``n`` lines shaped like statement lines with the least work; (wall s, CPU s)."""
    wall, cpu = time.perf_counter(), time.process_time()
    with open(path, "w", encoding="utf-8") as f:
        block = []
        for i in range(n):
            block.append(
                f"2026-11-30 06:00:{i % 60:02d}.{i % 1000:03d} UTC [24001] ridge@ridgeline LOG:  "
                f"duration: 0.{i % 1000:03d} ms  statement: SELECT night, party_size, status FROM "
                f"bookings WHERE bunk_id = {i} AND night BETWEEN '2026-12-05' AND '2026-12-12' "
                f"/*request_id='r-{i:06d}',route='%2Fhuts%2F%7Bid%7D%2Fbunks'*/\n"
            )
            if len(block) == 4096:
                f.write("".join(block))
                block.clear()
        f.write("".join(block))
    return time.perf_counter() - wall, time.process_time() - cpu


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--requests", type=int, default=250_000)
    parser.add_argument("--seed", type=int, default=7)
    args = parser.parse_args()
    with tempfile.TemporaryDirectory() as tmp:
        wall, cpu = time.perf_counter(), time.process_time()
        truth = generate(tmp, seed=args.seed, requests=args.requests)
        wall, cpu = time.perf_counter() - wall, time.process_time() - cpu
        peak_mb = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
        size_mb = (truth.queries_path.stat().st_size + truth.requests_path.stat().st_size) / 2**20
        base_wall, base_cpu = _baseline(truth.statements, Path(tmp) / "baseline.log")
    n = truth.statements
    print(f"requests              {truth.requests:>12,}")
    print(f"statements            {n:>12,}  ({n / truth.requests:.1f} per request)")
    print(
        f"log lines             {truth.query_lines + truth.request_lines:>12,}  ({size_mb:,.0f} MB)"
    )
    print(f"generator wall        {wall:>12.2f} s  {n / wall:>12,.0f} statements/s")
    print(f"generator CPU         {cpu:>12.2f} s  {n / cpu:>12,.0f} statements/s")
    print(f"baseline wall         {base_wall:>12.2f} s  {n / base_wall:>12,.0f} lines/s")
    print(f"baseline CPU          {base_cpu:>12.2f} s  {n / base_cpu:>12,.0f} lines/s")
    print(f"ratio generator/baseline (CPU)  {cpu / base_cpu:.2f}")
    print(f"peak memory (max RSS) {peak_mb:>12,.0f} MB")


if __name__ == "__main__":
    main()
