"""Read raw logger text into record arrays, chunk by chunk, losing no line.

Each data line becomes either one record or one :class:`Reject`. Line numbers are
1-based and count every physical line (comments, blanks and the header too).

The fast path hands a whole block of clean lines to Arrow's CSV parser with typed
columns; a block that Arrow refuses (a comment, a blank line, a bad field, a NUL byte ...)
is read again line by line so that each bad line gets its own reason.
"""

from __future__ import annotations

import datetime as dt
import gzip
import hashlib
import io
import zlib
from dataclasses import dataclass, field
from pathlib import Path
from typing import BinaryIO, Iterator

import numpy as np
import pyarrow as pa
import pyarrow.compute as pc
import pyarrow.csv as pacsv

from countmill.chanmap.models import InputSpec
from countmill.errors import InputError
from countmill.pipeline.timezone import US, LocalClock

BOM = b"\xef\xbb\xbf"
GZIP_MAGIC = b"\x1f\x8b"

#: integer fields and the range of their output column (channel_id int32, code int32,
#: gain_code int16): a number outside it cannot be written as read, so the line is a reject
FIELD_LIMITS = {
    "channel": (-(2**31), 2**31 - 1, "32-bit"),
    "code": (-(2**31), 2**31 - 1, "32-bit"),
    "gain": (-(2**15), 2**15 - 1, "16-bit"),
}


@dataclass
class Reject:
    line: int
    reason: str
    text: str


@dataclass
class Records:
    """Parsed records of one block, in file order."""

    line: np.ndarray  # int64
    time_us: np.ndarray  # int64, UTC
    time_flags: np.ndarray  # int64 (time_ambiguous)
    channel: np.ndarray  # int64
    code: np.ndarray  # int64
    gain: np.ndarray  # int64
    rejects: list[Reject] = field(default_factory=list)

    def __len__(self) -> int:
        return len(self.line)

    def slice(self, start: int, stop: int) -> "Records":
        return Records(
            self.line[start:stop],
            self.time_us[start:stop],
            self.time_flags[start:stop],
            self.channel[start:stop],
            self.code[start:stop],
            self.gain[start:stop],
        )


class CountingReader(io.RawIOBase):
    """Passes bytes through and counts them as stored (compressed, for .gz), for progress."""

    def __init__(self, raw: BinaryIO):
        self.raw = raw
        self.bytes_read = 0

    def readable(self) -> bool:
        return True

    def readinto(self, buffer) -> int:
        n = self.raw.readinto(buffer)
        if n:
            self.bytes_read += n
        return n or 0


def file_sha256(path: str | Path) -> str:
    """SHA-256 of a file's bytes as stored (compressed, for .gz)."""
    digest = hashlib.sha256()
    with open(path, "rb") as fh:
        while chunk := fh.read(1 << 22):
            digest.update(chunk)
    return digest.hexdigest()


class RawSource:
    """A raw log opened for reading: plain or gzip (told by its first bytes, a ``.gz`` name
    must hold gzip), its stored bytes counted for progress. Base of both readers."""

    def _open(self, path: str | Path, *, buffered: bool) -> None:
        self.path = Path(path)
        try:
            self._file = open(self.path, "rb")
        except OSError as exc:
            raise InputError(f"{self.path}: cannot open: {exc.strerror}") from None
        self.total_bytes = self.path.stat().st_size
        self._counter = CountingReader(self._file)
        magic = self._file.read(2)
        self._file.seek(0)
        self.compressed = magic == GZIP_MAGIC
        if self.path.suffix.lower() == ".gz" and not self.compressed:
            self._file.close()
            raise InputError(f"{self.path}: named .gz but not gzip data (corrupt or mislabelled)")
        source: BinaryIO = io.BufferedReader(self._counter, buffer_size=1 << 20) if buffered else self._counter
        self._stream: BinaryIO = gzip.GzipFile(fileobj=source) if self.compressed else source

    @property
    def bytes_read(self) -> int:
        return self._counter.bytes_read

    def close(self) -> None:
        self._file.close()

    def __enter__(self):
        return self

    def __exit__(self, *exc):
        self.close()

    def _read(self, n: int) -> bytes:
        try:
            return self._stream.read(n)
        except (OSError, EOFError, zlib.error) as exc:
            raise InputError(f"{self.path}: the compressed data is corrupt or truncated ({exc})") from None


class LogReader(RawSource):
    """Iterates over :class:`Records` of a raw log, one block at a time."""

    def __init__(self, path: str | Path, spec: InputSpec, timezone: str, block_bytes: int = 4 << 20,
                 block_lines: int | None = None):
        self.spec = spec
        self.columns = list(spec.columns)
        self.clock = LocalClock(timezone)
        self.block_bytes = block_bytes
        #: when given, blocks are sized to hold about this many lines (from the length of the
        #: lines read so far), so that a chunk of ``block_lines`` rows is one block, unsplit
        self.block_lines = block_lines
        self._bytes_parsed = 0
        self.delimiter = spec.delimiter
        self.lines_seen = 0
        self.data_lines = 0
        self.header_line: int | None = None
        self._first_data_pending = True
        self._aware_first = False  # whether the last fast block had times with an offset
        self._open(path, buffered=True)

    def blocks(self) -> Iterator[Records]:
        leftover = b""
        first = True
        while True:
            data = self._read(self._read_size(len(leftover)))
            if first:
                first = False
                if data.startswith(BOM):
                    data = data[len(BOM):]
            eof = not data
            if eof:
                if not leftover:
                    break
                block, leftover = leftover, b""
            else:
                cut = data.rfind(b"\n")
                if cut < 0:
                    leftover += data
                    continue
                # one copy of the block's bytes (the line cut off last time, then this read up
                # to its last line ending); the rest waits for the next read
                block = leftover + memoryview(data)[: cut + 1] if leftover else data[: cut + 1]
                leftover = data[cut + 1:]
            self._bytes_parsed += len(block)
            records = self._parse_block(block, last=eof)
            yield records
            if eof:
                break

    def _read_size(self, pending: int) -> int:
        if self.block_lines is None:
            return self.block_bytes
        if self.lines_seen == 0:  # a small first block: the converter starts sooner
            return min(self.block_bytes, 1 << 20)
        per_line = self._bytes_parsed / self.lines_seen
        # a little under the target, so that a block is not cut into a chunk and a sliver
        return int(min(32 << 20, max(64 << 10, self.block_lines * per_line * 0.98 - pending)))

    # --- block parsing ---------------------------------------------------------------------
    def _parse_block(self, block: bytes, last: bool) -> Records:
        start_line = self.lines_seen + 1
        n_lines = _count_newlines(block) + (0 if block.endswith(b"\n") else 1)
        self.lines_seen += n_lines
        if self._first_data_pending:
            # Comments, blanks and the header come first: read them one by one, then hand
            # the rest of the block to the fast path.
            head, rest = self._split_preamble(block)
            if not rest:
                return self._slow_block(block, start_line, last)
            first = self._slow_block(head, start_line, last=False)
            lines_in_head = head.count(b"\n")
            self.lines_seen = start_line - 1 + lines_in_head
            second = self._parse_block(rest, last)
            return concatenate([first, second])
        # Blank lines need no search here: Arrow skips them, so a block holding one parses
        # to fewer rows than it has lines and takes the careful path below.
        if (
            b"#" in block
            or b"\x00" in block
            or block.startswith((b"\n", b"\r\n"))
            or not block.endswith(b"\n")
        ):
            return self._slow_block(block, start_line, last)
        try:
            table = self._read_typed(block)
            if table.num_rows != n_lines:
                raise ValueError("row count")
            if any(table.column(c).null_count for c in table.column_names):
                raise ValueError("empty field")
            for name in FIELD_LIMITS.keys() & set(self.columns):
                bounds = pc.min_max(table.column(name))
                low, high, _ = FIELD_LIMITS[name]
                if bounds["min"].as_py() < low or bounds["max"].as_py() > high:
                    raise ValueError("integer out of range")
            naive, aware = self._arrow_times(table.column("time"))
        except (pa.ArrowInvalid, ValueError):
            return self._slow_block(block, start_line, last)
        lines = np.arange(start_line, start_line + n_lines, dtype=np.int64)
        self.data_lines += n_lines
        return self._finish(lines, naive, aware, table, [])

    def _split_preamble(self, block: bytes) -> tuple[bytes, bytes]:
        """Cut the block after its first data line (the header, or the first record)."""
        pos = 0
        while pos < len(block):
            end = block.find(b"\n", pos)
            if end < 0:
                return block, b""
            text = block[pos:end].strip()
            if text and not text.startswith(b"#"):
                return block[: end + 1], block[end + 1:]
            pos = end + 1
        return block, b""

    def _read_typed(self, block: bytes) -> pa.Table:
        """Arrow's multi-threaded CSV parser, times parsed as ISO 8601 in the same pass.

        A block of naive times parses as ``timestamp[us]``, one of times with an offset as
        ``timestamp[us, UTC]`` (Arrow accepts either kind only into its own type, exactly as
        a cast from text does); the kind the last block had is tried first.
        """
        kinds = [self._aware_first, not self._aware_first] if self.spec.time == "iso" else [False]
        for attempt, aware in enumerate(kinds):
            try:
                table = pacsv.read_csv(
                    pa.BufferReader(pa.py_buffer(block)),
                    read_options=pacsv.ReadOptions(column_names=self.columns, use_threads=True, block_size=1 << 20),
                    parse_options=pacsv.ParseOptions(delimiter=self.delimiter, newlines_in_values=False),
                    convert_options=pacsv.ConvertOptions(column_types=self._arrow_types(aware), strings_can_be_null=False, quoted_strings_can_be_null=False),
                )
            except pa.ArrowInvalid as exc:
                if attempt + 1 == len(kinds) or "zone" not in str(exc):
                    raise
                continue
            self._aware_first = aware
            return table
        raise AssertionError("unreachable")

    def _arrow_types(self, aware: bool = False) -> dict[str, pa.DataType]:
        types = {"channel": pa.int64(), "code": pa.int64(), "gain": pa.int64()}
        if self.spec.time == "iso":
            types["time"] = pa.timestamp("us", "UTC") if aware else pa.timestamp("us")
        else:
            types["time"] = pa.float64()
        return {c: types[c] for c in self.columns}

    def _arrow_times(self, column: pa.ChunkedArray) -> tuple[np.ndarray, np.ndarray]:
        """Times as int64 µs and a mask of those that were naive (local wall time)."""
        if self.spec.time != "iso":
            scale = US if self.spec.time == "unix_s" else 1000
            values = column.to_numpy()
            us = np.round(values * scale)
            if not np.all(np.isfinite(us)) or np.any(np.abs(us) > 9e18):
                raise ValueError("time out of range")
            return us.astype(np.int64), np.zeros(len(us), dtype=bool)
        if column.type.tz is None:
            return column.cast(pa.int64()).to_numpy(), np.ones(len(column), dtype=bool)
        return column.cast(pa.int64()).to_numpy(), np.zeros(len(column), dtype=bool)

    def _finish(self, lines, time_us, naive_mask, table_or_columns, rejects) -> Records:
        n = len(lines)
        if isinstance(table_or_columns, pa.Table):
            cols = {c: table_or_columns.column(c).to_numpy() for c in ("channel", "code", "gain") if c in self.columns}
        else:
            cols = table_or_columns
        gain = cols.get("gain", np.zeros(n, dtype=np.int64))
        if n and naive_mask.all():  # the usual file: every time is local wall-clock time
            utc, flags = self.clock.to_utc(time_us)
        else:
            utc = time_us.copy()
            flags = np.zeros(n, dtype=np.int64)
            if naive_mask.any():
                idx = np.flatnonzero(naive_mask)
                local_utc, local_flags = self.clock.to_utc(time_us[idx])
                utc[idx] = local_utc
                flags[idx] = local_flags
        return Records(
            line=lines,
            time_us=utc,
            time_flags=flags,
            channel=np.asarray(cols["channel"], dtype=np.int64),
            code=np.asarray(cols["code"], dtype=np.int64),
            gain=np.asarray(gain, dtype=np.int64),
            rejects=rejects,
        )

    def _slow_block(self, block: bytes, start_line: int, last: bool) -> Records:
        """Line by line: the careful path for blocks with comments or damaged lines."""
        pieces = block.split(b"\n")
        if block.endswith(b"\n"):
            pieces.pop()
        lines, times, naive, channels, codes, gains = [], [], [], [], [], []
        rejects: list[Reject] = []
        ncols = len(self.columns)
        index = {c: i for i, c in enumerate(self.columns)}
        for offset, raw in enumerate(pieces):
            number = start_line + offset
            truncated = last and offset == len(pieces) - 1 and not block.endswith(b"\n")
            if raw.endswith(b"\r"):
                raw = raw[:-1]
            text = raw.decode("utf-8", errors="replace")
            stripped = text.strip()
            if not stripped or (stripped.startswith("#") and "\x00" not in raw.decode("latin-1")):
                continue
            if self._first_data_pending:
                self._first_data_pending = False
                if self.delimiter is None:
                    self.delimiter = "\t" if "\t" in text else ","
                fields = [_unquote(f).lower() for f in text.split(self.delimiter)]
                if fields == [c.lower() for c in self.columns]:
                    self.header_line = number
                    continue
            self.data_lines += 1
            reason = self._parse_line(raw, text, ncols, index, times, naive, channels, codes, gains)
            if reason is None:
                lines.append(number)
                continue
            if truncated:
                reason = f"{reason} (last line has no line ending: truncated?)"
            rejects.append(Reject(number, reason, text))
        n = len(lines)
        columns = {
            "channel": np.asarray(channels, dtype=np.int64),
            "code": np.asarray(codes, dtype=np.int64),
            "gain": np.asarray(gains, dtype=np.int64) if "gain" in self.columns else np.zeros(n, dtype=np.int64),
        }
        return self._finish(
            np.asarray(lines, dtype=np.int64),
            np.asarray(times, dtype=np.int64),
            np.asarray(naive, dtype=bool),
            columns,
            rejects,
        )

    def _parse_line(self, raw: bytes, text: str, ncols, index, times, naive, channels, codes, gains) -> str | None:
        if b"\x00" in raw:
            return "NUL byte in line"
        fields = [_unquote(f) for f in text.split(self.delimiter)]
        if len(fields) != ncols:
            return f"expected {ncols} fields ({', '.join(self.columns)}), found {len(fields)}"
        values = {}
        for name in ("channel", "code", "gain"):
            if name not in index:
                continue
            field_text = fields[index[name]]
            try:
                values[name] = int(field_text)
            except ValueError:
                return f"{name} {field_text!r} is not an integer"
            low, high, width = FIELD_LIMITS[name]
            if not low <= values[name] <= high:
                return f"{name} {field_text!r} is out of range (the output column is {width})"
        time_text = fields[index["time"]]
        parsed = self._parse_time(time_text)
        if parsed is None:
            return f"time {time_text!r} is not {'an ISO 8601 time' if self.spec.time == 'iso' else 'a number of ' + self.spec.time[5:]}"
        us, is_naive = parsed
        times.append(us)
        naive.append(is_naive)
        channels.append(values["channel"])
        codes.append(values["code"])
        gains.append(values.get("gain", 0))
        return None

    def _parse_time(self, text: str) -> tuple[int, bool] | None:
        if self.spec.time != "iso":
            try:
                value = float(text)
            except ValueError:
                return None
            if not np.isfinite(value):
                return None
            scale = US if self.spec.time == "unix_s" else 1000
            return int(round(value * scale)), False
        try:
            when = dt.datetime.fromisoformat(text.replace("z", "Z"))
        except ValueError:
            return None
        epoch = dt.datetime(1970, 1, 1, tzinfo=dt.timezone.utc)
        if when.tzinfo is None:
            delta = when - dt.datetime(1970, 1, 1)
            is_naive = True
        else:
            delta = when - epoch
            is_naive = False
        return (delta.days * 86_400 + delta.seconds) * US + delta.microseconds, is_naive


def _unquote(field: str) -> str:
    """A field without surrounding blanks and CSV double quotes (``"101"`` -> ``101``), so that
    a line reads the same here as through Arrow's CSV parser on the fast path."""
    field = field.strip()
    if len(field) >= 2 and field[0] == field[-1] == '"':
        field = field[1:-1].replace('""', '"')
    return field


def _count_newlines(block: bytes) -> int:
    """``block.count(b"\\n")``, a few times faster on megabyte blocks."""
    return int(np.count_nonzero(np.frombuffer(block, dtype=np.uint8) == 0x0A))


def concatenate(parts: list[Records]) -> Records:
    parts = [p for p in parts if len(p) or p.rejects]
    if not parts:
        empty = np.zeros(0, dtype=np.int64)
        return Records(empty, empty, empty, empty, empty, empty)
    if len(parts) == 1:
        return parts[0]
    return Records(
        *(np.concatenate([getattr(p, name) for p in parts]) for name in ("line", "time_us", "time_flags", "channel", "code", "gain")),
        rejects=[r for p in parts for r in p.rejects],
    )
