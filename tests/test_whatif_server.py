"""What-if against reality on a real PostgreSQL 15 server.

The hut-booking workload (tests/workload.py) runs its N+1 loop on ``/huts/{id}/bunks`` (one ``bunks``
query, then one ``bookings`` lookup per bunk), and the same workload with the loop batched into one
``WHERE bunk_id = ANY(...)`` query. Chunks of the two variants alternate on one server so that machine
load drifts alike for both; their request logs go to two stores (each store links only its own
requests). ``attrib whatif --batch`` on the loop store predicts the route's database time per request
after batching; the batched store measures it.

Tolerance: the predicted median database time per request of the route must be within 50% of the
measured median. The saving model removes (r - 1) fixed costs per call and keeps the per-row cost; the
real batched statement has another plan (an index scan over an array of keys instead of one key), and
every duration here is a fraction of a millisecond timed on a shared 2-core machine. 50% is our
judgement for that setting (no source). The median, not the mean, is asserted: a few statements slowed
by other processes on the machine move the mean of 30 requests (the mean is printed too, and both are
recorded in docs/whatif-compare.md).
"""

from __future__ import annotations

import json

import pytest
from click.testing import CliRunner

from attrib import ingest, nplus1, store
from attrib.cli import cli
from tests.pgserver import PgServer, require_postgres
from tests.workload import Truth, run_workload, write_request_log

pytestmark = pytest.mark.server

ROUTE = "/huts/{id}/bunks"
CHUNKS = 3
PER_CHUNK = 60  # requests per chunk and variant: 10 per route
LOOP = 8  # bunks per hut: 1 + 8 statements per loop request, 2 when batched
TOLERANCE = 0.5
PROTOCOL = "simple"  # one logged statement per execution: no parse/bind costs on the first runs


def _cli_json(args: list[str]) -> list[dict]:
    """Run an attrib command with --format json through click's test runner; return its rows."""
    result = CliRunner().invoke(cli, [*args, "--format", "json"])
    assert result.exit_code == 0, (result.output, result.exception)
    return json.loads(result.stdout)


@pytest.fixture(scope="module")
def stores(tmp_path_factory):
    require_postgres()
    tmp = tmp_path_factory.mktemp("whatif_server")
    loop, batched = Truth(), Truth()
    with PgServer(mode="duration") as server:
        for chunk in range(CHUNKS):
            for truth, is_batched, base in ((loop, False, 1), (batched, True, 5001)):
                part = run_workload(
                    server.conninfo,
                    requests=PER_CHUNK,
                    loop=LOOP,
                    batched=is_batched,
                    first=base + chunk * PER_CHUNK,
                    do_setup=chunk == 0 and not is_batched,
                    failing=False,
                    protocol=PROTOCOL,
                )
                truth.requests += part.requests
        logs = server.stop()
        paths = {}
        for name, truth in (("loop", loop), ("batched", batched)):
            requests = write_request_log(truth, tmp / f"{name}.jsonl")
            paths[name] = str(tmp / f"{name}.duckdb")
            con = store.connect(paths[name])
            ingest.ingest(con, [requests], [logs.stderr], ingest.IngestOptions(tz="UTC"))
            con.close()
    return paths


@pytest.fixture(scope="module")
def compared(stores):
    """`attrib compare --before-store loop --after-store batched`, as JSON rows."""
    args = ["compare", "--before-store", stores["loop"], "--after-store", stores["batched"]]
    return _cli_json([*args, "--resamples", "200"])


def test_whatif_batch_prediction_matches_the_batched_run(stores, compared):
    con = store.connect(stores["loop"], read_only=True)
    findings = nplus1.find(con)
    con.close()
    loop = findings[(findings["route"] == ROUTE) & (findings["kind"] == "n_plus_one")]
    assert len(loop) == 1, findings
    child = loop["child_template_id"].iloc[0]

    predicted = _cli_json(
        ["whatif", "--store", stores["loop"], "--batch", child, "--resamples", "500"]
    )
    p = next(r for r in predicted if r["route"] == ROUTE)
    m = next(r for r in compared if r["route"] == ROUTE)
    pred, meas = p["db_ms_p50_after"], m["db_ms_p50_after"]
    print(
        f"\n{ROUTE}: db ms/request median before {p['db_ms_p50_before']:.3f}, after predicted "
        f"{pred:.3f}, measured {meas:.3f} (ratio {pred / meas:.2f}); mean before "
        f"{p['db_ms_per_request_before']:.3f}, after predicted {p['db_ms_per_request_after']:.3f}, "
        f"measured {m['db_ms_per_request_after']:.3f} "
        f"(ratio {p['db_ms_per_request_after'] / m['db_ms_per_request_after']:.2f}); "
        f"elapsed p50 before {p['elapsed_p50_before']:.3f}, after predicted "
        f"{p['elapsed_p50_after']:.3f} [{p['elapsed_p50_after_ci_low']:.3f}, "
        f"{p['elapsed_p50_after_ci_high']:.3f}], measured {m['elapsed_p50_after']:.3f}; "
        f"fixed cost {loop['fixed_cost_ms'].iloc[0]:.4f} ms, gap {loop['gap_ms_median'].iloc[0]:.4f} ms"
    )
    assert p["requests_affected"] == CHUNKS * PER_CHUNK // 6
    assert p["db_ms_per_request_before"] == pytest.approx(m["db_ms_per_request_before"])
    assert p["db_ms_p50_before"] == pytest.approx(m["db_ms_p50_before"])
    assert abs(pred - meas) <= TOLERANCE * meas


def test_compare_two_stores_finds_fewer_queries_only_where_the_code_changed(compared):
    rows = compared
    verdicts = {r["route"]: r["queries_verdict"] for r in rows}
    print(f"\nqueries verdicts: {verdicts}")
    print("elapsed verdicts:", {r["route"]: r["elapsed_verdict"] for r in rows})
    loop = next(r for r in rows if r["route"] == ROUTE)
    assert (loop["queries_per_request_before"], loop["queries_per_request_after"]) == (1 + LOOP, 2)
    assert verdicts.pop(ROUTE) == "fewer"
    assert len(verdicts) == 5 and set(verdicts.values()) == {"unchanged"}
