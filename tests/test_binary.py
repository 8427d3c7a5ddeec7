"""Binary raw logs: fixed-size little-endian records declared in the map's ``[input]``.

The checks are by construction: the same records written as CSV text and as binary records
must give the same output table (every column, every flag), whatever the chunk size and
whether the file is gzip-compressed; what the binary layout adds (the epoch and unit of the
time count, a file header, records that cannot be written as read, a cut-off last record)
is checked against values computed here with the standard library (``zoneinfo``,
``datetime``).
"""

from __future__ import annotations

import datetime as dt
import gzip
import zoneinfo
from pathlib import Path

import numpy as np
import pandas as pd
import pyarrow.parquet as pq
import pytest

from countmill.chanmap import load_map
from countmill.convert import DEFAULT_CHUNK_ROWS, convert_file
from countmill.errors import MapError

ZONE = "Europe/Dublin"
#: the logger's wall clock runs through the fall-back hour of 25 October 2026 (02:00 IST ->
#: 01:00 GMT, tz database): the hour from 01:00 to 02:00 local time comes twice
FOLD_DAY = dt.date(2026, 10, 25)

RECORD = [
    {"name": "time", "dtype": "int64"},
    {"name": "channel", "dtype": "uint16"},
    {"name": "code", "dtype": "int32"},
    {"name": "gain", "dtype": "uint8"},
    {"name": "_status", "dtype": "uint8"},
]
RECORD_DTYPE = np.dtype({"names": ["time", "channel", "code", "gain", "_status"],
                         "formats": ["<i8", "<u2", "<i4", "<u1", "<u1"],
                         "offsets": [0, 8, 10, 14, 15], "itemsize": 16})

CHANNELS = [
    # 12-bit ADC over 0 ... 4.096 V (conftest): 1 mV per code
    {"id": 0, "name": "board", "unit": "degC", "chain": [{"stage": "linear", "slope": 100.0, "intercept": -50.0}],
     "range": [-40.0, 85.0], "qc": {"rate": 0.5}},
    {"id": 1, "name": "probe", "unit": "degC", "chain": [{"stage": "thermocouple", "type": "K", "cold_junction": "board"}],
     "qc": {"spike": 3.0}},
    {"id": 2, "name": "level", "unit": "percent", "chain": [{"stage": "linear", "slope": 25.0}],
     "range": [0.0, 100.0], "expect": [5.0, 95.0], "qc": {"spike": 10.0, "flat": {"tolerance": 0.0, "seconds": 60}}},
    {"id": 3, "name": "amps", "unit": "A", "chain": [{"stage": "linear", "slope": 10.0, "unit": "A"}]},
]
DERIVED = [{"name": "load", "unit": "A", "expression": "level * amps / 100"}]


def _records(n_scans: int = 400, seed: int = 3) -> dict[str, np.ndarray]:
    """Scans of channels 0-3 (plus an unmapped channel 9 now and then) over an hour of wall
    time from 01:40 through the fall-back step; codes include the rails, an invalid code and
    an unknown gain code."""
    rng = np.random.default_rng(seed)
    start = dt.datetime.combine(FOLD_DAY, dt.time(1, 40))
    step = dt.timedelta(seconds=3600 // n_scans)
    walls = [start + k * step for k in range(n_scans)]
    # the clock steps back one hour at 02:00 (the logger follows local time)
    fold_at = next(i for i, w in enumerate(walls) if w >= dt.datetime.combine(FOLD_DAY, dt.time(2, 0)))
    walls = walls[:fold_at] + [w - dt.timedelta(hours=1) for w in walls[fold_at:]]
    times, channels, codes, gains = [], [], [], []
    for k, wall in enumerate(walls):
        for step, channel in enumerate([0, 1, 2, 3] + ([9] if k % 37 == 5 else [])):
            times.append(wall + dt.timedelta(milliseconds=5 * step))
            channels.append(channel)
            if channel == 0:
                code, gain = 700 + int(rng.integers(-2, 3)), 0           # about 20 degC
            elif channel == 1:
                code, gain = 300 + int(rng.integers(0, 40)), 2           # a few mV at the probe
            elif channel == 2:
                code, gain = 2000 + (k // 15) * 3, 0                      # steps, repeated codes
            elif channel == 3:
                code, gain = int(rng.integers(100, 400)), 1
            else:
                code, gain = 5, 0
            codes.append(code)
            gains.append(gain)
    codes[17], codes[29], gains[42], codes[61] = 0, 4095, 7, 4096   # rails, unknown gain, invalid
    epoch = dt.datetime(1970, 1, 1)
    ms = np.array([(t - epoch) // dt.timedelta(milliseconds=1) for t in times], dtype=np.int64)
    return {"ms": ms, "wall": times, "channel": np.array(channels), "code": np.array(codes), "gain": np.array(gains)}


def _write_csv(path: Path, rec: dict, gz: bool = False) -> Path:
    text = "".join(f"{t.isoformat(timespec='milliseconds')},{c},{k},{g}\n"
                   for t, c, k, g in zip(rec["wall"], rec["channel"], rec["code"], rec["gain"]))
    data = text.encode()
    path.write_bytes(gzip.compress(data, mtime=0) if gz else data)
    return path


def _binary(rec: dict, time=None) -> np.ndarray:
    block = np.zeros(len(rec["ms"]), dtype=RECORD_DTYPE)
    block["time"] = rec["ms"] if time is None else time
    block["channel"], block["code"], block["gain"] = rec["channel"], rec["code"], rec["gain"]
    block["_status"] = 0xA5
    return block


def _write_binary(path: Path, data: bytes, gz: bool = False) -> Path:
    path.write_bytes(gzip.compress(data, mtime=0) if gz else data)
    return path


def _table(path: Path) -> pd.DataFrame:
    """The output rows as pandas (NaN-aware comparison), without the provenance."""
    return pq.read_table(path).replace_schema_metadata(None).to_pandas()


@pytest.fixture
def maps(make_map):
    text_map = make_map(CHANNELS, DERIVED, timezone=ZONE, file_name="text.toml")
    binary_map = make_map(CHANNELS, DERIVED, timezone=ZONE, file_name="binary.toml",
                          input={"format": "binary", "record": RECORD, "time_unit": "ms", "epoch": dt.datetime(1970, 1, 1)})
    return text_map, binary_map


def test_binary_and_csv_of_the_same_records_give_the_same_table(tmp_path, maps):
    text_map, binary_map = maps
    rec = _records()
    csv = _write_csv(tmp_path / "day.csv", rec)
    binary = _write_binary(tmp_path / "day.bin", _binary(rec).tobytes())
    a = convert_file(csv, text_map, tmp_path / "csv.parquet")
    b = convert_file(binary, binary_map, tmp_path / "bin.parquet")
    assert (a.rows, a.rejects, a.records) == (b.rows, b.rejects, b.records)
    ta, tb = _table(a.output), _table(b.output)
    pd.testing.assert_frame_equal(ta, tb)
    # the records really pass through the fold (read in order: UTC does not step back), the
    # rails, the unknown gain, the invalid code and the unmapped channel
    names = set()
    for flags in ta["flags"].unique():
        names.update(_decoded(int(flags)))
    assert {"time_ambiguous", "saturated_low", "saturated_high", "unknown_gain", "invalid_code",
            "unmapped_channel"} <= names
    assert "time_out_of_order" not in names
    assert ta["line"].tolist()[:3] == [1, 2, 3]  # the record number, as the CSV's line number


def _decoded(flags: int) -> list[str]:
    from countmill.flags import decode

    return decode(flags)


@pytest.mark.parametrize("chunk_rows", [1, 7, 1000])
def test_binary_output_does_not_depend_on_chunk_rows(tmp_path, maps, chunk_rows):
    _, binary_map = maps
    rec = _records(n_scans=150)
    binary = _write_binary(tmp_path / "day.bin", _binary(rec).tobytes())
    ref = convert_file(binary, binary_map, tmp_path / "ref.parquet", chunk_rows=DEFAULT_CHUNK_ROWS)
    out = convert_file(binary, binary_map, tmp_path / f"c{chunk_rows}.parquet", chunk_rows=chunk_rows)
    pd.testing.assert_frame_equal(_table(ref.output), _table(out.output))


@pytest.mark.parametrize("kind", ["binary", "csv"])
def test_gzip_input_gives_the_same_output_as_plain(tmp_path, maps, kind):
    text_map, binary_map = maps
    rec = _records(n_scans=200)
    if kind == "binary":
        data = _binary(rec).tobytes() + b"\x01\x02\x03"  # with a cut-off last record
        plain = _write_binary(tmp_path / "day.bin", data)
        packed = _write_binary(tmp_path / "day.bin.gz", data, gz=True)
        cmap = binary_map
    else:
        plain = _write_csv(tmp_path / "day.csv", rec)
        packed = _write_csv(tmp_path / "day.csv.gz", rec, gz=True)
        cmap = text_map
    a = convert_file(plain, cmap, tmp_path / "plain.parquet", chunk_rows=97)
    b = convert_file(packed, cmap, tmp_path / "packed.parquet", chunk_rows=97)
    pd.testing.assert_frame_equal(_table(a.output), _table(b.output))
    assert a.rejects == b.rejects
    if a.rejects_path:
        assert a.rejects_path.read_text() == b.rejects_path.read_text()


def test_a_partial_last_record_is_one_reject(tmp_path, maps):
    _, binary_map = maps
    rec = _records(n_scans=50)
    whole = _binary(rec)
    raw = _write_binary(tmp_path / "cut.bin", whole.tobytes() + whole[:1].tobytes()[:11])
    result = convert_file(raw, binary_map, tmp_path / "cut.parquet")
    assert result.records == len(whole)
    assert result.rejects == 1 and result.exit_code == 3
    rejects = pd.read_csv(result.rejects_path)
    assert rejects["line"].tolist() == [len(whole) + 1]
    assert "partial record" in rejects["reason"][0] and "11 of 16 bytes" in rejects["reason"][0]
    assert rejects["text"][0] == whole[:1].tobytes()[:11].hex(" ")


def test_the_cli_converts_a_binary_log(tmp_path, maps, convert):
    _, binary_map = maps
    rec = _records(n_scans=30)
    raw = _write_binary(tmp_path / "day.bin", _binary(rec).tobytes())
    result, out = convert(raw, binary_map, "day.parquet")
    assert result.exit_code == 0, result.output
    assert len(out.df) == len(rec["ms"]) + 30  # one derived row per scan


# --- the time count: unit, epoch and range ---------------------------------------------------

def _one_channel_map(make_map, **input_options):
    record = input_options.pop("record", [{"name": "time", "dtype": "int64"}, {"name": "channel", "dtype": "uint8"},
                                          {"name": "code", "dtype": "uint16"}])
    channels = [{"id": 1, "name": "v", "unit": "V", "chain": [{"stage": "linear", "slope": 1.0}]}]
    return make_map(channels, timezone=ZONE, input={"format": "binary", "record": record, **input_options})


def _plain(times, dtype="<i8", codes=None, channel=1):
    layout = np.dtype({"names": ["time", "channel", "code"], "formats": [dtype, "<u1", "<u2"],
                       "offsets": [0, np.dtype(dtype).itemsize, np.dtype(dtype).itemsize + 1],
                       "itemsize": np.dtype(dtype).itemsize + 3})
    block = np.zeros(len(times), dtype=layout)
    block["time"], block["channel"] = times, channel
    block["code"] = 100 if codes is None else codes
    return block.tobytes()


def test_an_epoch_with_an_offset_counts_utc_instants(tmp_path, make_map):
    epoch = dt.datetime(2026, 3, 29, 0, 0, tzinfo=dt.timezone(dt.timedelta(hours=2)))
    cmap = _one_channel_map(make_map, time_unit="s", epoch=epoch)
    raw = _write_binary(tmp_path / "t.bin", _plain([0, 3600, 7200]))
    out = _table(convert_file(raw, cmap, tmp_path / "t.parquet").output)
    expected = [epoch + dt.timedelta(seconds=s) for s in (0, 3600, 7200)]
    assert [t.to_pydatetime() for t in out["time"]] == [e.astimezone(dt.timezone.utc) for e in expected]
    assert (out["flags"] == 0).all()


def test_a_naive_epoch_counts_wall_clock_time_in_the_map_zone(tmp_path, make_map):
    # 29 March 2026, Europe/Dublin: 01:00 GMT -> 02:00 IST; 01:30 local does not exist
    cmap = _one_channel_map(make_map, time_unit="us", epoch=dt.datetime(2026, 3, 29))
    walls = [dt.timedelta(minutes=m) for m in (30, 90, 150)]
    raw = _write_binary(tmp_path / "t.bin", _plain([w // dt.timedelta(microseconds=1) for w in walls]))
    out = _table(convert_file(raw, cmap, tmp_path / "t.parquet").output)
    zone = zoneinfo.ZoneInfo(ZONE)
    first = (dt.datetime(2026, 3, 29) + walls[0]).replace(tzinfo=zone).astimezone(dt.timezone.utc)
    last = (dt.datetime(2026, 3, 29) + walls[2]).replace(tzinfo=zone).astimezone(dt.timezone.utc)
    got = [t.to_pydatetime() for t in out["time"]]
    assert got[0] == first and got[2] == last
    # the nonexistent 01:30 is read with the offset before the transition (GMT), and flagged
    assert got[1] == dt.datetime(2026, 3, 29, 1, 30, tzinfo=dt.timezone.utc)
    assert _decoded(int(out["flags"][1])) == ["time_ambiguous"]


@pytest.mark.parametrize(("unit", "count", "expected_us"), [
    ("s", 7, 7_000_000),
    ("ms", 1234, 1_234_000),
    ("us", 987_654, 987_654),
    ("ns", 1_500, 2),       # 1.5 µs: to the nearest µs, halves to even
    ("ns", 2_500, 2),
    ("ns", 2_501, 3),
])
def test_the_time_unit(tmp_path, make_map, unit, count, expected_us):
    cmap = _one_channel_map(make_map, time_unit=unit, epoch=dt.datetime(2026, 1, 1, tzinfo=dt.timezone.utc))
    raw = _write_binary(tmp_path / "t.bin", _plain([count]))
    out = _table(convert_file(raw, cmap, tmp_path / "t.parquet").output)
    assert out["time"][0].to_pydatetime() == dt.datetime(2026, 1, 1, tzinfo=dt.timezone.utc) + dt.timedelta(microseconds=expected_us)


def test_float_times_and_a_file_header(tmp_path, make_map):
    record = [{"name": "_sequence", "dtype": "uint32"}, {"name": "time", "dtype": "float64"},
              {"name": "channel", "dtype": "uint8"}, {"name": "code", "dtype": "uint16"}]
    cmap = _one_channel_map(make_map, record=record, time_unit="s", header_bytes=12,
                            epoch=dt.datetime(2026, 1, 1, tzinfo=dt.timezone.utc))
    layout = np.dtype({"names": ["_sequence", "time", "channel", "code"], "formats": ["<u4", "<f8", "<u1", "<u2"],
                       "offsets": [0, 4, 12, 13], "itemsize": 15})
    block = np.zeros(3, dtype=layout)
    block["_sequence"], block["time"], block["channel"], block["code"] = [7, 8, 9], [0.25, 1.5, np.nan], 1, [10, 20, 30]
    raw = _write_binary(tmp_path / "t.bin", b"LOGGER-HEAD\x00" + block.tobytes())
    result = convert_file(raw, cmap, tmp_path / "t.parquet")
    out = _table(result.output)
    base = dt.datetime(2026, 1, 1, tzinfo=dt.timezone.utc)
    assert [t.to_pydatetime() for t in out["time"]] == [base + dt.timedelta(seconds=0.25), base + dt.timedelta(seconds=1.5)]
    assert out["code"].tolist() == [10, 20] and out["line"].tolist() == [1, 2]
    rejects = pd.read_csv(result.rejects_path)
    assert rejects["line"].tolist() == [3] and "time" in rejects["reason"][0]


def test_values_that_do_not_fit_the_output_are_rejects(tmp_path, make_map):
    record = [{"name": "time", "dtype": "uint64"}, {"name": "channel", "dtype": "uint8"}, {"name": "code", "dtype": "uint32"}]
    cmap = _one_channel_map(make_map, record=record, time_unit="ms", epoch=dt.datetime(2026, 1, 1, tzinfo=dt.timezone.utc))
    layout = np.dtype({"names": ["time", "channel", "code"], "formats": ["<u8", "<u1", "<u4"],
                       "offsets": [0, 8, 9], "itemsize": 13})
    block = np.zeros(4, dtype=layout)
    block["time"] = [1000, 2**63 + 5, 3000, 4000]
    block["channel"] = 1
    block["code"] = [5, 6, 2**31, 8]   # 2^31 does not fit the int32 code column
    result = convert_file(_write_binary(tmp_path / "t.bin", block.tobytes()), cmap, tmp_path / "t.parquet")
    out = _table(result.output)
    assert out["line"].tolist() == [1, 4]
    rejects = pd.read_csv(result.rejects_path)
    assert rejects["line"].tolist() == [2, 3]
    assert rejects["reason"][0].startswith("time ")
    assert rejects["reason"][1] == "code 2147483648 is out of range (the output column is 32-bit)"
    assert rejects["text"][1] == block[2:3].tobytes().hex(" ")


@pytest.mark.parametrize(("input_options", "words"), [
    ({"format": "binary"}, "needs record"),
    ({"format": "binary", "record": [{"name": "time", "dtype": "int64"}, {"name": "code", "dtype": "int16"}]}, "channel"),
    ({"format": "binary", "record": [{"name": "time", "dtype": "int64"}, {"name": "channel", "dtype": "float32"},
                                     {"name": "code", "dtype": "int16"}]}, "integer type"),
    ({"format": "binary", "record": [{"name": "stamp", "dtype": "int64"}]}, "unknown field name"),
    ({"format": "binary", "record": [{"name": "time", "dtype": "int24"}]}, "dtype"),
    ({"record": [{"name": "time", "dtype": "int64"}]}, "binary"),
])
def test_a_wrong_record_layout_is_a_map_error(make_map, input_options, words):
    channels = [{"id": 1, "name": "v", "unit": "V", "chain": [{"stage": "linear", "slope": 1.0}]}]
    path = make_map(channels, input=input_options)
    with pytest.raises(MapError) as err:
        load_map(path)
    assert words in str(err.value)
