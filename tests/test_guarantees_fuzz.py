"""Promise 2: hostile input never crashes anything.

Every reader, the fingerprinter and whole-file ingest get generated hostile input: lines of the
real fixtures mutated (cut, NUL bytes, unterminated quotes and comments, 5,000-deep parentheses,
absurd numbers and timestamps), random text and bytes. Each input ends as records whose line counts
add up to the lines given, or as an ``AttribError`` (a one-line message for the user), never another
exception. ``tests/bench/fuzz.py`` runs the same generators for longer.
"""

from __future__ import annotations

import random
import zlib
from collections import Counter
from pathlib import Path
from zoneinfo import ZoneInfo

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

import fingerprints
from attrib import ingest, readers
from attrib import store as _store
from attrib.errors import AttribError
from attrib.records import ReadOptions, Reject, Request, Skip, Statement

ROOT = Path(__file__).resolve().parent.parent
LOGS = ROOT / "fixtures" / "logs"
FORMATS = readers.formats()
UTC = ZoneInfo("UTC")
# access logs need a layout with a duration (docs/input-formats.md); one the fixture uses
ACCESS_FORMAT = "nginx {request_id} {elapsed_s}"
TRIED: Counter[str] = Counter()  # inputs tried per target, printed when the module ends


@pytest.fixture(scope="module", autouse=True)
def report_inputs_tried():
    """Print how many hostile inputs were tried (shown with pytest -s)."""
    yield
    print(f"\nhostile inputs tried: {sum(TRIED.values())} {dict(sorted(TRIED.items()))}")


HOSTILE = [
    "\x00",
    "\x00" * 64,
    "\ufffd",
    "'unterminated",
    '"unterminated',
    "/* unterminated comment",
    "-- comment to the end",
    "(" * 5000,
    ")" * 50,
    "$1",
    "$$dollar",
    "\\",
    "\t",
    "\r",
    "\x1b[31m",
    "\u202e",
    "\ud800",
    "1e999",
    "-1e999",
    "NaN",
    "-0",
    "-5",
    "99999999999999999999999999999999",
    "0001-01-01T00:00:00Z",
    "9999-12-31T23:59:59.999999+14:00",
    "1970-01-01 00:00:00 UTC",
    "2026-02-30 25:61:61.000 UTC",
    "duration: -3.5 ms",
    "duration: 1e308 ms",
    "{",
    "}",
    "[]",
    "null",
    '{"a":' * 200,
    ",,,,,",
    "# Time: 999999 99:99:99",
    "# Query_time: -1  Lock_time: x",
    "SET timestamp=-99999999999;",
    "STATEMENT:  ",
    "DETAIL:  parameters: $1 = '",
]


def seed_lines(fmt: str, limit: int = 400) -> list[str]:
    """Lines of the fixture files of a format (the starting points of mutations)."""
    folder = LOGS / fmt
    out: list[str] = []
    for path in sorted(folder.glob("*")):
        if path.suffix in (".md", ".json") and path.name.endswith((".md", ".truth.json")):
            continue
        text = path.read_bytes().decode("utf-8", "replace")
        out.extend(text.splitlines()[:limit])
    return out or ["x"]


SEEDS = {fmt: seed_lines(fmt) for fmt in FORMATS}


def mutate(rng: random.Random, line: str) -> str:
    """One random hostile change to a line."""
    op = rng.randrange(8)
    pos = rng.randint(0, len(line))
    piece = rng.choice(HOSTILE)
    if op == 0:
        return line[:pos]  # cut
    if op == 1:
        return line[:pos] + piece + line[pos:]  # insert
    if op == 2:
        return line[:pos] + piece + line[pos + rng.randint(0, 20) :]  # overwrite
    if op == 3:
        return "".join(ch for ch in line if not ch.isdigit()) or piece  # drop the numbers
    if op == 4:
        return line.replace(rng.choice("0123456789"), rng.choice(["-", "9" * 30, "", "."]))
    if op == 5:
        return line + line  # two records on one line
    if op == 6:
        return "".join(chr(rng.randrange(1, 0x3000)) for _ in range(rng.randint(0, 80)))
    return piece


def hostile_lines(rng: random.Random, fmt: str, n: int) -> list[str]:
    """``n`` lines: fixture lines of ``fmt`` in order, some mutated, some dropped or repeated."""
    seeds = SEEDS[fmt]
    start = rng.randrange(len(seeds))
    out = []
    for i in range(n):
        line = seeds[(start + i) % len(seeds)]
        r = rng.random()
        if r < 0.4:
            line = mutate(rng, line)
        elif r < 0.5:
            line = rng.choice(seeds)
        out.append(line)
    return out


def options_for(fmt: str) -> ReadOptions:
    return ReadOptions(tz=UTC, access_format=ACCESS_FORMAT if fmt == "access-log" else None)


def check_reader(fmt: str, lines: list[str], options: ReadOptions | None = None) -> str:
    """Run one reader over ``lines``; assert the accounting contract. Returns the outcome."""
    module = readers.get(fmt)
    TRIED[fmt] += 1
    try:
        records = list(module.read(enumerate(lines, 1), options or options_for(fmt)))
    except AttribError as exc:
        message = str(exc)
        assert message and "\n" not in message.strip(), f"{fmt}: multi-line error {message!r}"
        return "refused"
    tried = f"(input {TRIED[fmt]} of {fmt}, {sum(TRIED.values())} hostile inputs tried so far)"
    covered = 0
    for rec in records:
        assert isinstance(rec, Request | Statement | Skip | Reject), f"{fmt}: {type(rec)} {tried}"
        assert 1 <= rec.line <= max(len(lines), 1), f"{fmt}: line {rec.line} {tried}"
        assert rec.lines >= 0, tried
        if isinstance(rec, Reject):
            assert rec.reason, f"{fmt}: reject without a reason {tried}"
        covered += rec.lines
    assert covered == len(lines), f"{fmt}: records cover {covered} of {len(lines)} lines {tried}"
    return "read"


@pytest.mark.parametrize("fmt", FORMATS)
@settings(
    max_examples=40,
    deadline=None,
    derandomize=True,
    suppress_health_check=[HealthCheck.too_slow, HealthCheck.data_too_large],
)
@given(rng=st.randoms(use_true_random=False), n=st.integers(0, 40))
def test_reader_mutated_fixture_lines_are_records_or_one_line_errors(fmt, rng, n):
    check_reader(fmt, hostile_lines(rng, fmt, n))


@pytest.mark.parametrize("fmt", FORMATS)
@settings(max_examples=25, deadline=None, derandomize=True)
@given(lines=st.lists(st.text(max_size=300), max_size=20))
def test_reader_arbitrary_text_lines_are_records_or_one_line_errors(fmt, lines):
    check_reader(fmt, lines)


@pytest.mark.parametrize("fmt", FORMATS)
def test_reader_ten_megabyte_and_deep_lines_are_records(fmt):
    seeds = SEEDS[fmt]
    big = seeds[min(1, len(seeds) - 1)]
    lines = [
        *seeds[:3],
        big[: len(big) // 2] + "x" * 10_000_000 + big[len(big) // 2 :],
        "(" * 5000 + big + ")" * 5000,
        big.replace("2026", "0001").replace("2024", "9999"),
        "\x00" * 100,
        *seeds[3:6],
    ]
    assert check_reader(fmt, lines) in ("read", "refused")


@settings(max_examples=150, deadline=None, derandomize=True)
@given(
    sql=st.one_of(
        st.text(max_size=400),
        st.builds(
            lambda rng: mutate(rng, rng.choice(SEEDS["sql-jsonl"])),
            st.randoms(use_true_random=False),
        ),
        st.sampled_from(HOSTILE),
    ),
    dialect=st.sampled_from(fingerprints.DIALECTS),
)
def test_fingerprint_hostile_sql_returns_a_template(sql, dialect):
    TRIED["fingerprint"] += 1
    fp = fingerprints.fingerprint(sql, dialect)
    assert isinstance(fp.template, str) and len(fp.id) == 16


def test_fingerprint_many_hostile_batch_returns_one_id_per_statement(caplog):
    rng = random.Random(7)
    sqls = [mutate(rng, rng.choice(SEEDS["sql-jsonl"])) for _ in range(300)] + HOSTILE
    sqls.append("SELECT (ARRAY['north','south'])[1 + g % 3] FROM t")  # sqlglot warns for mysql
    sqls += ["SELECT " + "(" * 5000 + "1" + ")" * 5000, "SELECT '" + "x" * 2_000_000]
    for dialect in fingerprints.DIALECTS:
        TRIED["fingerprint_many"] += len(sqls)
        batch = fingerprints.fingerprint_many(sqls, dialect, with_literals=True)
        assert len(batch.ids) == len(sqls) and set(batch.ids) <= set(batch.templates)
    # nothing reaches the user's terminal through logging (a CLI run would print it to stderr)
    assert not [r for r in caplog.records if r.levelno >= 30], caplog.records[:3]


# -- whole files through ingest ---------------------------------------------------------------


def ingest_bytes(tmp_path: Path, data: bytes, kind: str, fmt: str | None, name: str) -> dict:
    """Ingest one file into a fresh in-memory store; return its sources row, or the error text."""
    path = tmp_path / name
    path.write_bytes(data)
    con = _store.connect(":memory:")
    TRIED["ingest"] += 1
    try:
        options = ingest.IngestOptions(
            tz="UTC",
            access_format=ACCESS_FORMAT if fmt == "access-log" else None,
            **{f"{'requests' if kind == 'requests' else 'queries'}_format": fmt},
        )
        try:
            ingest.ingest(con, **{kind: [path]}, options=options)
        except AttribError as exc:
            text = str(exc)
            assert text.startswith(str(path)) or "format" in text, text
            assert "\n" not in text.strip(), text
            return {"error": text}
        row = con.execute(
            """SELECT lines_read, lines_ingested, lines_skipped, lines_rejected, requests,
                      statements FROM sources"""
        ).fetchone()
        read, ing, skip, rej, nreq, nstmt = row
        assert ing + skip + rej == read, row
        assert read == data.count(b"\n") + (1 if data and not data.endswith(b"\n") else 0)
        reasons = dict(
            con.execute("SELECT reason, sum(lines) FROM rejects GROUP BY reason").fetchall()
        )
        assert sum(reasons.values()) == rej
        return {"read": read, "records": nreq + nstmt, "rejects": reasons}
    finally:
        con.close()


def kind_of(fmt: str) -> str:
    return "requests" if readers.get(fmt).KIND == "requests" else "queries"


@pytest.mark.parametrize("fmt", FORMATS)
def test_ingest_hostile_files_in_every_format_end_as_data_or_one_line_error(fmt, tmp_path):
    rng = random.Random(zlib.crc32(fmt.encode()))
    outcomes = Counter()
    for i in range(6):
        lines = hostile_lines(rng, fmt, rng.randint(1, 60))
        data = "\n".join(lines).encode("utf-8", "surrogatepass")
        for forced in (fmt, None):
            got = ingest_bytes(tmp_path, data, kind_of(fmt), forced, f"h{i}{forced is None}.log")
            outcomes["error" if "error" in got else "read"] += 1
    raw = bytes(rng.randrange(256) for _ in range(65536))
    got = ingest_bytes(tmp_path, raw, kind_of(fmt), fmt, "random.bin")
    assert got.get("error", "").endswith("not a text log (the file holds binary data)"), got
    bad_utf8 = "\n".join(SEEDS[fmt][:20]).encode().replace(b"e", b"\xff\xfe", 5)
    outcomes[
        "error"
        if "error" in ingest_bytes(tmp_path, bad_utf8, kind_of(fmt), fmt, "u.log")
        else "read"
    ] += 1
    print(f"\n{fmt}: {sum(outcomes.values())} hostile files, {dict(outcomes)}")


def test_ingest_pg_log_with_nul_padding_reads_the_text_after_it(tmp_path):
    lines = SEEDS["pg-stderr"][:40]
    statements = [i for i, line in enumerate(lines) if "duration:" in line and "statement:" in line]
    assert statements, "fixture has statement lines"
    cut = statements[0]
    # a crashed server: zeroed blocks in place of lost text, then the next line it wrote
    padded = lines[:cut] + ["\x00" * 3000] + ["lost text\x00\x00\x00\x00" + lines[cut]]
    padded += lines[cut + 1 :]
    data = "\n".join(padded).encode()
    plain = "\n".join(lines[:cut] + [lines[cut]] + lines[cut + 1 :]).encode()
    got = ingest_bytes(tmp_path, data, "queries", None, "crashed.log")
    want = ingest_bytes(tmp_path, plain, "queries", None, "plain.log")
    assert "error" not in got, got
    assert got["records"] == want["records"], (got, want)
    assert got["rejects"].get("NUL bytes") == 1, got


def test_ingest_utf16_file_is_refused_as_binary(tmp_path):
    data = "\n".join(SEEDS["requests-jsonl"][:20]).encode("utf-16-le")
    got = ingest_bytes(tmp_path, data, "requests", None, "utf16.log")
    assert "not a text log" in got.get("error", ""), got


def test_ingest_duplicated_request_ids_are_counted_rejects(tmp_path):
    line = '{"time":"2024-03-05T14:02:11Z","request_id":"r-1","path":"/a","duration_ms":3}'
    got = ingest_bytes(
        tmp_path, (line + "\n").encode() * 5, "requests", "requests-jsonl", "dup.log"
    )
    assert got["records"] == 1 and sum(got["rejects"].values()) == 4, got
    assert all(r.startswith("duplicate request id") for r in got["rejects"]), got


def test_ingest_statements_before_their_requests_are_linked_later(tmp_path):
    req = LOGS / "ingest" / "010_requests.jsonl"
    qry = LOGS / "ingest" / "020_statements.slow.log"
    counts = []
    for order in ((qry, req), (req, qry)):
        con = _store.connect(":memory:")
        for path in order:
            key = "queries" if path == qry else "requests"
            ingest.ingest(con, **{key: [path]}, options=ingest.IngestOptions(tz="UTC"))
        counts.append(con.execute("SELECT count(*) FROM links").fetchone()[0])
        con.close()
    assert counts[0] == counts[1] > 0, counts


def test_sources_head_of_random_bytes_never_raises_other_errors(tmp_path):
    from attrib import sources

    rng = random.Random(3)
    for i in range(200):
        data = bytes(rng.randrange(256) for _ in range(rng.randint(0, 3000)))
        if rng.random() < 0.5:
            data = b"\x00" * rng.randint(0, 5000) + data
        path = tmp_path / f"r{i}"
        path.write_bytes(data)
        TRIED["sources"] += 1
        try:
            sources.head(path)
        except AttribError:
            pass
        with sources.LineSource(path) as lines:
            n = sum(1 for _ in lines)
        flat = data.replace(b"\r\n", b"\n")
        assert n == flat.count(b"\n") + (1 if flat and not flat.endswith(b"\n") else 0)


def test_ingest_slow_log_absurd_query_time_and_row_count_are_data_or_rejects(tmp_path):
    # found by tests/bench/fuzz.py (seeds 6619 and 11342): an infinite Query_time and a Rows_sent
    # beyond 64 bits crashed the reader and the insert
    entry = [
        "# User@Host: app[app] @  [10.0.0.5]",
        "# Query_time: {q}  Lock_time: 0.000010  Rows_sent: {rows}  Rows_examined: 1",
        "SET timestamp=1796169600;",
        "SELECT 1;",
    ]
    text = "\n".join(
        line.format(q=q, rows=rows)
        for q, rows in (("1e999", 1), ("0.001", "9" * 30), ("-1", 1), ("nan", 1), ("0.002", 3))
        for line in entry
    )
    got = ingest_bytes(tmp_path, text.encode(), "queries", "mysql-slow", "absurd.log")
    assert got["records"] == 2 and sum(got["rejects"].values()) == 12, got


@pytest.mark.parametrize("fmt", ["pg-stderr", "pg-csvlog", "pg-jsonlog"])
def test_ingest_pg_absurd_duration_is_a_counted_reject(fmt, tmp_path):
    # found by tests/bench/fuzz.py (seed 101581): a 1e32 ms duration gave a start time that
    # overflowed the store's timestamp
    lines = [
        line.replace("duration: ", "duration: 99999999999999999999999999999999", 1)
        if "duration: " in line and "statement: " in line
        else line
        for line in SEEDS[fmt][:60]
    ]
    changed = sum(a != b for a, b in zip(lines, SEEDS[fmt][:60], strict=True))
    assert changed > 0
    got = ingest_bytes(tmp_path, "\n".join(lines).encode(), "queries", fmt, "absurd.log")
    assert got["rejects"].get("duration out of range", 0) >= 1, got


def test_ingest_file_of_only_nul_bytes_is_rejected_line_by_line(tmp_path):
    # found by tests/bench/fuzz.py (seed 507741): a file whose lines were all NUL bytes was taken
    # for an empty file and its lines were not accounted for
    data = b"\x00" * 5000 + b"\n" + b"\x00" * 10 + b"\n\x00"
    for kind in ("requests", "queries"):
        got = ingest_bytes(tmp_path, data, kind, None, f"nul-{kind}.log")
        assert got["read"] == 3 and got["rejects"] == {"NUL bytes": 3}, got


@pytest.mark.parametrize(
    "rows", ["999999999999999999999999999999", '"999999999999999999999999999999"']
)
def test_ingest_sql_jsonl_row_count_beyond_64_bits_is_a_counted_reject(rows, tmp_path):
    # found by tests/bench/fuzz.py (seed 914535): the insert overflowed
    line = '{"ts": "2026-07-14T06:15:02Z", "sql": "SELECT 1", "duration_ms": 1, "rows": ROWS}'
    data = (line.replace("ROWS", rows) + "\n" + line.replace("ROWS", "3") + "\n").encode()
    got = ingest_bytes(tmp_path, data, "queries", "sql-jsonl", "rows.log")
    assert got["records"] == 1 and got["rejects"] == {"bad rows": 1}, got


def test_ingest_otlp_row_count_beyond_64_bits_is_unknown(tmp_path):
    # the same overflow as in sql-jsonl, through db.response.returned_rows of a span
    line = (LOGS / "secrets" / "otlp-json.log").read_text().splitlines()[0]
    huge = '{"key": "db.response.returned_rows", "value": {"intValue": "' + "9" * 30 + '"}}, '
    line = line.replace(
        '"attributes": [{"key": "db.system.name"',
        '"attributes": [' + huge + '{"key": "db.system.name"',
    )
    assert "9" * 30 in line
    got = ingest_bytes(tmp_path, (line + "\n").encode(), "queries", "otlp-json", "rows.log")
    assert got["records"] == 2 and not got["rejects"], got
