"""Longer fuzz runs of every reader, the fingerprinter and whole-file ingest (not part of the tests).

Uses the generators of tests/test_guarantees_fuzz.py: fixture lines mutated with hostile pieces (cut
lines, NUL bytes, unterminated quotes and comments, 5,000-deep parentheses, absurd numbers and
timestamps), random text and random bytes. Runs until --seconds have passed or --inputs inputs were
tried, whichever comes first, and prints the inputs tried per target and every finding (an exception
that is not an AttribError, or broken line accounting) with the seed that reproduces it.

    python tests/bench/fuzz.py --seconds 300
    python tests/bench/fuzz.py --inputs 5000 --seed 7
"""

from __future__ import annotations

import argparse
import random
import sys
import tempfile
import time
import traceback
from collections import Counter
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]
sys.path.insert(0, str(ROOT))

import fingerprints  # noqa: E402
from tests import test_guarantees_fuzz as gen  # noqa: E402


def one_input(rng: random.Random, tmp: Path) -> str:
    """Try one generated input against a randomly chosen target; return the target's name."""
    target = rng.choice([*gen.FORMATS, "fingerprint", "ingest"])
    if target == "fingerprint":
        sqls = [gen.mutate(rng, rng.choice(gen.SEEDS["sql-jsonl"])) for _ in range(20)]
        sqls += [rng.choice(gen.HOSTILE)]
        batch = fingerprints.fingerprint_many(sqls, rng.choice(fingerprints.DIALECTS))
        assert len(batch.ids) == len(sqls)
        return target
    fmt = rng.choice(gen.FORMATS)
    lines = gen.hostile_lines(rng, fmt, rng.randint(0, 80))
    if target == "ingest":
        data = "\n".join(lines).encode("utf-8", "surrogatepass")
        if rng.random() < 0.1:
            data = bytes(rng.randrange(256) for _ in range(rng.randint(0, 4096)))
        forced = fmt if rng.random() < 0.5 else None
        gen.ingest_bytes(tmp, data, gen.kind_of(fmt), forced, "fuzz.log")
        return f"ingest:{fmt}"
    gen.check_reader(fmt, lines)
    return fmt


def main() -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--seconds", type=float, default=60.0, help="stop after this long")
    parser.add_argument("--inputs", type=int, default=10**9, help="stop after this many inputs")
    parser.add_argument("--seed", type=int, default=1, help="first seed (input i uses seed + i)")
    args = parser.parse_args()
    tried: Counter[str] = Counter()
    findings: list[str] = []
    started = time.monotonic()
    with tempfile.TemporaryDirectory() as folder:
        tmp = Path(folder)
        i = 0
        while i < args.inputs and time.monotonic() - started < args.seconds:
            seed = args.seed + i
            try:
                tried[one_input(random.Random(seed), tmp)] += 1
            except Exception:  # a finding: anything the guarantees tests would fail on
                lines = traceback.format_exc().strip().splitlines()
                findings.append(f"seed {seed}: {lines[-1]} ({lines[-3].strip()})")
            i += 1
    elapsed = time.monotonic() - started
    print(f"inputs tried: {i} in {elapsed:.0f} s ({i / max(elapsed, 1e-9):.1f}/s)")
    for name, n in sorted(tried.items()):
        print(f"  {name:24s} {n}")
    print(f"findings: {len(findings)}")
    for line in findings[:50]:
        print(f"  {line}")
    return 1 if findings else 0


if __name__ == "__main__":
    sys.exit(main())
