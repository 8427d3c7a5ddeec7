"""Summarise a tidy countmill output for the day report, in one streaming pass.

Only the columns the report needs are read (``time channel code gain_code value quality
flags``), in batches of 262,144 rows (the next one decoded in a thread meanwhile); every
statistic is a numpy ``bincount`` or ``minimum.at``/``maximum.at`` per batch, or an Arrow
hash aggregation for the code histograms, so memory does not grow with the day and a large
day reads far faster than it converts.

Plot decimation: the period is cut into ``columns`` equal slices (one per pixel column of
the plot); per channel, slice and quality class (usable: good or not evaluated; suspect;
bad) the minimum and the maximum value are kept. Drawing both for every slice keeps every
spike visible however many samples fall in one pixel.
"""

from __future__ import annotations

import csv
import json
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pyarrow as pa
import pyarrow.compute as pc
import pyarrow.csv as pacsv
import pyarrow.parquet as pq

from countmill.errors import InputError, UsageError
from countmill.flags import ALL_FLAGS, Quality, flag_name

NEEDED = ["time", "channel", "code", "gain_code", "value", "quality", "flags"]
BATCH_ROWS = 1 << 18
LEVELS = [int(q) for q in Quality]  # 1 2 3 4 9
#: plot classes: usable (good, not evaluated), suspect, bad
CLASSES = ("usable", "suspect", "bad")


@dataclass
class CodeCounts:
    """How often each (gain code, ADC code) pair occurred in one channel revision."""

    gain: np.ndarray
    code: np.ndarray
    count: np.ndarray


@dataclass
class ChannelSummary:
    name: str
    meta: dict  # the provenance entry of the channel
    levels: np.ndarray  # samples at quality 1 2 3 4 9
    usable_n: int
    usable_sum: float
    flag_counts: dict[str, int]
    #: per plot class: min and max per pixel column (NaN where none)
    low: dict[str, np.ndarray]
    high: dict[str, np.ndarray]
    missing: np.ndarray  # samples without value per pixel column
    codes: dict[int, CodeCounts] = field(default_factory=dict)  # revision index -> counts

    @property
    def unit(self) -> str:
        return self.meta.get("unit") or ""

    @property
    def derived(self) -> bool:
        return self.meta.get("id") is None

    @property
    def samples(self) -> int:
        return int(self.levels.sum())

    @property
    def minimum(self) -> float:
        return float(np.nanmin(self.low["usable"])) if self.usable_n else float("nan")

    @property
    def maximum(self) -> float:
        return float(np.nanmax(self.high["usable"])) if self.usable_n else float("nan")

    @property
    def mean(self) -> float:
        return self.usable_sum / self.usable_n if self.usable_n else float("nan")

    def top_flags(self, k: int = 3) -> list[tuple[str, int]]:
        ranked = sorted(self.flag_counts.items(), key=lambda item: (-item[1], item[0]))
        return [(name, n) for name, n in ranked if n][:k]


@dataclass
class DaySummary:
    path: Path
    provenance: dict
    rows: int
    unmapped: int
    rejects: int | None
    start_us: int
    end_us: int
    columns: int
    channels: list[ChannelSummary]

    def column_times_us(self) -> np.ndarray:
        """Start of each pixel column [µs since the epoch, UTC]."""
        width = (self.end_us - self.start_us + 1) / self.columns
        return self.start_us + np.arange(self.columns) * width


def count_rejects(path: Path) -> int | None:
    """Entries in the rejects file next to ``path`` (``OUT.rejects.csv``), None if none."""
    rejects = path.with_name(path.name + ".rejects.csv")
    if not rejects.exists():
        return None
    with open(rejects, newline="", encoding="utf-8", errors="replace") as fh:
        return max(0, sum(1 for _ in csv.reader(fh)) - 1)


def _open(path: Path):
    """(provenance, batch iterator factory, (start, end) or None) for a tidy Parquet or CSV."""
    if path.suffix.lower() == ".csv":
        sidecar = path.with_name(path.name + "-metadata.json")
        if not sidecar.exists():
            raise InputError(f"{path}: no {sidecar.name} beside it; was it written by countmill?")
        info = json.loads(sidecar.read_text()).get("countmill")
        types = {"time": pa.timestamp("us", tz="UTC"), "channel": pa.string(), "code": pa.int32(), "gain_code": pa.int16(),
                 "value": pa.float64(), "quality": pa.int8(), "flags": pa.int64()}
        try:
            table = pacsv.read_csv(path, convert_options=pacsv.ConvertOptions(include_columns=NEEDED, column_types=types))
        except (pa.ArrowInvalid, KeyError) as exc:
            raise InputError(f"{path}: not a tidy countmill CSV ({exc})") from None
        return info, lambda: table.to_batches(max_chunksize=BATCH_ROWS), None
    try:
        names = pq.read_schema(path).names
    except (pa.ArrowInvalid, OSError) as exc:
        raise InputError(f"{path}: not a readable Parquet file ({exc})") from None
    missing = [c for c in NEEDED if c not in names]
    if missing:
        raise UsageError(f"{path}: the report needs the tidy layout (no column {', '.join(missing)})")
    # pre_buffer=False: with pre-buffering the reader keeps every row group it has read until
    # the file closes, and memory would grow with the day
    pf = pq.ParquetFile(path, read_dictionary=["channel"], pre_buffer=False)
    raw = (pf.schema_arrow.metadata or {}).get(b"countmill") or (pf.metadata.metadata or {}).get(b"countmill")
    info = json.loads(raw) if raw else None
    return info, lambda: pf.iter_batches(batch_size=BATCH_ROWS, columns=NEEDED), _parquet_period(pf)


def _parquet_period(pf: pq.ParquetFile) -> tuple[int, int] | None:
    """First and last time from the row-group statistics, without reading rows."""
    index = pf.schema_arrow.get_field_index("time")
    lows, highs = [], []
    for i in range(pf.metadata.num_row_groups):
        stats = pf.metadata.row_group(i).column(index).statistics
        if stats is None or not stats.has_min_max:
            return None
        lows.append(stats.min_raw)
        highs.append(stats.max_raw)
    return (min(lows), max(highs)) if lows else None


def _period(batches) -> tuple[int, int] | None:
    lo, hi = None, None
    for batch in batches:
        mm = pc.min_max(batch.column("time").cast(pa.int64()))
        if mm["min"].is_valid:
            lo = mm["min"].as_py() if lo is None else min(lo, mm["min"].as_py())
            hi = mm["max"].as_py() if hi is None else max(hi, mm["max"].as_py())
    return (lo, hi) if lo is not None else None


def summarise(path: str | Path, columns: int = 1000) -> DaySummary:
    """One pass over a tidy output: per-channel statistics, plot envelopes, code counts."""
    path = Path(path)
    if not path.exists():
        raise InputError(f"{path}: no such file")
    info, batches, period = _open(path)
    if not info or "channels" not in info:
        raise InputError(f"{path}: no countmill provenance in its metadata; was it written by countmill?")
    if isinstance(info.get("layout"), dict) and info["layout"].get("name") == "wide":
        raise UsageError(f"{path}: the report needs the tidy layout, not wide")
    period = period or _period(batches()) or (0, 0)
    acc = _Accumulator(info, period, columns)
    for batch in _prefetched(batches()):
        acc.add(batch)
    return acc.finish(path, count_rejects(path))


def _prefetched(batches):
    """Decode the next batch in a thread (Arrow releases the GIL) while numpy works on this one."""
    iterator = iter(batches)
    with ThreadPoolExecutor(max_workers=1) as pool:
        pending = pool.submit(next, iterator, None)
        while True:
            batch = pending.result()
            if batch is None:
                return
            pending = pool.submit(next, iterator, None)
            yield batch


class _Accumulator:
    def __init__(self, info: dict, period: tuple[int, int], columns: int):
        self.info = info
        self.names = list(info["channels"])
        self.index = {n: i for i, n in enumerate(self.names)}
        self.start, self.end = int(period[0]), int(period[1])
        self.ncols = columns
        n = len(self.names)
        self.levels = np.zeros(n * 10, dtype=np.int64)
        self.usable_n = np.zeros(n, dtype=np.int64)
        self.usable_sum = np.zeros(n)
        self.low = np.full((3, n * columns), np.inf)
        self.high = np.full((3, n * columns), -np.inf)
        self.missing = np.zeros(n * columns, dtype=np.int64)
        self.flags = np.zeros((n, len(ALL_FLAGS)), dtype=np.int64)
        self.rows = 0
        self.unmapped = 0
        self.code_parts: list[pa.Table] = []
        # channel revisions: a flat index per (channel, revision), and revision starts
        self.rev_base = np.zeros(n, dtype=np.int64)
        self.rev_starts: dict[int, np.ndarray] = {}
        base = 0
        for i, name in enumerate(self.names):
            revisions = info["channels"][name].get("revisions") or []
            self.rev_base[i] = base
            base += max(1, len(revisions))
            if len(revisions) > 1 and all("from_utc" in r for r in revisions):
                starts = [np.iinfo(np.int64).min if r["from_utc"] is None else int(np.datetime64(r["from_utc"].rstrip("Z"), "us").astype(np.int64)) for r in revisions]
                self.rev_starts[i] = np.array(starts, dtype=np.int64)

    def _channel_index(self, column: pa.Array) -> np.ndarray:
        if isinstance(column, pa.ChunkedArray):
            column = column.combine_chunks()
        if not pa.types.is_dictionary(column.type):
            column = pc.dictionary_encode(column)
        lookup = np.array([self.index.get(s, -2) for s in column.dictionary.to_pylist()] + [-1], dtype=np.int64)
        indices = column.indices.fill_null(len(lookup) - 1).to_numpy(zero_copy_only=False).astype(np.int64)
        return lookup[indices]

    def add(self, batch: pa.RecordBatch) -> None:
        n_rows = batch.num_rows
        if n_rows == 0:
            return
        self.rows += n_rows
        ch = self._channel_index(batch.column("channel"))
        mapped = ch >= 0  # -1 null channel (unmapped record), -2 a name not in the provenance
        self.unmapped += int(n_rows - mapped.sum())
        if not mapped.all():
            batch = batch.filter(pa.array(mapped))
            ch = ch[mapped]
        t = batch.column("time").cast(pa.int64()).to_numpy(zero_copy_only=False)
        q = batch.column("quality").to_numpy(zero_copy_only=False).astype(np.int64)
        v = batch.column("value").fill_null(np.nan).to_numpy(zero_copy_only=False)
        f = batch.column("flags").to_numpy(zero_copy_only=False)
        n = len(self.names)
        self.levels += np.bincount(ch * 10 + q, minlength=n * 10)

        span = self.end - self.start + 1
        col = np.clip((t - self.start) * self.ncols // span, 0, self.ncols - 1)
        slot = ch * self.ncols + col
        finite = np.isfinite(v)
        usable = finite & (q <= int(Quality.NOT_EVALUATED))
        self.usable_n += np.bincount(ch[usable], minlength=n)
        self.usable_sum += np.bincount(ch[usable], weights=v[usable], minlength=n)
        for k, mask in enumerate((usable, finite & (q == int(Quality.SUSPECT)), finite & (q == int(Quality.BAD)))):
            if mask.any():
                np.minimum.at(self.low[k], slot[mask], v[mask])
                np.maximum.at(self.high[k], slot[mask], v[mask])
        no_value = ~finite
        if no_value.any():
            self.missing += np.bincount(slot[no_value], minlength=n * self.ncols)

        flagged = f != 0
        if flagged.any():
            fch, ff = ch[flagged], f[flagged]
            for bit, flag in enumerate(ALL_FLAGS):
                hit = (ff & int(flag)) != 0
                if hit.any():
                    self.flags[:, bit] += np.bincount(fch[hit], minlength=n)

        self._codes(batch, ch, t)

    def _codes(self, batch: pa.RecordBatch, ch: np.ndarray, t: np.ndarray) -> None:
        code = batch.column("code")
        measured = code.is_valid().to_numpy(zero_copy_only=False)
        if not measured.any():
            return
        chrev = self.rev_base[ch].copy()
        for i, starts in self.rev_starts.items():
            own = ch == i
            if own.any():
                chrev[own] += np.clip(np.searchsorted(starts, t[own], side="right") - 1, 0, None)
        gain = batch.column("gain_code").fill_null(-1).to_numpy(zero_copy_only=False).astype(np.int64)
        codes = code.fill_null(0).to_numpy(zero_copy_only=False).astype(np.int64)
        table = pa.table({"k": chrev[measured], "g": gain[measured], "c": codes[measured]})
        counted = table.group_by(["k", "g", "c"]).aggregate([("c", "count")])
        self.code_parts.append(counted.select(["k", "g", "c", "c_count"]).rename_columns(["k", "g", "c", "n"]))
        if len(self.code_parts) > 16:
            self.code_parts = [_merge_codes(self.code_parts)]

    def finish(self, path: Path, rejects: int | None) -> DaySummary:
        n, cols = len(self.names), self.ncols
        low = np.where(np.isinf(self.low), np.nan, self.low).reshape(3, n, cols)
        high = np.where(np.isinf(self.high), np.nan, self.high).reshape(3, n, cols)
        codes = _merge_codes(self.code_parts) if self.code_parts else None
        if codes is not None:
            k = codes.column("k").to_numpy()
            g = codes.column("g").to_numpy()
            c = codes.column("c").to_numpy()
            m = codes.column("n").to_numpy()
            order = np.lexsort((c, g, k))
            k, g, c, m = k[order], g[order], c[order], m[order]
        levels = self.levels.reshape(n, 10)[:, LEVELS]
        missing = self.missing.reshape(n, cols)
        channels = []
        for i, name in enumerate(self.names):
            meta = self.info["channels"][name]
            summary = ChannelSummary(
                name=name,
                meta=meta,
                levels=levels[i],
                usable_n=int(self.usable_n[i]),
                usable_sum=float(self.usable_sum[i]),
                flag_counts={flag_name(flag): int(self.flags[i, b]) for b, flag in enumerate(ALL_FLAGS)},
                low={cls: low[j, i] for j, cls in enumerate(CLASSES)},
                high={cls: high[j, i] for j, cls in enumerate(CLASSES)},
                missing=missing[i],
            )
            if codes is not None:
                for r in range(max(1, len(meta.get("revisions") or []))):
                    sel = k == self.rev_base[i] + r
                    if sel.any():
                        summary.codes[r] = CodeCounts(gain=g[sel], code=c[sel], count=m[sel])
            channels.append(summary)
        return DaySummary(path, self.info, self.rows, self.unmapped, rejects, self.start, self.end, cols, channels)


def _merge_codes(parts: list[pa.Table]) -> pa.Table:
    table = pa.concat_tables(parts)
    return table.group_by(["k", "g", "c"]).aggregate([("n", "sum")]).select(["k", "g", "c", "n_sum"]).rename_columns(["k", "g", "c", "n"])
