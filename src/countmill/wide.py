"""Wide layout: one row per time bin, three columns per channel, for spreadsheets.

>>> from countmill.convert import convert_file
>>> convert_file("day.csv", "brewhouse.toml", "day-1min.csv", layout="wide", every="1min")  # doctest: +SKIP

Columns: ``time`` (the bin's start, UTC; bins are aligned to the Unix epoch), then for every
measured and derived channel, in the order the map lists them:

``<channel>``
    mean of the bin's samples whose quality is good (1) or suspect (3) (contract §5; a
    derived channel without any test, quality 2, therefore has no mean: give it a range),
    in the channel's unit (the latest revision's, earlier revisions converted to it);
    NaN (an empty CSV field) when there is none.
``<channel>_quality``
    the level most of the bin's samples have (1 2 3 4 9); a tie goes to the worse level
    (in the order 1 < 2 < 3 < 4 < 9); 9 when the channel has no sample in the bin. The mean
    may contain suspect samples of a bin whose level is good: the tidy layout has each sample.
``<channel>_count``
    the channel's samples in the bin, at every quality level.

Only bins with at least one sample of a mapped channel are written: a gap in the log shows
as a step in ``time``. Records of unmapped channels are not in the wide table.

Samples that arrive ``settle`` (default one hour) or more after their bin ended, counted from
the newest time seen earlier in the input (a logger clock stepped back by more than that),
are left out and counted per channel in the metadata (``layout.late_samples``); see
:mod:`countmill.binning`. A clock step back by less than ``settle`` changes nothing.
"""

from __future__ import annotations

import dataclasses
import json
import re
from dataclasses import dataclass, field
from pathlib import Path
from typing import Callable

import numpy as np
import pyarrow as pa
import pyarrow.compute as pc
import pyarrow.csv as pacsv
import pyarrow.parquet as pq

from countmill.binning import ClosedBins, TimeBins
from countmill.chanmap import ChannelMap
from countmill.convert import ConversionResult, run_conversion
from countmill.errors import UsageError
from countmill.flags import cf_quality_attributes
from countmill.pipeline.convert import Converter, Rows
from countmill.pipeline.output import provenance_metadata, publish, temporary_path
from countmill.units import affine_conversion, same_dimension

US_PER = {"us": 1, "ms": 1_000, "s": 1_000_000, "min": 60_000_000, "h": 3_600_000_000, "d": 86_400_000_000}
_UNIT_WORDS = {
    "us": "us", "µs": "us", "ms": "ms", "s": "s", "sec": "s", "second": "s", "seconds": "s",
    "m": "min", "min": "min", "minute": "min", "minutes": "min", "t": "min",
    "h": "h", "hr": "h", "hour": "h", "hours": "h", "d": "d", "day": "d", "days": "d",
}
DEFAULT_SETTLE = "1h"
#: Parquet key-value metadata key with the late samples per channel, known only at the end
LATE_KEY = "countmill.late_samples"
VALUE_RULE = "mean of the samples whose quality is 1 or 3 (good or suspect)"
QUALITY_RULE = "the most frequent level among the bin's samples; a tie goes to the worse level (1<2<3<4<9); 9 for no sample"


def parse_every(text: str) -> int:
    """Bin width in microseconds from ``1s``, ``10s``, ``1min``, ``15min``, ``1h``, ``1d``,
    ``500ms`` (also ``2 min``, ``1.5h``, ``15T`` and ISO 8601 durations such as ``PT1M``).

    Raises :class:`UsageError` for anything else, for zero and for widths that are not a
    whole number of microseconds.
    """
    raw = str(text).strip()
    match = re.fullmatch(r"(\d+(?:\.\d+)?)\s*([A-Za-zµ]+)", raw)
    us = None
    if match and match.group(2) == "M":  # a month in pandas' offset aliases: not a fixed width
        raise UsageError(f"--every: {text!r} is ambiguous (M is a month for pandas); write min for minutes")
    if match and match.group(2).lower() in _UNIT_WORDS:
        us = float(match.group(1)) * US_PER[_UNIT_WORDS[match.group(2).lower()]]
    else:
        iso = re.fullmatch(r"P(?:(\d+)D)?(?:T(?:(\d+)H)?(?:(\d+)M)?(?:(\d+(?:\.\d+)?)S)?)?", raw.upper())
        if iso and raw.upper() not in ("P", "PT"):
            d, h, m, s = (float(g) if g else 0.0 for g in iso.groups())
            us = ((d * 24 + h) * 60 + m) * 60e6 + s * 1e6
    if us is None:
        raise UsageError(f"--every: cannot read {text!r}; use e.g. 1s, 10s, 1min, 15min, 1h")
    if us <= 0 or abs(us - round(us)) > 1e-6:
        raise UsageError(f"--every: {text!r} must be a positive whole number of microseconds")
    return int(round(us))


@dataclass
class WideConversionResult(ConversionResult):
    every: str = ""
    #: channel -> samples left out because they came too late for their bin
    late_samples: dict[str, int] = field(default_factory=dict)

    @property
    def notes(self) -> list[str]:
        if not self.late_samples:
            return []
        total = sum(self.late_samples.values())
        return [f"{total} samples came after their time bin was written (clock stepped back) and are not in the wide table; see the metadata's layout.late_samples"]

    def as_dict(self) -> dict:
        return {**super().as_dict(), "layout": "wide", "every": self.every, "late_samples": self.late_samples}


class WideColumns:
    """Which channel goes to which column, its unit, and the factors to that unit."""

    def __init__(self, cmap: ChannelMap, converter: Converter):
        order: list[str] = []
        unit: dict[str, str] = {}
        for revisions in cmap.channels.values():  # the map's own order
            for rev in revisions:
                if rev.name not in unit:
                    order.append(rev.name)
                unit[rev.name] = rev.unit  # the latest revision's unit wins
        for d in cmap.derived:
            order.append(d.name)
            unit[d.name] = d.unit
        self.names, self.units = order, [unit[n] for n in order]
        taken = {"time"}
        for name in order:
            for column in (name, f"{name}_quality", f"{name}_count"):
                if column in taken:
                    raise UsageError(f"wide layout: the column name {column!r} would appear twice; rename a channel")
                taken.add(column)
        # converter name index -> column; converter unit index -> affine factors per name
        self.column_of = np.array([order.index(n) for n in converter.names], dtype=np.intp)
        self.scale = np.ones((len(converter.names), len(converter.units)))
        self.offset = np.zeros_like(self.scale)
        revisions = [(rev.name, rev.unit) for rev in cmap.revisions()] + [(d.name, d.unit) for d in cmap.derived]
        for name, rev_unit in revisions:
            target = unit[name]
            if rev_unit == target:
                continue
            if not same_dimension(rev_unit, target):
                raise UsageError(f"wide layout: channel {name!r} changes from {rev_unit} to {target} between revisions; one column cannot hold both")
            i, j = converter.name_index[name], converter.unit_index[rev_unit]
            self.scale[i, j], self.offset[i, j] = affine_conversion(rev_unit, target)

    def schema(self) -> pa.Schema:
        quality_meta = {k.encode(): v.encode() for k, v in cf_quality_attributes().items()}
        fields = [pa.field("time", pa.timestamp("us", tz="UTC"), metadata={b"long_name": b"start of the time bin (UTC)"})]
        for name, unit in zip(self.names, self.units):
            fields += [
                pa.field(name, pa.float64(), metadata={b"units": unit.encode(), b"long_name": f"{name}: {VALUE_RULE}".encode()}),
                pa.field(f"{name}_quality", pa.int8(), metadata={**quality_meta, b"long_name": f"{name}: {QUALITY_RULE}".encode()}),
                pa.field(f"{name}_count", pa.int32(), metadata={b"long_name": f"{name}: samples in the bin".encode()}),
            ]
        return pa.schema(fields)

    def table(self, bins: ClosedBins, schema: pa.Schema) -> pa.Table:
        arrays = [pa.array(bins.start, type=pa.int64()).view(pa.timestamp("us", tz="UTC"))]
        for j in range(len(self.names)):
            arrays += [pa.array(bins.mean[:, j]), pa.array(bins.quality[:, j]), pa.array(bins.count[:, j])]
        return pa.Table.from_arrays(arrays, schema=schema)


class WideSink:
    """Receives tidy rows, fills time bins, writes each bin once it is closed."""

    def __init__(self, final: Path, columns: WideColumns, every_us: int, settle_us: int, layout_info: dict, provenance: dict):
        self.final, self.columns, self.layout_info = final, columns, layout_info
        self.bins = TimeBins(len(columns.names), every_us, settle_us)
        # (the provenance is written when the file closes, with the layout's late counts)
        self.provenance = {**provenance, "layout": layout_info}
        self.schema = columns.schema()
        self.late_samples: dict[str, int] = {}
        self.whole_seconds = every_us % 1_000_000 == 0
        self.tmp = temporary_path(final)
        self.csv = final.suffix.lower() == ".csv"
        self.rows_written = 0
        if self.csv:
            self.sidecar = final.with_name(final.name + "-metadata.json")
            self._file = open(self.tmp, "wb")
            self._writer = pacsv.CSVWriter(self._file, self._csv_schema(), write_options=pacsv.WriteOptions(quoting_style="none"))
        else:
            self._writer = pq.ParquetWriter(self.tmp, self.schema, compression="zstd")

    def write(self, rows: Rows) -> None:
        mapped = rows.name >= 0
        if not mapped.any():
            return
        name, unit = rows.name[mapped], rows.unit[mapped]
        value = rows.value[mapped] * self.columns.scale[name, unit] + self.columns.offset[name, unit]
        self.bins.add(rows.time_us[mapped], self.columns.column_of[name], value, rows.quality[mapped])
        self._emit(self.bins.pop_closed())

    def _emit(self, bins: ClosedBins) -> None:
        if len(bins) == 0:
            return
        table = self.columns.table(bins, self.schema)
        if self.csv:
            table = self._for_csv(table)
        self._writer.write_table(table)
        self.rows_written += len(bins)

    def _csv_schema(self) -> pa.Schema:
        fields = [pa.field("time", pa.string())] + [f.with_type(pa.string()) if f.type == pa.float64() else f for f in list(self.schema)[1:]]
        return pa.schema(fields)

    def _for_csv(self, table: pa.Table) -> pa.Table:
        """ISO 8601 UTC times with Z; floats always with a decimal point or an exponent, so
        that spreadsheets and CSV readers see float columns; NaN as an empty field."""
        time = table.column("time")
        if self.whole_seconds:
            time = pc.cast(time, pa.timestamp("s", tz="UTC"))
        columns = [pc.strftime(time, format="%Y-%m-%dT%H:%M:%SZ")]
        for f, column in zip(list(table.schema)[1:], table.columns[1:]):
            if f.type == pa.float64():
                text = pc.cast(pc.if_else(pc.is_nan(column), None, column), pa.string())
                plain = pc.invert(pc.match_substring_regex(text, r"[.eEn]"))
                column = pc.if_else(plain, pc.binary_join_element_wise(text, ".0", ""), text)
            columns.append(column)
        return pa.Table.from_arrays(columns, schema=self._csv_schema())

    def close(self) -> Path:
        self._emit(self.bins.pop_closed(final=True))
        late = {n: int(c) for n, c in zip(self.columns.names, self.bins.late) if c}
        self.late_samples = late
        info = {**self.provenance, "layout": {**self.layout_info, "late_samples": late}}
        if self.csv:
            self._writer.close()
            self._file.close()
            sidecar_tmp = temporary_path(self.sidecar)
            sidecar_tmp.write_text(json.dumps(self.csvw(info), indent=2))
            publish(self.tmp, self.final)
            publish(sidecar_tmp, self.sidecar)
        else:
            # the provenance with the layout as it was set up; the late counts in their own key
            self._writer.add_key_value_metadata({**provenance_metadata(self.schema, self.provenance), LATE_KEY: json.dumps(late)})
            self._writer.close()
            publish(self.tmp, self.final)
        return self.final

    def csvw(self, info: dict) -> dict:
        """W3C CSV on the Web metadata for a wide CSV output."""
        columns = [{"name": "time", "titles": "time", "datatype": "dateTime", "dc:description": "start of the time bin (UTC)"}]
        for name, unit in zip(self.columns.names, self.columns.units):
            columns += [
                {"name": name, "titles": name, "datatype": "double", "unit": unit, "dc:description": VALUE_RULE},
                {"name": f"{name}_quality", "titles": f"{name}_quality", "datatype": "byte", **cf_quality_attributes(), "dc:description": QUALITY_RULE},
                {"name": f"{name}_count", "titles": f"{name}_count", "datatype": "int", "dc:description": "samples in the bin"},
            ]
        return {
            "@context": "http://www.w3.org/ns/csvw",
            "url": self.final.name,
            "dc:title": f"{info['source']['name']} converted by countmill, one row per {self.layout_info['every']}",
            "dialect": {"header": True, "delimiter": ","},
            "tableSchema": {"columns": columns, "primaryKey": "time"},
            "countmill": info,
        }

    def abort(self) -> None:
        try:
            self._writer.close()
            if self.csv:
                self._file.close()
        except Exception:
            pass
        self.tmp.unlink(missing_ok=True)


def convert_wide(
    raw: str | Path,
    cmap: ChannelMap,
    out: str | Path,
    *,
    chunk_rows: int,
    every: str | None,
    progress: Callable[[int, int], None] | None = None,
    settle: str = DEFAULT_SETTLE,
) -> WideConversionResult:
    """Convert ``raw`` into one row per ``every`` (see the module notes for the rules)."""
    if not every:
        raise UsageError("--layout wide needs --every, e.g. --every 1min")
    every_us = parse_every(every)
    settle_us = parse_every(settle)
    raw, out = Path(raw), Path(out)
    layout = {
        "name": "wide",
        "every": every,
        "every_seconds": every_us / 1e6,
        "bins_aligned_to": "1970-01-01T00:00:00Z",
        "settle_seconds": settle_us / 1e6,
        "value": VALUE_RULE,
        "quality": QUALITY_RULE,
    }
    sinks: list[WideSink] = []

    def make_sink(converter: Converter, provenance: dict) -> WideSink:
        sinks.append(WideSink(out, WideColumns(cmap, converter), every_us, settle_us, layout, provenance))
        return sinks[0]

    result = run_conversion(raw, cmap, out, make_sink, chunk_rows=chunk_rows, progress=progress)
    fields = {f.name: getattr(result, f.name) for f in dataclasses.fields(ConversionResult)}
    fields["rows"] = sinks[0].rows_written
    return WideConversionResult(**fields, every=every, late_samples=sinks[0].late_samples)
