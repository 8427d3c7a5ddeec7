"""Read fixed-size little-endian binary records into record arrays, block by block.

The layout is declared in the map's ``[input]``::

    [input]
    format = "binary"
    record = [                          # packed, in this order, little-endian
      { name = "time", dtype = "int64" },
      { name = "channel", dtype = "uint16" },
      { name = "code", dtype = "int32" },
      { name = "gain", dtype = "uint8" },
      { name = "_status", dtype = "uint8" },   # a name starting with _ is skipped
    ]
    time_unit = "ms"                    # the time field counts s, ms, us or ns ...
    epoch = 1970-01-01T00:00:00         # ... since this moment; no offset: map timezone
    header_bytes = 0                    # bytes before the first record

Each record becomes one :class:`~countmill.pipeline.reader.Records` entry whose ``line`` is
the record number (1-based, the header not counted). A record that cannot be written as
read (a channel, code or gain outside its output column, a time that is not a finite
number or out of range) is a reject, and so is a partial record at the end of the file
(what is left when the file size minus the header is not a whole number of records); the
reject's text is the record's bytes in hexadecimal. A file may be gzip-compressed.
"""

from __future__ import annotations

import datetime as dt
from pathlib import Path
from typing import Iterator

import numpy as np

from countmill.chanmap.models import BINARY_DTYPES, InputSpec
from countmill.errors import InputError
from countmill.pipeline.reader import FIELD_LIMITS, LogReader, RawSource, Records, Reject
from countmill.pipeline.timezone import US, LocalClock

#: microseconds per unit of the time field
UNIT_US = {"s": US, "ms": 1000, "us": 1, "ns": None}
TIME_LIMIT_US = 9e18


def record_dtype(spec: InputSpec) -> np.dtype:
    """The numpy dtype of one packed little-endian record of ``spec.record``."""
    names, formats, offsets = [], [], []
    offset = 0
    for field in spec.record or []:
        names.append(field.name)
        formats.append(np.dtype(field.dtype).newbyteorder("<"))
        offsets.append(offset)
        offset += BINARY_DTYPES[field.dtype]
    return np.dtype({"names": names, "formats": formats, "offsets": offsets, "itemsize": offset})


def _epoch(spec: InputSpec) -> tuple[int, bool]:
    """(epoch in µs, whether it is a wall-clock time in the map's timezone)."""
    epoch = spec.epoch
    if epoch is None:
        return 0, False
    if isinstance(epoch, dt.date) and not isinstance(epoch, dt.datetime):
        epoch = dt.datetime.combine(epoch, dt.time())
    if epoch.tzinfo is None:
        delta = epoch - dt.datetime(1970, 1, 1)
        naive = True
    else:
        delta = epoch - dt.datetime(1970, 1, 1, tzinfo=dt.timezone.utc)
        naive = False
    return (delta.days * 86_400 + delta.seconds) * US + delta.microseconds, naive


class BinaryLogReader(RawSource):
    """Iterates over :class:`Records` of a binary log, ``block_records`` records at a time.

    Same interface as :class:`~countmill.pipeline.reader.LogReader`: ``blocks()``,
    ``data_lines``, ``bytes_read``, ``total_bytes``, and use as a context manager.
    """

    def __init__(self, path: str | Path, spec: InputSpec, timezone: str, block_records: int = 250_000):
        self.spec = spec
        self.dtype = record_dtype(spec)
        self.record_bytes = self.dtype.itemsize
        self.block_records = max(1, int(block_records))
        self.clock = LocalClock(timezone)
        self.epoch_us, self.epoch_is_wall = _epoch(spec)
        self.data_lines = 0
        self._position = 0  # bytes read of a plain file
        self._open(path, buffered=False)

    @property
    def bytes_read(self) -> int:
        # a plain file is read with numpy straight from the file object, past the counter
        return self._counter.bytes_read if self.compressed else self._position

    # --- reading -------------------------------------------------------------------------
    def _raw_blocks(self) -> Iterator[tuple[str, np.ndarray | bytes]]:
        """("records", structured array) blocks; at the end maybe ("partial", bytes), or
        ("header", bytes) when the file ends inside its header."""
        size = self.record_bytes
        header = self.spec.header_bytes
        if header:
            head = self._read(header)
            self._position += len(head)
            if len(head) < header:
                yield "header", head
                return
        if not self.compressed:
            # a plain file: numpy reads the records straight into the array
            whole, tail = divmod(max(self.total_bytes - header, 0), size)
            while whole > 0:
                count = min(whole, self.block_records)
                block = np.fromfile(self._file, dtype=self.dtype, count=count)
                if len(block) < count:
                    raise InputError(f"{self.path}: the file ended early (changed while being read?)")
                whole -= count
                self._position += count * size
                yield "records", block
            if tail:
                rest = self._file.read(tail)
                self._position += len(rest)
                yield "partial", rest
            return
        want = self.block_records * size
        pending = b""
        while True:
            data = self._read(want - len(pending))
            buf = pending + data if pending else data
            if not data:
                if buf:
                    yield "partial", buf
                return
            whole = len(buf) // size
            if whole:
                yield "records", np.frombuffer(buf, dtype=self.dtype, count=whole)
            pending = buf[whole * size:]

    def blocks(self) -> Iterator[Records]:
        for kind, block in self._raw_blocks():
            first = self.data_lines + 1
            if kind == "records":
                self.data_lines += len(block)
                yield self._records(block, first)
                continue
            self.data_lines += 1
            if kind == "header":
                reason = f"the file ends inside its {self.spec.header_bytes}-byte header ({len(block)} bytes)"
            else:
                reason = f"partial record at the end of the file: {len(block)} of {self.record_bytes} bytes (truncated?)"
            yield _empty(rejects=[Reject(first, reason, block.hex(" "))])

    # --- fields --------------------------------------------------------------------------
    def _records(self, block: np.ndarray, first: int) -> Records:
        n = len(block)
        lines = np.arange(first, first + n, dtype=np.int64)
        columns = {}
        bad: dict[str, np.ndarray] = {}  # field -> records it makes a reject
        for name in ("channel", "code", "gain"):
            if name not in self.dtype.names:
                columns[name] = np.zeros(n, dtype=np.int64)
                continue
            raw = block[name]
            low, high, _ = FIELD_LIMITS[name]
            info = np.iinfo(raw.dtype)
            if info.min < low or info.max > high:
                bad[name] = (raw > high) if info.min >= 0 else (raw < low) | (raw > high)
            columns[name] = raw.astype(np.int64)
        wall, bad["time"] = self._times(block["time"])
        rejected = np.zeros(n, dtype=bool)
        for mask in bad.values():
            rejected |= mask
        if not rejected.any():
            return self._finish(lines, wall, columns, [])
        rejects = [Reject(int(lines[i]), self._reason(block[i], bad, i), block[i:i + 1].tobytes().hex(" "))
                   for i in np.flatnonzero(rejected).tolist()]
        keep = ~rejected
        return self._finish(lines[keep], wall[keep], {k: v[keep] for k, v in columns.items()}, rejects)

    def _reason(self, record, bad: dict[str, np.ndarray], i: int) -> str:
        for name in ("channel", "code", "gain"):
            if name in bad and bad[name][i]:
                width = FIELD_LIMITS[name][2]
                return f"{name} {int(record[name])} is out of range (the output column is {width})"
        return f"time {record['time'].item()!r} {self.spec.time_unit} is not a finite time or is out of range"

    def _finish(self, lines, wall, columns, rejects) -> Records:
        if self.epoch_is_wall:
            utc, flags = self.clock.to_utc(wall)
        else:
            utc, flags = wall, np.zeros(len(wall), dtype=np.int64)
        return Records(
            line=lines,
            time_us=utc,
            time_flags=flags,
            channel=columns["channel"],
            code=columns["code"],
            gain=columns["gain"],
            rejects=rejects,
        )

    def _times(self, raw: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """µs since 1970 (UTC, or wall clock for a naive epoch) and a mask of bad times."""
        unit = UNIT_US[self.spec.time_unit]
        if raw.dtype.kind == "f":
            values = raw.astype(np.float64)
            with np.errstate(invalid="ignore", over="ignore"):
                us = np.round(values / 1000) if unit is None else np.round(values * unit)
                us = us + self.epoch_us
                bad = ~np.isfinite(us) | (np.abs(us) > TIME_LIMIT_US)
            return np.where(bad, 0, us).astype(np.int64), bad
        if unit is not None and len(raw):
            # the common case, every count comfortably in range: no masks
            limit = (int(TIME_LIMIT_US) - abs(self.epoch_us)) // unit
            if -limit <= int(raw.min()) and int(raw.max()) <= limit:
                return raw.astype(np.int64) * unit + self.epoch_us, np.zeros(len(raw), dtype=bool)
        if raw.dtype.kind == "u" and raw.dtype.itemsize == 8:
            too_big = raw > np.uint64(np.iinfo(np.int64).max)
            counts = np.where(too_big, 0, raw).astype(np.int64)
        else:
            too_big = np.zeros(len(raw), dtype=bool)
            counts = raw.astype(np.int64)
        if unit is None:  # nanoseconds: to the nearest µs, halves to even
            us = counts // 1000
            rest = counts - us * 1000
            us += (rest > 500) | ((rest == 500) & (us % 2 == 1))
        else:
            limit = int(TIME_LIMIT_US) // unit
            too_big |= np.abs(counts) > limit
            us = np.where(too_big, 0, counts) * unit
        out_of_range = np.abs(us.astype(np.float64) + self.epoch_us) > TIME_LIMIT_US
        bad = too_big | out_of_range
        return np.where(bad, 0, us + self.epoch_us), bad


def _empty(rejects: list[Reject]) -> Records:
    empty = np.zeros(0, dtype=np.int64)
    return Records(empty, empty, empty, empty, empty, empty, rejects=rejects)


def open_log(path: str | Path, spec: InputSpec, timezone: str, chunk_rows: int = 250_000):
    """The reader for a raw log of the map's ``[input] format``: text or binary."""
    if spec.format == "binary":
        return BinaryLogReader(path, spec, timezone, block_records=chunk_rows)
    return LogReader(path, spec, timezone, block_bytes=_text_block_bytes(chunk_rows), block_lines=chunk_rows)


def _text_block_bytes(chunk_rows: int) -> int:
    return int(min(16 << 20, max(64 << 10, chunk_rows * 48)))
