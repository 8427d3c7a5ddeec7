"""Wide layout (``--layout wide --every``) against pandas, computed independently here.

Reference for every check: the tidy output of the same raw file, read with pandas and
grouped with ``Series.dt.floor(every)`` + ``groupby`` (pandas' floor of UTC timestamps is
aligned to the Unix epoch, which is the bin alignment the wide layout promises). The raw
files are crafted here (invented numbers; ADC 12-bit straight binary over 0 … 4.096 V, so
one code is 1 mV, common practice for a 4.096 V reference, no source).
"""

from __future__ import annotations

import hashlib
import json
from pathlib import Path

import numpy as np
import pandas as pd
import pyarrow.parquet as pq
import pytest
from click.testing import CliRunner

from countmill.cli import cli
from countmill.convert import convert_file
from countmill.errors import UsageError
from countmill.wide import parse_every

MAP = """
[map]
name = "wide-test-rig"
timezone = "UTC"

[adc]
bits = 12
span = [0.0, 4.096]
coding = "straight"

[gains]
0 = 1
1 = 10

[[channel]]
id = 1
name = "tank_temp"
unit = "degC"
range = [0.0, 100.0]
expect = [10.0, 40.0]
chain = [ { stage = "linear", slope = 100.0, intercept = 0.0 } ]

[[channel]]
id = 2
name = "line_pressure"
unit = "bar"
range = [0.0, 10.0]
expect = [1.0, 3.0]
chain = [ { stage = "linear", slope = 10.0, intercept = 0.0 } ]

[[channel]]
id = 3
name = "flow"
unit = "L/min"
chain = [ { stage = "linear", slope = 50.0, intercept = 0.0 } ]

[[derived]]
name = "pressure_head"
unit = "bar"
expression = "line_pressure * 2"
"""

LEVELS = [1, 2, 3, 4, 9]


def write_raw(path: Path, scans: int = 300, seed: int = 7, step_back_s: float = 40.0, step_at: int = 150) -> Path:
    """Three channels every ~7 s with jitter, an unmapped channel now and then, rail and
    invalid codes, values outside ``expect``; the clock steps back ``step_back_s`` once."""
    rng = np.random.default_rng(seed)
    t0 = np.datetime64("2026-03-01T00:00:00", "ms")
    lines = ["time,channel,code,gain"]
    t = 0.0
    for k in range(scans):
        t += 7.0 + rng.uniform(-0.5, 0.5)
        if k == step_at:
            t -= step_back_s
        for j, cid in enumerate((1, 2, 3)):
            when = t0 + np.timedelta64(int(round((t + 0.01 * j) * 1000)), "ms")
            code = {1: rng.integers(50, 450), 2: rng.integers(50, 350), 3: rng.integers(0, 4000)}[cid]
            if cid == 2 and (rng.random() < 0.08 or 60 <= k < 72 or (100 <= k < 120 and k % 2)):
                code = 4095  # the upper rail: saturated_high, bad (a stretch, and every other scan: ties)
            if cid == 1 and (rng.random() < 0.05 or 200 <= k < 215):
                code = 5000  # beyond a 12-bit converter: invalid_code, missing
            lines.append(f"{when}Z,{cid},{code},0")
        if k % 40 == 0:
            lines.append(f"{t0 + np.timedelta64(int(t * 1000) + 50, 'ms')}Z,9,100,0")
    path.write_text("\n".join(lines) + "\n")
    return path


@pytest.fixture(scope="module")
def rig(tmp_path_factory):
    folder = tmp_path_factory.mktemp("wide")
    cmap = folder / "rig.toml"
    cmap.write_text(MAP)
    raw = write_raw(folder / "rig.csv")
    tidy = folder / "tidy.parquet"
    convert_file(raw, cmap, tidy)
    return folder, cmap, raw, pd.read_parquet(tidy)


def reference(tidy: pd.DataFrame, every: str, settle_s: float | None = None):
    """Mean / count / quality per (bin, channel) with pandas, and late samples per channel."""
    rows = tidy[tidy["channel"].notna()].copy()
    rows["bin"] = rows["time"].dt.floor(every)
    late_counts = {}
    if settle_s is not None:  # the documented rule: bin end <= newest earlier time - settle
        width = pd.Timedelta(every)
        newest_before = rows["time"].cummax().shift(1)
        late = (rows["bin"] + width) <= newest_before - pd.Timedelta(seconds=settle_s)
        late_counts = rows[late].groupby("channel").size().to_dict()
        rows = rows[~late]
    keys = ["bin", "channel"]
    count = rows.groupby(keys).size()
    mean = rows[rows["quality"].isin([1, 3])].groupby(keys)["value"].mean()  # contract §5: good and suspect
    per_level = rows.groupby(keys)["quality"].value_counts().unstack(fill_value=0).reindex(columns=LEVELS, fill_value=0)
    top = per_level.max(axis=1)
    # the most frequent level, a tie to the worse one: the last level (in 1 2 3 4 9 order) reaching the top count
    quality = per_level.apply(lambda r: max(lv for lv in LEVELS if r[lv] == top[r.name]), axis=1)
    bins = np.sort(rows["bin"].unique())
    return bins, count, mean, quality, late_counts


def check_against(wide: pd.DataFrame, ref, channels):
    bins, count, mean, quality, _ = ref
    assert list(wide["time"]) == list(bins)
    for ch in channels:
        index = pd.MultiIndex.from_product([bins, [ch]])
        want_count = count.reindex(index, fill_value=0).to_numpy()
        want_mean = mean.reindex(index).to_numpy(dtype=float)
        want_quality = quality.reindex(index, fill_value=9).to_numpy()
        np.testing.assert_array_equal(wide[f"{ch}_count"].to_numpy(), want_count, err_msg=ch)
        np.testing.assert_array_equal(wide[f"{ch}_quality"].to_numpy(), want_quality, err_msg=ch)
        np.testing.assert_allclose(wide[ch].to_numpy(), want_mean, rtol=1e-12, equal_nan=True, err_msg=ch)


CHANNELS = ["tank_temp", "line_pressure", "flow", "pressure_head"]


@pytest.mark.parametrize("every", ["1min", "15min", "10s"])
def test_wide_parquet_equals_pandas_groupby_of_tidy(rig, tmp_path, every):
    folder, cmap, raw, tidy = rig
    out = tmp_path / "wide.parquet"
    result = convert_file(raw, cmap, out, layout="wide", every=every)
    wide = pd.read_parquet(out)
    # reference: pandas dt.floor + groupby of the tidy output
    check_against(wide, reference(tidy, every), CHANNELS)
    assert result.rows == len(wide)
    assert list(wide.columns) == ["time"] + [f"{c}{s}" for c in CHANNELS for s in ("", "_quality", "_count")]
    assert not any(c.startswith("9") or c == "None" for c in wide.columns)  # the unmapped channel stays out


def test_wide_same_for_any_chunk_rows(rig, tmp_path):
    folder, cmap, raw, tidy = rig
    tables = []
    for chunk in (1, 7, 1000):
        out = tmp_path / f"wide-{chunk}.parquet"
        convert_file(raw, cmap, out, layout="wide", every="1min", chunk_rows=chunk)
        tables.append(pd.read_parquet(out))
    # reference: the chunk_rows=1000 output, and pandas for each
    for table in tables:
        pd.testing.assert_frame_equal(table, tables[-1], check_exact=True)
        check_against(table, reference(tidy, "1min"), CHANNELS)


def test_wide_units_and_provenance_in_parquet_metadata(rig, tmp_path):
    folder, cmap, raw, tidy = rig
    out = tmp_path / "wide.parquet"
    convert_file(raw, cmap, out, layout="wide", every="1min")
    schema = pq.read_schema(out)
    # reference: the units written in the map above
    units = {name: schema.field(name).metadata[b"units"].decode() for name in CHANNELS}
    assert units == {"tank_temp": "degC", "line_pressure": "bar", "flow": "L/min", "pressure_head": "bar"}
    # CF conventions: flag_values / flag_meanings on each quality column
    assert schema.field("flow_quality").metadata[b"flag_values"] == b"1 2 3 4 9"
    info = json.loads(schema.metadata[b"countmill"])
    assert info["map"]["name"] == "wide-test-rig"
    assert info["layout"]["name"] == "wide" and info["layout"]["every_seconds"] == 60.0
    assert set(CHANNELS) <= set(info["channels"])
    # the source's SHA-256 (hashed while the file is converted) is in the provenance
    assert info["source"]["sha256"] == hashlib.sha256(raw.read_bytes()).hexdigest()


def test_wide_csv_dtypes_and_sidecar(rig, tmp_path):
    folder, cmap, raw, tidy = rig
    out = tmp_path / "wide.csv"
    convert_file(raw, cmap, out, layout="wide", every="1min")
    plain = pd.read_csv(out)  # reference: pandas' own type inference, as a spreadsheet user gets it
    for ch in CHANNELS:
        assert plain[ch].dtype == np.float64, ch
        assert plain[f"{ch}_quality"].dtype == np.int64, ch
        assert plain[f"{ch}_count"].dtype == np.int64, ch
    assert plain["time"].str.endswith("Z").all()
    # the CSV holds the same numbers as the Parquet (floats written shortest round-trip)
    convert_file(raw, cmap, tmp_path / "wide.parquet", layout="wide", every="1min")
    parquet = pd.read_parquet(tmp_path / "wide.parquet")
    for ch in CHANNELS:
        np.testing.assert_array_equal(plain[ch].to_numpy(), parquet[ch].to_numpy())
    sidecar = json.loads((tmp_path / "wide.csv-metadata.json").read_text())
    columns = {c["name"]: c for c in sidecar["tableSchema"]["columns"]}
    # W3C CSVW: datatype per column; units as in the map
    assert columns["line_pressure"]["datatype"] == "double" and columns["line_pressure"]["unit"] == "bar"
    assert columns["line_pressure_quality"]["datatype"] == "byte"
    assert columns["time"]["datatype"] == "dateTime"
    assert sidecar["countmill"]["layout"]["name"] == "wide"


def test_late_samples_left_out_and_counted(tmp_path):
    cmap = tmp_path / "rig.toml"
    cmap.write_text(MAP)
    raw = write_raw(tmp_path / "stepped.csv", scans=260, step_back_s=2 * 3600.0, step_at=140, seed=11)
    convert_file(raw, cmap, tmp_path / "tidy.parquet")
    tidy = pd.read_parquet(tmp_path / "tidy.parquet")
    ref = reference(tidy, "1min", settle_s=3600.0)
    assert ref[4], "the crafted step back should make some samples late"
    outputs = []
    for chunk in (1, 13, 1000):
        out = tmp_path / f"wide-{chunk}.parquet"
        result = convert_file(raw, cmap, out, layout="wide", every="1min", chunk_rows=chunk)
        wide = pd.read_parquet(out)
        # reference: pandas groupby of the tidy rows that the settle rule does not call late
        check_against(wide, ref, CHANNELS)
        assert result.late_samples == ref[4]
        assert result.notes and "late" in result.notes[0]
        outputs.append(wide)
    pd.testing.assert_frame_equal(outputs[0], outputs[1], check_exact=True)
    meta = pq.ParquetFile(tmp_path / "wide-1000.parquet").metadata.metadata
    assert json.loads(meta[b"countmill.late_samples"]) == ref[4]


@pytest.mark.parametrize(
    "text, seconds",
    [("1s", 1), ("10s", 10), ("1min", 60), ("15min", 900), ("1h", 3600), ("1d", 86400), ("500ms", 0.5),
     ("2 min", 120), ("15T", 900), ("PT1M", 60), ("PT1H30M", 5400)],
)
def test_parse_every(text, seconds):
    # reference: the arithmetic of the units (1 min = 60 s, 1 h = 3600 s, ISO 8601 durations)
    assert parse_every(text) == round(seconds * 1_000_000)
    assert parse_every(text) == pd.Timedelta(seconds=seconds) // pd.Timedelta(microseconds=1)


@pytest.mark.parametrize("text", ["", "0s", "1 parsec", "1M", "-1min", "P1Y", "abc"])
def test_parse_every_rejects(text):
    with pytest.raises(UsageError):
        parse_every(text)


def test_cli_wide_and_bad_every(rig, tmp_path):
    folder, cmap, raw, tidy = rig
    out = tmp_path / "w.csv"
    runner = CliRunner()
    ok = runner.invoke(cli, ["convert", str(raw), "--map", str(cmap), "--layout", "wide", "--every", "1min", "-o", str(out)])
    assert ok.exit_code == 0, ok.output
    assert len(pd.read_csv(out)) == len(reference(tidy, "1min")[0])
    bad = runner.invoke(cli, ["convert", str(raw), "--map", str(cmap), "--layout", "wide", "--every", "3 parsecs", "-o", str(tmp_path / "x.csv")])
    assert bad.exit_code == 2  # contract §2: usage error, nothing written
    assert not (tmp_path / "x.csv").exists()


REVISED_MAP = """
[map]
name = "revised-rig"
timezone = "UTC"

[adc]
bits = 12
span = [0.0, 4.096]
coding = "straight"

[gains]
0 = 1

[[channel]]
id = 1
name = "tank_temp"
unit = "degC"
chain = [ { stage = "linear", slope = 100.0, intercept = 0.0 } ]

[[channel]]
id = 1
from = 2026-03-01T00:30:00
name = "tank_temp"
unit = "degF"
chain = [ { stage = "linear", slope = 180.0, intercept = 32.0 } ]
"""


def test_earlier_revision_in_another_unit_is_converted(tmp_path):
    cmap = tmp_path / "revised.toml"
    cmap.write_text(REVISED_MAP)
    lines = ["time,channel,code,gain"] + [
        f"{np.datetime64('2026-03-01T00:00:00', 's') + np.timedelta64(20 * k, 's')}Z,1,{250 + k % 7},0" for k in range(180)
    ]
    raw = tmp_path / "revised.csv"
    raw.write_text("\n".join(lines) + "\n")
    convert_file(raw, cmap, tmp_path / "tidy.parquet")
    convert_file(raw, cmap, tmp_path / "wide.parquet", layout="wide", every="10min")
    tidy = pd.read_parquet(tmp_path / "tidy.parquet")
    # reference: the definition of the Fahrenheit scale, degF = degC * 9/5 + 32
    in_f = np.where(tidy["unit"] == "degC", tidy["value"] * 9 / 5 + 32, tidy["value"])
    want = pd.Series(in_f).groupby(tidy["time"].dt.floor("10min").to_numpy()).mean()
    wide = pd.read_parquet(tmp_path / "wide.parquet")
    assert set(tidy["unit"]) == {"degC", "degF"}
    np.testing.assert_allclose(wide["tank_temp"].to_numpy(), want.to_numpy(), rtol=1e-12)
    assert pq.read_schema(tmp_path / "wide.parquet").field("tank_temp").metadata[b"units"] == b"degF"
