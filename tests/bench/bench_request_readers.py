"""Throughput of the request-log and OTLP readers on generated files (default 1,000,000 lines each).

Run: /work/venv/bin/python tests/bench/bench_request_readers.py [LINES]

For each format it prints wall-clock and CPU seconds (CPU time is the steadier figure when other work
shares the 2 cores) and lines/s of the reader and of a baseline measured in the same run on the same file: reading the lines plus the one unavoidable parse step (``json.loads`` for JSON lines and OTLP,
``str.split`` for CSV, one regex match for access logs). The ratio says how much the reader adds.
Generated data is invented (a bakery shop); nothing here is asserted.
"""

from __future__ import annotations

import json
import re
import sys
import tempfile
import time
from collections.abc import Callable, Iterator
from pathlib import Path

from attrib.readers import access_log, otlp, requests_csv, requests_jsonl
from attrib.records import ReadOptions

ROUTES = [
    "/orders/{n}",
    "/orders/{n}/loaves",
    "/loaves",
    "/customers/{n}/orders",
    "/reports/2024-03-05",
]
T0 = 1709647331


def _path(i: int) -> str:
    return ROUTES[i % len(ROUTES)].replace("{n}", str(1000 + i % 977)) + (
        "?page=2" if i % 7 == 0 else ""
    )


def gen_jsonl(i: int) -> str:
    return json.dumps(
        {
            "time": f"2024-03-05T14:{(i // 60000) % 60:02d}:{(i // 1000) % 60:02d}.{i % 1000:03d}Z",
            "level": "info",
            "request_id": f"r-{i:08d}",
            "method": "GET",
            "path": _path(i),
            "status": 200,
            "duration_ms": 3.5 + i % 50,
        }
    )


def gen_csv(i: int) -> str:
    return f"2024-03-05T14:{(i // 60000) % 60:02d}:{(i // 1000) % 60:02d}.{i % 1000:03d}Z,r-{i:08d},GET,{_path(i)},200,{3.5 + i % 50}"


def gen_access(i: int) -> str:
    return (
        f"198.51.100.{i % 250} - - [05/Mar/2024:14:{(i // 60000) % 60:02d}:{(i // 1000) % 60:02d} +0000] "
        f'"GET {_path(i)} HTTP/1.1" 200 512 "-" "Mozilla/5.0 (X11)" {i:032x} 0.{i % 1000:03d}'
    )


def gen_otlp(i: int) -> str:
    trace = f"{i + 1:032x}"
    start = (T0 + i // 1000) * 10**9 + (i % 1000) * 10**6

    def attr(key: str, value: object) -> dict:
        kind = "intValue" if isinstance(value, int) else "stringValue"
        return {"key": key, "value": {kind: str(value)}}

    spans = [
        {
            "traceId": trace,
            "spanId": f"{2 * i + 1:016x}",
            "kind": 2,
            "name": "GET /orders/{id}",
            "startTimeUnixNano": str(start),
            "endTimeUnixNano": str(start + 34_000_000),
            "attributes": [
                attr("http.request.method", "GET"),
                attr("http.route", "/orders/{id}"),
                attr("url.path", _path(i)),
                attr("http.response.status_code", 200),
            ],
        },
        {
            "traceId": trace,
            "spanId": f"{2 * i + 2:016x}",
            "parentSpanId": f"{2 * i + 1:016x}",
            "kind": 3,
            "name": "SELECT orders",
            "startTimeUnixNano": str(start + 1_000_000),
            "endTimeUnixNano": str(start + 2_000_000),
            "attributes": [
                attr("db.system.name", "postgresql"),
                attr("db.namespace", "bakery.public"),
                attr("db.query.text", "SELECT id, status FROM orders WHERE id = $1"),
            ],
        },
    ]
    return json.dumps(
        {
            "resourceSpans": [
                {
                    "resource": {"attributes": [attr("service.name", "bakeshop-web")]},
                    "scopeSpans": [{"scope": {"name": "bakeshop"}, "spans": spans}],
                }
            ]
        },
        separators=(",", ":"),
    )


def lines_of(path: Path) -> Iterator[tuple[int, str]]:
    with path.open(encoding="utf-8", errors="replace", newline="\n") as handle:
        for number, text in enumerate(handle, 1):
            yield number, text.rstrip("\n")


def timed(fn: Callable[[], int]) -> tuple[float, float, int]:
    """Wall-clock and CPU seconds of ``fn()`` (CPU time is steadier on a shared machine)."""
    start, cpu = time.perf_counter(), time.process_time()
    count = fn()
    return time.perf_counter() - start, time.process_time() - cpu, count


def main() -> None:
    n = int(sys.argv[1]) if len(sys.argv) > 1 else 1_000_000
    clf = re.compile(access_log.AccessFormat("nginx {request_id} {elapsed_s}").regex.pattern)
    cases = [
        ("requests-jsonl", requests_jsonl, gen_jsonl, None, ReadOptions(), lambda t: json.loads(t)),
        (
            "requests-csv",
            requests_csv,
            gen_csv,
            "time,request_id,method,path,status,duration_ms",
            ReadOptions(),
            lambda t: t.split(","),
        ),
        (
            "access-log",
            access_log,
            gen_access,
            None,
            ReadOptions(access_format="nginx {request_id} {elapsed_s}"),
            lambda t: clf.match(t),
        ),
        ("otlp-json", otlp, gen_otlp, None, ReadOptions(), lambda t: json.loads(t)),
    ]
    with tempfile.TemporaryDirectory() as tmp:
        for name, module, gen, header, options, base_step in cases:
            path = Path(tmp) / f"{name}.log"
            with path.open("w", encoding="utf-8") as out:
                if header:
                    out.write(header + "\n")
                for i in range(n - (1 if header else 0)):
                    out.write(gen(i) + "\n")
            size = path.stat().st_size

            def baseline(path: Path = path, step: Callable = base_step) -> int:
                count = 0
                for _number, text in lines_of(path):
                    step(text)
                    count += 1
                return count

            def reader(path: Path = path, module=module, options: ReadOptions = options) -> int:
                lines = 0
                for record in module.read(lines_of(path), options):
                    lines += record.lines
                return lines

            base_s, base_cpu, base_lines = timed(baseline)
            read_s, read_cpu, read_lines = timed(reader)
            assert read_lines == base_lines == n
            print(
                f"{name:15s} {n:>9,d} lines {size / 1e6:7.1f} MB | reader wall {read_s:6.1f} s "
                f"cpu {read_cpu:6.1f} s ({n / read_cpu:>8,.0f} lines/s, {size / 1e6 / read_cpu:5.1f} MB/s "
                f"cpu) | baseline cpu {base_cpu:6.1f} s ({n / base_cpu:>9,.0f} lines/s) | "
                f"ratio {read_cpu / base_cpu:5.2f}x",
                flush=True,
            )
            path.unlink()


if __name__ == "__main__":
    main()
