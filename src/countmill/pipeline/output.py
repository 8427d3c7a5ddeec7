"""Write tidy rows to Parquet or CSV (with its CSVW sidecar), under a temporary name.

The file appears at its final path only when complete (``os.replace`` after ``fsync``).
"""

from __future__ import annotations

import base64
import csv
import json
import os
from pathlib import Path

import numpy as np
import pyarrow as pa
import pyarrow.compute as pc
import pyarrow.csv as pacsv
import pyarrow.parquet as pq

from countmill.flags import cf_flags_attributes, cf_quality_attributes, names_joined
from countmill.pipeline.convert import Rows

#: rows per Parquet row group: about one chunk, so the last one is written soon after the
#: last chunk is converted
ROW_GROUP_ROWS = 1 << 18


def _meta(d: dict[str, str]) -> dict[bytes, bytes]:
    return {k.encode(): v.encode() for k, v in d.items()}


def tidy_schema() -> pa.Schema:
    """The tidy columns. Those never null are declared so (a missing value is NaN, not
    null), which spares the Parquet writer their definition levels."""
    return pa.schema(
        [
            pa.field("time", pa.timestamp("us", tz="UTC"), nullable=False, metadata=_meta({"long_name": "time the sample was taken (UTC)"})),
            pa.field("line", pa.int64(), nullable=False, metadata=_meta({"long_name": "line number in the raw file (1-based)"})),
            pa.field("channel", pa.string()),
            pa.field("channel_id", pa.int32()),
            pa.field("code", pa.int32(), metadata=_meta({"units": "1", "long_name": "raw ADC code"})),
            pa.field("gain_code", pa.int16(), metadata=_meta({"long_name": "PGA gain code"})),
            pa.field("volts", pa.float64(), nullable=False, metadata=_meta({"units": "V", "long_name": "volts at the amplifier input"})),
            pa.field("value", pa.float64(), nullable=False, metadata=_meta({"long_name": "engineering value, in the row's unit"})),
            pa.field("unit", pa.string()),
            pa.field("quality", pa.int8(), nullable=False, metadata=_meta(cf_quality_attributes())),
            pa.field("flags", pa.int64(), nullable=False, metadata=_meta(cf_flags_attributes())),
        ]
    )


def rows_to_table(rows: Rows, names: list[str], units: list[str], schema: pa.Schema) -> pa.Table:
    """An Arrow table of ``schema``; ``channel`` and ``unit`` stay dictionary-encoded when
    the schema says so (see :func:`dictionary_schema`)."""
    def labels(index: np.ndarray, table: list[str], field: pa.Field) -> pa.Array:
        indices = pa.array(index, type=pa.int32(), mask=index < 0)
        array = pa.DictionaryArray.from_arrays(indices, pa.array(table, type=pa.string()))
        return array if pa.types.is_dictionary(field.type) else array.dictionary_decode()

    derived = rows.is_derived if rows.is_derived.any() else None  # null where derived
    columns = [
        pa.array(rows.time_us, type=pa.int64()).view(pa.timestamp("us", tz="UTC")),
        pa.array(rows.line, type=pa.int64()),
        labels(rows.name, names, schema.field("channel")),
        pa.array(rows.channel_id.astype(np.int32, copy=False), mask=derived),
        pa.array(rows.code.astype(np.int32, copy=False), mask=derived),
        pa.array(rows.gain.astype(np.int16, copy=False), mask=derived),
        pa.array(rows.volts, type=pa.float64()),
        pa.array(rows.value, type=pa.float64()),
        labels(rows.unit, units, schema.field("unit")),
        pa.array(rows.quality, type=pa.int8()),
        pa.array(rows.flags, type=pa.int64()),
    ]
    return pa.Table.from_arrays(columns, schema=schema)


def dictionary_schema(schema: pa.Schema) -> pa.Schema:
    """``schema`` with its string columns as dictionary<int32, string>.

    The Parquet writer then takes the channel and unit columns as the converter holds them
    (an index into a short table of names) and writes their dictionary pages directly,
    instead of hashing every string of every row again. The file's Parquet columns are the
    same as for plain strings (BYTE_ARRAY, String, dictionary-encoded); only the Arrow
    schema stored with it would say "dictionary", so :class:`ParquetSink` stores the plain
    schema instead (see ``close``).
    """
    fields = [
        pa.field(f.name, pa.dictionary(pa.int32(), pa.string()), metadata=f.metadata) if pa.types.is_string(f.type) else f
        for f in schema
    ]
    return pa.schema(fields, metadata=schema.metadata)


def temporary_path(final: Path) -> Path:
    return final.with_name(f".{final.name}.partial-{os.getpid()}")


def _fsync(path: Path) -> None:
    fd = os.open(path, os.O_RDONLY)
    try:
        os.fsync(fd)
    finally:
        os.close(fd)


def publish(tmp: Path, final: Path) -> None:
    """Make a complete file visible at its final path, atomically."""
    _fsync(tmp)
    os.replace(tmp, final)
    try:
        dir_fd = os.open(final.parent, os.O_RDONLY)
    except OSError:
        return
    try:
        os.fsync(dir_fd)
    except OSError:
        pass
    finally:
        os.close(dir_fd)


def provenance_metadata(schema: pa.Schema, provenance: dict) -> dict[str, str]:
    """Parquet file metadata for a file's provenance, added when the writer closes.

    The provenance goes in twice: as the ``countmill`` key of the file's own metadata, and
    in the stored Arrow schema (``ARROW:schema``, which readers rebuild the Arrow schema
    from), so readers see it as schema metadata too. ``schema`` is the one stored: the plain
    one, so that columns written dictionary-encoded read back as plain strings.
    """
    text = json.dumps(provenance)
    stored = schema.with_metadata({**(schema.metadata or {}), b"countmill": text.encode()})
    return {"countmill": text, "ARROW:schema": base64.b64encode(stored.serialize().to_pybytes()).decode("ascii")}


class _TidySink:
    """What both tidy sinks keep: where the file goes, the name and unit tables, the
    provenance (written when the file closes) and the tidy schema."""

    def __init__(self, final: Path, names: list[str], units: list[str], provenance: dict):
        self.final = final
        self.tmp = temporary_path(final)
        self.names, self.units = names, units
        self.provenance = provenance
        self.schema = tidy_schema()


#: columns that may be dictionary-encoded, besides ``channel`` and ``unit`` (always): numbers
#: that repeat. Volts and values come from a few thousand ADC codes per channel, flags from a
#: handful of reasons; a dictionary then makes them cheaper to write and smaller to store.
DICTIONARY_CANDIDATES = ("code", "volts", "value", "flags")

#: a candidate is dictionary-encoded when the first row group holds at most this share of
#: distinct values (Parquet falls back to plain encoding by itself when a dictionary page
#: fills, but hashing every value first makes a column of distinct values ~4x slower to write)
DICTIONARY_MAX_DISTINCT_SHARE = 1 / 8


def repeating_columns(table: pa.Table) -> list[str]:
    """The :data:`DICTIONARY_CANDIDATES` of ``table`` whose values repeat enough."""
    limit = max(1, int(table.num_rows * DICTIONARY_MAX_DISTINCT_SHARE))
    return [name for name in DICTIONARY_CANDIDATES if pc.count_distinct(table.column(name)).as_py() <= limit]


class ParquetSink(_TidySink):
    """Tidy rows to Parquet, one row group per :data:`ROW_GROUP_ROWS` rows.

    The Parquet writer is made with the first row group, which tells which columns repeat
    enough to be dictionary-encoded (:func:`repeating_columns`); the file under its
    temporary name is opened at once.
    """

    def __init__(self, final: Path, names: list[str], units: list[str], provenance: dict):
        super().__init__(final, names, units, provenance)
        self._write_schema = dictionary_schema(self.schema)
        self._file = pa.OSFile(str(self.tmp), "wb")
        self.writer: pq.ParquetWriter | None = None
        self._pending: list[pa.Table] = []
        self._pending_rows = 0

    def _open_writer(self, first: pa.Table | None) -> pq.ParquetWriter:
        repeating = repeating_columns(first) if first is not None else []
        return pq.ParquetWriter(
            self._file,
            self._write_schema,
            compression="zstd",
            use_dictionary=["channel", "unit", *repeating],
            # times and line numbers climb by small steps: delta encoding makes them almost
            # free to write and store (a Parquet 2 encoding every current reader knows)
            column_encoding={"time": "DELTA_BINARY_PACKED", "line": "DELTA_BINARY_PACKED"},
            # min/max per row group where a reader can skip row groups by them (a time or
            # line range); every row group holds every channel and most quality levels
            write_statistics=["time", "line"],
        )

    def write(self, rows: Rows) -> None:
        if len(rows) == 0:
            return
        self._pending.append(rows_to_table(rows, self.names, self.units, self._write_schema))
        self._pending_rows += len(rows)
        if self._pending_rows >= ROW_GROUP_ROWS:
            self._flush()

    def _flush(self) -> None:
        if self._pending:
            table = pa.concat_tables(self._pending)
            if self.writer is None:
                self.writer = self._open_writer(table)
            self.writer.write_table(table, row_group_size=max(self._pending_rows, 1))
            self._pending, self._pending_rows = [], 0

    def close(self) -> Path:
        self._flush()
        if self.writer is None:  # no rows: the columns and the provenance alone
            self.writer = self._open_writer(None)
        # (the plain schema: channel and unit read back as strings, as if written from strings)
        self.writer.add_key_value_metadata(provenance_metadata(self.schema, self.provenance))
        self.writer.close()
        self._file.close()
        publish(self.tmp, self.final)
        return self.final

    def abort(self) -> None:
        try:
            if self.writer is not None:
                self.writer.close()
            self._file.close()
        except Exception:
            pass
        self.tmp.unlink(missing_ok=True)


CSVW_TYPES = {
    "time": "dateTime",
    "line": "long",
    "channel": "string",
    "channel_id": "int",
    "code": "int",
    "gain_code": "short",
    "volts": "double",
    "value": "double",
    "unit": "string",
    "quality": "byte",
    "flags": "long",
    "flag_names": "string",
}


class CsvSink(_TidySink):
    """CSV for spreadsheets: ISO 8601 UTC times with Z, empty fields for NaN/null."""

    def __init__(self, final: Path, names: list[str], units: list[str], provenance: dict):
        super().__init__(final, names, units, provenance)
        self.sidecar = final.with_name(final.name + "-metadata.json")
        self._file = open(self.tmp, "wb")
        self._writer: pacsv.CSVWriter | None = None

    def write(self, rows: Rows) -> None:
        if len(rows) == 0:
            return
        table = rows_to_table(rows, self.names, self.units, self.schema)
        time_text = pc.strftime(table.column("time"), format="%Y-%m-%dT%H:%M:%SZ")
        table = table.set_column(0, pa.field("time", pa.string()), time_text)
        for name in ("volts", "value"):
            i = table.schema.get_field_index(name)
            column = table.column(name)
            table = table.set_column(i, name, pc.if_else(pc.is_nan(column), None, column))
        table = table.append_column("flag_names", pa.array(names_joined(rows.flags), type=pa.string()))
        if self._writer is None:
            self._writer = pacsv.CSVWriter(self._file, table.schema, write_options=pacsv.WriteOptions(quoting_style="needed"))
        self._writer.write_table(table)

    def close(self) -> Path:
        provenance = self.provenance
        if self._writer is None:  # no rows at all: still a valid CSV with its header
            self._file.write((",".join(CSVW_TYPES) + "\n").encode())
        else:
            self._writer.close()
        self._file.close()
        sidecar_tmp = temporary_path(self.sidecar)
        sidecar_tmp.write_text(json.dumps(csvw_metadata(self.final.name, provenance), indent=2))
        publish(self.tmp, self.final)
        publish(sidecar_tmp, self.sidecar)
        return self.final

    def abort(self) -> None:
        try:
            self._file.close()
        except Exception:
            pass
        self.tmp.unlink(missing_ok=True)


def csvw_metadata(csv_name: str, provenance: dict) -> dict:
    """W3C CSV on the Web metadata for a tidy CSV output."""
    columns = []
    for name, datatype in CSVW_TYPES.items():
        column = {"name": name, "titles": name, "datatype": datatype}
        if name == "quality":
            column.update(cf_quality_attributes())
        if name == "flags":
            column.update(cf_flags_attributes())
        if name == "volts":
            column["unit"] = "V"
        columns.append(column)
    return {
        "@context": "http://www.w3.org/ns/csvw",
        "url": csv_name,
        "dc:title": f"{provenance['source']['name']} converted by countmill",
        "dialect": {"header": True, "delimiter": ","},
        "tableSchema": {"columns": columns},
        "countmill": provenance,
    }


class RejectsSink:
    """``OUT.rejects.csv`` with ``line,reason,text``, streamed; created only when needed."""

    def __init__(self, final: Path):
        self.final = final.with_name(final.name + ".rejects.csv")
        self.tmp = temporary_path(self.final)
        self.count = 0
        self._fh = None
        self._writer = None

    def write(self, rejects) -> None:
        if not rejects:
            return
        if self._fh is None:
            self._fh = open(self.tmp, "w", newline="", encoding="utf-8")
            self._writer = csv.writer(self._fh)
            self._writer.writerow(["line", "reason", "text"])
        for r in rejects:
            self._writer.writerow([r.line, r.reason, r.text])
        self.count += len(rejects)

    def close(self) -> Path | None:
        if self._fh is None:
            self.final.unlink(missing_ok=True)  # a stale file from an earlier run would mislead
            return None
        self._fh.close()
        publish(self.tmp, self.final)
        return self.final

    def abort(self) -> None:
        if self._fh is not None:
            self._fh.close()
        self.tmp.unlink(missing_ok=True)
