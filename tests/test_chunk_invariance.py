"""The output does not depend on ``--chunk-rows`` (contract §2, §6).

State that crosses chunk boundaries (spike decisions waiting for the next value, rate and
flat-line history, time order, the latest value of a derived channel's or a thermocouple's
inputs, the fall-back hour of the clock) must give the same rows and flags for every chunk size. A
hypothesis property test draws small logs with all of these and compares a random chunk size
against the default one; explicit runs compare ``--chunk-rows`` 1, 7 and 1000 through the
command line.
"""

from __future__ import annotations

import datetime as dt
import random
import tempfile
import zoneinfo
from pathlib import Path

import pandas as pd
import pyarrow.parquet as pq
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from countmill.convert import DEFAULT_CHUNK_ROWS, convert_file

UTC = dt.timezone.utc
T0 = dt.datetime(2026, 2, 1, 6, 0, tzinfo=UTC)

#: value = code (8-bit ADC, 1 V per code); 0 and 255 are the rails, 256 is an invalid code
EXACT_ADC = {"bits": 8, "span": [0.0, 256.0], "coding": "straight"}

CHANNELS = [
    {"id": 1, "name": "tank", "unit": "degC", "chain": [{"stage": "linear", "slope": 1.0}],
     "range": [2.0, 250.0], "expect": [20.0, 200.0],
     "qc": {"spike": 5.0, "rate": 2.0, "flat": {"tolerance": 1.0, "seconds": 20}}},
    {"id": 2, "name": "supply", "unit": "V", "chain": [{"stage": "linear", "slope": 1.0}]},
    # a second revision of the supply channel part-way through the drawn times
    {"id": 2, "name": "supply", "unit": "V", "from": dt.datetime(2026, 2, 1, 6, 3), "chain": [{"stage": "linear", "slope": 2.0}],
     "qc": {"spike": 20.0}},
    {"id": 3, "name": "amps", "unit": "A", "chain": [{"stage": "linear", "slope": 0.1, "unit": "A"}]},
    # a type K thermocouple on the tank channel as its cold junction: -10 ... +60 mV reaches
    # below 0 degC (a subrange limit of the reference function), the top of the range and
    # beyond, so records of one chunk take different ways through the inverse
    {"id": 4, "name": "flue", "unit": "degC", "adc": {"bits": 8, "span": [-0.01, 0.06], "coding": "straight"},
     "chain": [{"stage": "thermocouple", "type": "K", "cold_junction": "tank", "max_age": 30}]},
]
DERIVED = [
    {"name": "power", "unit": "kW", "expression": "supply * amps / 1000", "max_age": 30, "qc": {"spike": 0.2, "rate": 0.5}},
    {"name": "tank_per_amp", "unit": "degC/A", "expression": "tank / amps"},
]

BAD_LINES = [
    "2026-02-01T06:00:00,1,50",
    "2026-02-01T06:00:00,1,50,0,0",
    "2026-02-01T06:00:00,x,50,0",
    "2026-02-01T06:00:00,1,5.5,0",
    "not a time,1,50,0",
    b"2026-02-01T06:00:00,1,5\x000,0",
    b"2026-02-01T06:00:00,1,\xfe50,0",
]

record = st.tuples(
    st.sampled_from([1, 1, 1, 2, 2, 3, 3, 4, 4, 9]),  # channel (9 is not in the map)
    st.one_of(st.integers(1, 254), st.sampled_from([0, 255, 256, 40, 40, 40])),  # code: rails, invalid, repeats
    st.sampled_from([0, 0, 0, 0, 1, 7]),  # gain code (7 unknown)
    st.sampled_from([-20, -3, 0, 0, 1, 2, 3, 5, 10, 10, 17, 40]),  # seconds since the previous line
)
line = st.one_of(
    record.map(lambda r: ("record", r)),
    st.sampled_from(BAD_LINES).map(lambda b: ("bad", b)),
    st.sampled_from(["# note", ""]).map(lambda c: ("skip", c)),
)


@pytest.fixture(scope="session")
def busy_map(builders) -> str:
    """The map text: session-scoped, so the hypothesis test may use it."""
    return builders.map_text(CHANNELS, DERIVED, adc=EXACT_ADC, gains={0: 1, 1: 2}, qc={"max_gap": 15})


def render(lines) -> list:
    out, t = [], 0
    for kind, item in lines:
        if kind == "record":
            channel, code, gain, step = item
            t += step
            out.append(((T0 + dt.timedelta(seconds=t)).strftime("%Y-%m-%dT%H:%M:%S"), channel, code, gain))
        else:
            out.append(item)
    return out


def converted(folder: Path, raw: Path, chunk_rows: int, name: str):
    out = folder / name
    result = convert_file(raw, folder / "map.toml", out, chunk_rows=chunk_rows)
    table = pq.read_table(out).to_pandas()
    rejects = (folder / (name + ".rejects.csv")).read_bytes() if result.rejects_path else b""
    return table, rejects, result


@settings(max_examples=200, deadline=None)
@given(
    lines=st.lists(line, min_size=1, max_size=60),
    header=st.booleans(),
    chunk_rows=st.integers(1, 50),
)
def test_random_chunk_size_gives_the_same_table_as_the_default(busy_map, builders, lines, header, chunk_rows):
    with tempfile.TemporaryDirectory() as tmp:
        folder = Path(tmp)
        (folder / "map.toml").write_text(busy_map)
        raw = folder / "raw.csv"
        raw.write_bytes(builders.log_bytes(render(lines), header=header))
        reference, ref_rejects, ref_result = converted(folder, raw, DEFAULT_CHUNK_ROWS, "default.parquet")
        table, rejects, result = converted(folder, raw, chunk_rows, "chunked.parquet")
    pd.testing.assert_frame_equal(table, reference, check_exact=True)
    assert rejects == ref_rejects
    assert (result.rows, result.records, result.rejects) == (ref_result.rows, ref_result.records, ref_result.rejects)
    # every data line is one row or one reject; derived rows come on top
    data_lines = sum(kind != "skip" for kind, _ in lines)
    assert reference["channel_id"].notna().sum() + ref_result.rejects == data_lines


def busy_log(seed: int, n: int = 400) -> list:
    """A deterministic log with everything the property test draws, and more lines."""
    rng = random.Random(seed)
    drawn = []
    for _ in range(n):
        roll = rng.random()
        if roll < 0.05:
            drawn.append(("bad", rng.choice(BAD_LINES)))
        elif roll < 0.08:
            drawn.append(("skip", "# comment"))
        else:
            drawn.append(("record", (rng.choice([1, 1, 2, 3, 4, 9]), rng.choice([rng.randint(1, 254), 40, 0, 255, 256]),
                                     rng.choice([0, 0, 0, 1, 7]), rng.choice([-3, 0, 1, 2, 5, 10, 20]))))
    return render(drawn)


def test_chunk_rows_1_7_1000_through_the_command_line(run_cli, write_map, write_log, tmp_path, busy_map):
    cmap = write_map(busy_map)
    raw = write_log(busy_log(seed=7), header=True)
    tables, rejects = [], []
    for rows in (1, 7, 1000):
        out = tmp_path / f"out-{rows}.parquet"
        result = run_cli("convert", raw, "--map", cmap, "-o", out, "--chunk-rows", rows, "-q")
        assert result.exit_code == 3, result.output
        tables.append(pq.read_table(out))
        rejects.append((tmp_path / f"out-{rows}.parquet.rejects.csv").read_text())
    for other in tables[1:]:
        pd.testing.assert_frame_equal(other.to_pandas(), tables[0].to_pandas(), check_exact=True)
    assert rejects[1] == rejects[0] and rejects[2] == rejects[0]
    flags = set(tables[0].column("flags").to_pylist())
    assert len(flags) > 5  # the log really exercises many reasons


def test_chunk_rows_with_csv_output(run_cli, write_map, write_log, tmp_path, busy_map):
    cmap = write_map(busy_map)
    raw = write_log(busy_log(seed=11, n=150))
    texts = []
    for rows in (1, 7, 1000):
        out = tmp_path / f"out-{rows}.csv"
        assert run_cli("convert", raw, "--map", cmap, "-o", out, "--chunk-rows", rows, "-q").exit_code == 3
        texts.append(out.read_text())
    assert texts[1] == texts[0] and texts[2] == texts[0]


def test_spike_at_the_end_of_a_long_chunk(make_map, write_log, tmp_path):
    # The last value of a chunk waits for its successor before the spike test. With chunks
    # longer than the spike look-ahead (100 000 lines), the waiting value must still be
    # judged when its successor is the very next line. 220 001 one-channel lines, a peak of
    # 100 among 50s on the last line of the first 110 000-row chunk: the peak and both
    # neighbours are flagged (|100 - 50| and |50 - 75| > 10), whatever the chunk size.
    n, boundary = 220_001, 110_000
    cmap = make_map([{"id": 1, "name": "tank", "unit": "degC", "chain": [{"stage": "linear", "slope": 1.0}], "qc": {"spike": 10.0}}],
                    adc=EXACT_ADC, gains={0: 1}, input={"time": "unix_s"})
    raw = tmp_path / "long.csv"
    raw.write_text("".join(f"{i},1,{100 if i == boundary else 50},0\n" for i in range(1, n + 1)))
    for rows in (boundary, 1000):
        out = tmp_path / f"long-{rows}.parquet"
        convert_file(raw, cmap, out, chunk_rows=rows)
        flags = pq.read_table(out, columns=["flags"]).column("flags").to_numpy()
        assert list(flags.nonzero()[0] + 1) == [boundary - 1, boundary, boundary + 1], rows


def test_fall_back_hour_across_reader_blocks(make_map, write_log, tmp_path):
    # One record per second of local Berlin time from 01:30 to 03:30 on 2026-10-25, with the
    # repeated hour 02:00-03:00 printed twice: about 300 kB, so with --chunk-rows 7 the reader
    # cuts it into 64 kB blocks inside the repeated hour. The step back must be remembered
    # from block to block; the instants are checked against zoneinfo (PEP 495 fold).
    zone = zoneinfo.ZoneInfo("Europe/Berlin")
    wall = dt.datetime(2026, 10, 25, 1, 30)
    printed, fold = [], 0
    while len(printed) < 3 * 3600:
        if fold == 0 and wall == dt.datetime(2026, 10, 25, 3, 0):
            wall, fold = dt.datetime(2026, 10, 25, 2, 0), 1
        printed.append((wall, fold))
        wall += dt.timedelta(seconds=1)
    cmap = make_map([{"id": 1, "name": "tank", "unit": "degC", "chain": [{"stage": "linear", "slope": 1.0}]}],
                    adc=EXACT_ADC, gains={0: 1}, timezone="Europe/Berlin")
    raw = write_log([(w.isoformat(), 1, 50, 0) for w, _ in printed])
    assert raw.stat().st_size > 4 * (64 << 10)
    expected = pd.Series([w.replace(tzinfo=zone, fold=f).astimezone(UTC) for w, f in printed])
    for rows in (7, DEFAULT_CHUNK_ROWS):
        out = tmp_path / f"fold-{rows}.parquet"
        convert_file(raw, cmap, out, chunk_rows=rows)
        times = pq.read_table(out).column("time").to_pandas()
        assert (times.dt.tz_convert(UTC).reset_index(drop=True) == expected.dt.tz_convert(UTC)).all()
