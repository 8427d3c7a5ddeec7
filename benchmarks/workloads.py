"""What ``benchmarks/run.py`` times: the generated logs and the steps run on them.

* the logs: a seeded day of the demo brewhouse logger (``demo_logs/make_day.py``, 0.01 s
  scan, no planted faults) as CSV, and the same samples as binary records;
* the steps: ``countmill convert``, the plain Arrow transcode (the floor), the readers
  alone, the per-row pandas script a user would otherwise write, and the converter's cost
  per record of a thermocouple channel against a linear one.
"""

from __future__ import annotations

import datetime as dt
import importlib.util
import re
import statistics
import sys
import time
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[1]
MAP = ROOT / "channel_maps" / "brewhouse.toml"
DATE = dt.date(2026, 11, 3)
SEED = 20261103
SCAN_S = 0.01

# --- the data -------------------------------------------------------------------------------

BINARY_INPUT = """[input]
format = "binary"
record = [
  { name = "time", dtype = "int64" },     # ms since local midnight 1970-01-01 (the logger's clock)
  { name = "channel", dtype = "uint16" },
  { name = "code", dtype = "int32" },
  { name = "gain", dtype = "uint8" },
  { name = "_status", dtype = "uint8" },
]
time_unit = "ms"
epoch = 1970-01-01T00:00:00
"""

BINARY_DTYPE = np.dtype({"names": ["time", "channel", "code", "gain", "_status"],
                         "formats": ["<i8", "<u2", "<i4", "<u1", "<u1"],
                         "offsets": [0, 8, 10, 14, 15], "itemsize": 16})


def _make_day_module():
    spec = importlib.util.spec_from_file_location("countmill_demo_make_day", ROOT / "demo_logs" / "make_day.py")
    module = importlib.util.module_from_spec(spec)
    sys.modules[spec.name] = module
    spec.loader.exec_module(module)
    return module


def binary_map(folder: Path) -> Path:
    """The demo map with its ``[input]`` table swapped for the binary record layout."""
    text = MAP.read_text()
    swapped, count = re.subn(r"(?ms)^\[input\]\n.*?(?=^\[)", BINARY_INPUT + "\n", text, count=1)
    if count != 1:
        raise SystemExit(f"{MAP}: no [input] table to replace")
    path = folder / "brewhouse-binary.toml"
    if not path.exists() or path.read_text() != swapped:
        path.write_text(swapped)
    return path


def data_files(folder: Path, lines: int) -> dict[str, Path]:
    """The CSV and binary logs of ``lines`` records (generated once, then cached)."""
    target = folder / f"lines-{lines}"
    csv = target / f"brewhouse-{DATE.isoformat()}.csv"
    binary = target / f"brewhouse-{DATE.isoformat()}.bin"
    if not (csv.exists() and binary.exists()):
        target.mkdir(parents=True, exist_ok=True)
        md = _make_day_module()
        print(f"generating {lines:,} lines in {target} ...", file=sys.stderr)
        made = md.make_day(target, DATE, seed=SEED, scan=SCAN_S, faults=False, max_lines=lines)
        if Path(made) != csv:
            Path(made).replace(csv)
        rec = md.simulate_day(DATE, seed=SEED, scan=SCAN_S, faults=False, max_lines=lines)
        write_binary(binary, rec["ms"], rec["channel"], rec["code"], rec["gain"])
    return {"csv": csv, "binary": binary}


def write_binary(path: Path, ms_of_day, channel, code, gain) -> None:
    """Binary records of the same samples as the CSV (times as local wall-clock ms)."""
    day_ms = (dt.datetime.combine(DATE, dt.time()) - dt.datetime(1970, 1, 1)) // dt.timedelta(milliseconds=1)
    tmp = path.with_name(path.name + ".part")
    with open(tmp, "wb") as fh:
        step = 1 << 21
        for a in range(0, len(ms_of_day), step):
            block = np.zeros(min(step, len(ms_of_day) - a), dtype=BINARY_DTYPE)
            block["time"] = day_ms + np.asarray(ms_of_day[a:a + step], dtype=np.int64)
            block["channel"] = channel[a:a + step]
            block["code"] = code[a:a + step]
            block["gain"] = gain[a:a + step]
            block.tofile(fh)
    tmp.replace(path)


# --- the steps ------------------------------------------------------------------------------

def step_convert(raw: Path, cmap, out: Path) -> int:
    from countmill.convert import convert_file

    return convert_file(raw, cmap, out).rows


def step_convert_io(raw: Path, cmap, out: Path) -> int:
    """``countmill convert`` with the conversion left out: the same reading, hashing, rows in
    file order, summary counts and Parquet writing of the eleven output columns, but each
    record passes through as read (no grouping by channel, no stages, no quality tests).
    What is left above the transcode here is countmill's input and output; what ``convert``
    takes above this is the conversion itself."""
    from countmill.convert import DEFAULT_CHUNK_ROWS, run_conversion
    from countmill.pipeline.output import ParquetSink

    return run_conversion(
        raw, cmap, out, lambda converter, provenance: ParquetSink(out, converter.names, converter.units, provenance),
        chunk_rows=DEFAULT_CHUNK_ROWS, converter=pass_through_converter(cmap),
    ).rows


def pass_through_converter(cmap):
    """A converter of ``cmap`` that leaves the conversion out (countmill is imported here,
    not at the top: the memory of the transcode's own process must not include it)."""
    from countmill.pipeline.convert import Converter, Rows

    class PassThrough(Converter):
        """Rows straight from the records: the channel's name and unit by its id, the code
        as volts and value, no flags (one array operation per output column)."""

        def __init__(self, cmap):
            super().__init__(cmap)
            ids = list(cmap.channels)
            self._name = np.full(max(ids) + 1, -1, dtype=np.int32)
            self._unit = np.full(max(ids) + 1, -1, dtype=np.int32)
            for cid, revisions in cmap.channels.items():
                self._name[cid] = self.name_index[revisions[0].name]
                self._unit[cid] = self.unit_index[revisions[0].unit]

        def convert(self, rec):
            n = len(rec)
            known = (rec.channel >= 0) & (rec.channel < len(self._name))
            channel = np.where(known, rec.channel, 0)
            volts = rec.code.astype(np.float64)
            self.rows_emitted += n
            return Rows(time_us=rec.time_us, line=rec.line, name=self._name[channel], channel_id=rec.channel,
                        code=rec.code, gain=rec.gain, volts=volts, value=volts, unit=self._unit[channel],
                        flags=np.zeros(n, dtype=np.int64), evaluated=np.ones(n, dtype=bool),
                        is_derived=np.zeros(n, dtype=bool))

    return PassThrough(cmap)


def step_transcode(raw: Path, out: Path) -> int:
    """The floor: stream the CSV through Arrow's parser into a Parquet writer, nothing else."""
    import pyarrow as pa
    import pyarrow.csv as pacsv
    import pyarrow.parquet as pq

    preamble = 0
    with open(raw, "rb") as fh:
        for line in fh:
            if line.startswith(b"#"):
                preamble += 1
                continue
            preamble += 1  # the header line
            break
    read = pacsv.ReadOptions(skip_rows=preamble, column_names=["time", "channel", "code", "gain"])
    types = pacsv.ConvertOptions(column_types={"time": pa.timestamp("ms"), "channel": pa.int32(),
                                               "code": pa.int32(), "gain": pa.int16()})
    rows = 0
    with pacsv.open_csv(raw, read_options=read, convert_options=types) as reader:
        with pq.ParquetWriter(out, reader.schema, compression="zstd") as writer:
            for batch in reader:
                writer.write_batch(batch)
                rows += batch.num_rows
    return rows


def step_read(raw: Path, spec, timezone: str) -> int:
    from countmill.pipeline.binary_reader import open_log

    records = 0
    with open_log(raw, spec, timezone) as reader:
        for block in reader.blocks():
            records += len(block)
    return records


# --- the per-row script a user would otherwise write -----------------------------------------

def per_row_params(map_path: Path) -> dict:
    """Per channel id: ADC, gains and the chain (each channel's first revision), calibration.

    What a careful user prepares once before the per-row loop: the map read with ``tomllib``,
    three-point thermistors turned into Steinhart-Hart coefficients, calibration points
    fitted. No quality tests, no revisions, no time-zone rules beyond pandas' localisation.
    """
    import tomllib

    doc = tomllib.loads(map_path.read_text())
    params = {}
    for entry in doc["channel"]:
        if entry["id"] in params:
            continue
        adc = entry.get("adc", doc["adc"])
        chain = []
        for stage in entry["chain"]:
            stage = dict(stage)
            if stage["stage"] == "thermistor" and "points" in stage:
                t_k = np.array([p[0] for p in stage["points"]]) + 273.15
                ln_r = np.log([p[1] for p in stage["points"]])
                a, b, c = np.linalg.solve(np.column_stack([np.ones(3), ln_r, ln_r ** 3]), 1.0 / t_k)
                stage.update(a=a, b=b, c=c)
            chain.append(stage)
        calibration = None
        if "calibration" in entry:
            points = np.array(entry["calibration"]["points"], dtype=float)
            calibration = np.polyfit(points[:, 0], points[:, 1], entry["calibration"].get("degree", 1))[::-1].tolist()
        params[entry["id"]] = {
            "name": entry["name"], "bits": adc["bits"], "lo": adc["span"][0], "hi": adc["span"][1],
            "twos": adc.get("coding") == "twos",
            "gains": {int(k): float(v) for k, v in entry.get("gains", doc["gains"]).items()},
            "chain": chain, "calibration": calibration,
        }
    return params


def per_row_script(csv_slice: Path, params: dict, out: Path) -> int:
    """What a user writes without countmill: read, one Python call per row, write.

    Every stage of the demo map in plain Python per row (IEC 60751 RTDs above 0 degC,
    Steinhart-Hart and beta thermistors, NIST thermocouple polynomials with the last
    cold-junction reading, bridge, load cell, 4-20 mA, table, polynomial, the cold-room
    calibration) and the derived pump power on the pump-current rows; no quality tests.
    """
    import bisect
    import math

    import pandas as pd

    from countmill.sensors import _nist_its90 as nist  # the published coefficients a user would paste

    a_cvd, b_cvd = 3.9083e-3, -5.775e-7  # IEC 60751 (0 degC and up)
    last = {}  # latest value per channel name, for the cold junction and the derived row

    def poly(coefficients, x):
        y = 0.0
        for c in reversed(coefficients):
            y = y * x + c
        return y

    def tc_emf(letter, t):
        for r in nist.REFERENCE[letter]:
            if t <= r.t_high:
                e = poly(r.c, t)
                if letter == "K" and t >= 0:
                    a0, a1, a2 = nist.K_EXPONENTIAL
                    e += a0 * math.exp(a1 * (t - a2) ** 2)
                return e
        return float("nan")

    def tc_temperature(letter, e):
        for r in nist.INVERSE[letter]:
            if e <= r.e_high:
                return poly(r.d, e)
        return float("nan")

    def stage_value(stage, x):
        kind = stage["stage"]
        if kind == "linear":
            return stage["slope"] * x + stage["intercept"]
        if kind == "polynomial":
            return poly(stage["coefficients"], x)
        if kind == "table":
            xs = [p[0] for p in stage["points"]]
            i = bisect.bisect_right(xs, x)
            if i == 0 or i == len(xs):
                return float("nan")
            (x0, y0), (x1, y1) = stage["points"][i - 1], stage["points"][i]
            return y0 + (y1 - y0) * (x - x0) / (x1 - x0)
        if kind == "current_excitation":
            return x / stage["amps"] - stage.get("lead_ohms", 0.0)
        if kind == "divider":
            exc, r = stage["excitation"], stage["r_fixed"]
            if not 0 < x < exc:
                return float("nan")
            return r * x / (exc - x) if stage["sensor"] == "low" else r * (exc - x) / x
        if kind == "inverting_amp":
            if stage["sensor"] == "rf":
                return -x * stage["ri"] / stage["vin"]
            return -stage["vin"] * stage["rf"] / x - stage.get("series", 0.0)
        if kind == "rtd":
            ratio = x / stage.get("r0", 100.0)
            disc = a_cvd * a_cvd - 4 * b_cvd * (1 - ratio)
            return (-a_cvd + math.sqrt(disc)) / (2 * b_cvd) if disc >= 0 else float("nan")
        if kind == "thermistor":
            if not x > 0:
                return float("nan")
            if "beta" in stage:
                return 1 / (1 / 298.15 + math.log(x / stage["r25"]) / stage["beta"]) - 273.15
            ln_r = math.log(x)
            return 1 / (stage["a"] + stage["b"] * ln_r + stage["c"] * ln_r ** 3) - 273.15
        if kind == "thermocouple":
            t_cj = last.get(stage["cold_junction"], float("nan"))
            return tc_temperature(stage["type"], 1000 * x + tc_emf(stage["type"], t_cj))
        if kind == "bridge":
            vr = x / stage["excitation"]
            return 1e6 * 4 * vr / (stage.get("gauge_factor", 2.0) * (1 - 2 * vr))
        if kind == "ratiometric":
            return (x / stage["excitation"] - stage.get("zero", 0.0)) / stage["rated_output"] * stage["capacity"]
        if kind == "current_loop":
            ma = x / stage["shunt"] * 1000
            return stage["low"] + (ma - 4) / 16 * (stage["high"] - stage["low"])
        raise ValueError(kind)

    def convert_row(row):
        p = params.get(int(row["channel"]))
        if p is None:
            return float("nan")
        lsb = (p["hi"] - p["lo"]) / 2 ** p["bits"]
        base = (p["lo"] + p["hi"]) / 2 if p["twos"] else p["lo"]
        x = (base + int(row["code"]) * lsb) / p["gains"].get(int(row["gain"]), float("nan"))
        try:
            for stage in p["chain"]:
                x = stage_value(stage, x)
        except (ValueError, ZeroDivisionError):
            x = float("nan")
        if p["calibration"] is not None:
            x = poly(p["calibration"], x)
        last[p["name"]] = x
        return x

    def pump_power(row):  # the derived row: supply volts times pump current, in kW
        return last.get("supply_volts", float("nan")) * row["value"] / 1000 if row["channel"] == 3 else float("nan")

    df = pd.read_csv(csv_slice, comment="#")
    df["time"] = pd.to_datetime(df["time"]).dt.tz_localize("Europe/Dublin", ambiguous="NaT", nonexistent="NaT")
    df["value"] = df.apply(convert_row, axis=1)
    df["pump_power"] = df.apply(pump_power, axis=1)
    df.to_parquet(out)
    return len(df)


def write_slice(csv: Path, rows: int, target: Path) -> Path:
    with open(csv, "rb") as src, open(target, "wb") as dst:
        taken = -1  # the header line comes first
        for line in src:
            if line.startswith(b"#"):
                continue
            dst.write(line)
            taken += 1
            if taken >= rows:
                break
    return target


# --- thermocouple against linear ----------------------------------------------------------------

TC_MAP = """[map]
name = "tc-vs-linear"
timezone = "UTC"
[adc]
bits = 16
span = [-5.0, 5.0]
coding = "twos"
[gains]
0 = 1
3 = 1000
[[channel]]
id = 0
name = "junction"
unit = "degC"
chain = [{ stage = "linear", slope = 100.0, intercept = -50.0 }]
[[channel]]
id = 1
name = "linear_probe"
unit = "degC"
chain = [{ stage = "linear", slope = 100.0, intercept = 0.0 }]
[[channel]]
id = 2
name = "type_k_probe"
unit = "degC"
chain = [{ stage = "thermocouple", type = "K", cold_junction = "junction" }]
"""


def _tc_vs_linear_setup(folder: Path, n: int):
    """The map of the thermocouple-against-linear comparisons and ``n`` samples of each
    channel: cold-junction codes (about 20 degC) and the second channel's codes."""
    from countmill.chanmap import load_map

    path = folder / "tc-vs-linear.toml"
    path.write_text(TC_MAP)
    rng = np.random.default_rng(SEED)
    junction = np.full(n, 4600) + rng.integers(-3, 4, n)
    other = (2000 + 1500 * np.sin(np.arange(n) / 5000)).astype(np.int64) + rng.integers(-3, 4, n)
    return load_map(path), junction, other


def tc_vs_linear(folder: Path, records: int, repeat: int, stream: int = 6) -> dict:
    """Converter cost per record of a type K channel and of a linear channel.

    Three streams of ``stream`` consecutive chunks with the same times: the cold-junction
    channel alone, with a linear channel interleaved, and with a thermocouple channel
    interleaved; the extra time per extra record is the channel's cost. Each stream runs
    through one converter, as a file does (state carried from chunk to chunk, the memory
    allocator in the steady state of that mix), and the streams are timed in turn, round
    after round. ``records`` per chunk: by default each channel has as many records as one
    channel of the demo map has in a default chunk (250,000 records over 19 channels), the
    array length the converter works on in the main benchmark.
    """
    from countmill.pipeline.convert import Converter
    from countmill.pipeline.reader import Records

    half = records // 2
    total = half * stream
    cmap, junction_all, other_all = _tc_vs_linear_setup(folder, total)
    t_all = 1_790_000_000_000_000 + np.arange(total, dtype=np.int64) * 10_000

    def chunk(channel_id: int | None, gain: int, k: int) -> Records:
        part = slice(k * half, (k + 1) * half)
        t, junction_code, other_code = t_all[part], junction_all[part], other_all[part]
        if channel_id is None:
            first = 1 + k * half
            return Records(np.arange(first, first + half), t.copy(), np.zeros(half, np.int64),
                           np.zeros(half, np.int64), junction_code.astype(np.int64), np.zeros(half, np.int64))
        n = 2 * half
        first = 1 + k * n
        time_us = np.repeat(t, 2) + np.tile([0, 5_000], half)
        channel = np.tile([0, channel_id], half)
        code = np.empty(n, np.int64)
        code[0::2], code[1::2] = junction_code, other_code
        gains = np.tile([0, gain], half)
        return Records(np.arange(first, first + n), time_us, np.zeros(n, np.int64), channel.astype(np.int64), code,
                       gains.astype(np.int64))

    streams = {
        "junction only": [chunk(None, 0, k) for k in range(stream)],
        "with linear": [chunk(1, 0, k) for k in range(stream)],
        "with type K": [chunk(2, 3, k) for k in range(stream)],
    }
    times: dict[str, list[float]] = {k: [] for k in streams}
    rounds = max(repeat, 3) * max(3, 200_000 // max(half * stream, 1))
    for _ in range(rounds):
        for name, chunks in streams.items():
            conv = Converter(cmap)
            start = time.perf_counter()
            for rec in chunks:
                conv.convert(rec)
            times[name].append((time.perf_counter() - start) / stream)
    med = {k: statistics.median(v) for k, v in times.items()}
    linear_us = (med["with linear"] - med["junction only"]) / half * 1e6
    tc_us = (med["with type K"] - med["junction only"]) / half * 1e6
    return {
        "records_per_channel": half,
        "chunks_per_stream": stream,
        "seconds_per_chunk": med,
        "linear_us_per_record": linear_us,
        "thermocouple_us_per_record": tc_us,
        # the extra cost of a thermocouple record over a linear one (maths, cold junction)
        "thermocouple_over_linear": tc_us / linear_us if linear_us > 0 else None,
        # the whole chunks (cold junction included): what a two-channel logger would see
        "chunk_with_type_k_over_chunk_with_linear": med["with type K"] / med["with linear"],
    }


def tc_vs_linear_files(folder: Path, lines: int, repeat: int) -> dict:
    """The same comparison end to end: ``countmill convert`` of three CSV logs.

    The cold-junction channel alone (``lines / 2`` lines), and with a linear channel or a
    type K channel interleaved (``lines`` lines), converted to Parquet and timed in turn,
    round after round; what a channel adds to a whole conversion (reading, conversion,
    quality tests, writing) is the time over the junction-only file, per added line.
    """
    import pyarrow as pa
    import pyarrow.csv as pacsv

    from countmill.convert import convert_file

    half = lines // 2
    cmap, junction, other = _tc_vs_linear_setup(folder, half)
    start = np.datetime64("2026-11-03T00:00:00.000", "ms")
    t = start + np.arange(half, dtype=np.int64) * 10

    def write(name: str, channel_id: int | None, gain: int) -> Path:
        path = folder / f"tc-vs-linear-{name}-{lines}.csv"
        if path.exists():
            return path
        if channel_id is None:
            time_ms, channel, code, gains = t, np.zeros(half, np.int64), junction, np.zeros(half, np.int64)
        else:
            time_ms = np.repeat(t, 2) + np.tile(np.array([0, 5], dtype="timedelta64[ms]"), half)
            channel = np.tile([0, channel_id], half)
            code = np.empty(2 * half, np.int64)
            code[0::2], code[1::2] = junction, other
            gains = np.tile([0, gain], half)
        table = pa.table({"time": pa.array(np.datetime_as_string(time_ms, unit="ms")), "channel": channel,
                          "code": code, "gain": gains})
        pacsv.write_csv(table, path, pacsv.WriteOptions(quoting_style="none"))
        return path

    files = {"junction only": write("junction", None, 0), "with linear": write("linear", 1, 0),
             "with type K": write("k", 2, 3)}
    times: dict[str, list[float]] = {k: [] for k in files}
    for _ in range(max(repeat, 3)):
        for name, path in files.items():
            begin = time.perf_counter()
            convert_file(path, cmap, folder / "tc-vs-linear.parquet")
            times[name].append(time.perf_counter() - begin)
    med = {k: statistics.median(v) for k, v in times.items()}
    linear_us = (med["with linear"] - med["junction only"]) / half * 1e6
    tc_us = (med["with type K"] - med["junction only"]) / half * 1e6
    return {
        "lines_with_second_channel": 2 * half,
        "seconds": med,
        "linear_us_per_line": linear_us,
        "thermocouple_us_per_line": tc_us,
        "thermocouple_over_linear": tc_us / linear_us if linear_us > 0 else None,
        "file_with_type_k_over_file_with_linear": med["with type K"] / med["with linear"],
    }
