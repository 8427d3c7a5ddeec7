"""Convert one raw log file: the library entry point behind ``countmill convert``.

>>> from countmill.convert import convert_file
>>> result = convert_file("day.csv", "brewhouse.toml", "day.parquet")  # doctest: +SKIP
"""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path
from typing import Callable

import numpy as np

from countmill import __version__
from countmill.chanmap import ChannelMap, load_map
from countmill.errors import InputError, UsageError
from countmill.flags import Flag, Quality, flag_name
from countmill.pipeline.convert import Converter, Rows
from countmill.pipeline.output import CsvSink, ParquetSink, RejectsSink
from countmill.pipeline.binary_reader import open_log
from countmill.pipeline.reader import file_sha256
from countmill.pipeline.stream import BackgroundWriter, InThread, Prefetch

QUALITY_LEVELS = tuple(int(q) for q in Quality)
DEFAULT_CHUNK_ROWS = 250_000


@dataclass
class ConversionResult:
    source: Path
    output: Path
    rejects_path: Path | None
    data_lines: int
    rows: int
    records: int
    rejects: int
    #: channel name (None for unmapped) -> {quality level: count}
    quality_counts: dict[str | None, dict[int, int]] = field(default_factory=dict)
    #: each reason seen per channel: {channel, flag, count, first, last}
    flag_events: list[dict] = field(default_factory=list)
    source_sha256: str = ""

    @property
    def exit_code(self) -> int:
        return 3 if self.rejects else 0

    def as_dict(self) -> dict:
        return {
            "source": str(self.source),
            "output": str(self.output),
            "rejects_file": str(self.rejects_path) if self.rejects_path else None,
            "data_lines": self.data_lines,
            "records": self.records,
            "rows": self.rows,
            "rejects": self.rejects,
            "source_sha256": self.source_sha256,
            "quality": {str(k): v for k, v in self.quality_counts.items()},
            "flags": self.flag_events,
        }


def default_output(raw: Path) -> Path:
    name = raw.name
    if name.endswith(".gz"):
        name = name[:-3]
    return Path.cwd() / (Path(name).stem + ".parquet")


def provenance(cmap: ChannelMap, source: Path, source_sha256: str) -> dict:
    channels: dict[str, dict] = {}
    for cid in cmap.order:
        revisions = cmap.channels[cid]
        entries = [
            {
                "from": rev.valid_from_text,
                "name": rev.name,
                "unit": rev.unit,
                "description": rev.description,
                "chain": rev.chain_metadata(),
                "calibration": rev.calibration.as_metadata() if rev.calibration else None,
                "range": list(rev.range) if rev.range else None,
                "expect": list(rev.expect) if rev.expect else None,
                "from_utc": _utc_text(rev.valid_from_us),
                "adc": {"bits": rev.adc.bits, "span": list(rev.adc.span), "coding": rev.adc.coding},
                "gains": {str(code): gain for code, gain in sorted(rev.gains.items())},
            }
            for rev in revisions
        ]
        # a channel renamed in a revision is listed under each name, with the latest
        # revision that carries that name (the rows under a name are that name's revisions)
        for rev in revisions:
            channels[rev.name] = {
                "id": cid,
                "unit": rev.unit,
                "description": rev.description,
                "chain": rev.chain_metadata(),
                "calibration": rev.calibration.as_metadata() if rev.calibration else None,
                "revisions": entries,
            }
    for d in cmap.derived:
        channels[d.name] = {
            "id": None,
            "unit": d.unit,
            "description": d.description,
            "chain": [{"expression": d.expression.text, "max_age": d.max_age_s}],
            "calibration": None,
            "revisions": [],
            "expression": d.expression.text,
        }
    return {
        "version": __version__,
        "map": {"name": cmap.name, "path": Path(cmap.path).name, "sha256": cmap.sha256, "timezone": cmap.timezone},
        "source": {"name": source.name, "sha256": source_sha256},
        "channels": channels,
    }


def _utc_text(instant_us: int) -> str | None:
    """ISO 8601 UTC text of a revision start; None for a revision valid from the beginning."""
    if instant_us == np.iinfo(np.int64).min:
        return None
    return str(np.datetime64(int(instant_us), "us")) + "Z"


class _Tally:
    """Quality counts and flag occurrences per channel, accumulated chunk by chunk."""

    def __init__(self, names: list[str]):
        self.names = names
        self.counts = np.zeros((len(names) + 1, 10), dtype=np.int64)
        #: (channel index, flag name) -> [count, first time µs, last time µs]
        self.flag_events: dict[tuple[int, str], list[int]] = {}

    def add(self, rows: Rows) -> None:
        channels = len(self.names) + 1  # the last one: rows of no channel (unmapped)
        index = np.where(rows.name < 0, len(self.names), rows.name)
        # np.bincount on a combined key is much faster than np.add.at
        key = index.astype(np.int64) * 10 + rows.quality
        self.counts += np.bincount(key, minlength=self.counts.size).reshape(self.counts.shape)
        present = int(np.bitwise_or.reduce(rows.flags)) if len(rows) else 0
        if not present:
            return
        flagged = np.flatnonzero(rows.flags)
        flags, where, times = rows.flags[flagged], index[flagged], rows.time_us[flagged]
        for flag in Flag:
            if not present & int(flag):
                continue
            hit = np.flatnonzero(flags & int(flag))
            channel, t = where[hit], times[hit]
            # per channel: count, first and last time (a few channels: unbuffered min/max)
            counts = np.bincount(channel, minlength=channels)
            firsts = np.full(channels, np.iinfo(np.int64).max)
            lasts = np.full(channels, np.iinfo(np.int64).min)
            np.minimum.at(firsts, channel, t)
            np.maximum.at(lasts, channel, t)
            for c in np.flatnonzero(counts).tolist():
                k, first, last = int(counts[c]), int(firsts[c]), int(lasts[c])
                entry = self.flag_events.setdefault((c, flag_name(flag)), [0, first, last])
                entry[0] += k
                entry[1] = min(entry[1], first)
                entry[2] = max(entry[2], last)

    def label(self, i: int) -> str | None:
        return self.names[i] if i < len(self.names) else None

    def as_dict(self) -> dict[str | None, dict[int, int]]:
        out = {}
        for i, row in enumerate(self.counts):
            if row.sum():
                out[self.label(i)] = {q: int(row[q]) for q in QUALITY_LEVELS if row[q]}
        return out

    def flag_list(self) -> list[dict]:
        """Each reason seen per channel: count and first/last time (ISO 8601 UTC)."""
        def iso(us: int) -> str:
            return np.datetime64(us, "us").astype(str) + "Z"

        return [
            {"channel": self.label(i), "flag": name, "count": c, "first": iso(first), "last": iso(last)}
            for (i, name), (c, first, last) in sorted(self.flag_events.items(), key=lambda kv: (kv[0][0], kv[1][1]))
        ]


def iter_chunks(blocks, chunk_rows: int):
    """Re-cut reader blocks into chunks of at most ``chunk_rows`` records."""
    for block in blocks:
        rejects = block.rejects
        if len(block) == 0:
            yield block
            continue
        for start in range(0, len(block), chunk_rows):
            piece = block.slice(start, start + chunk_rows)
            piece.rejects = rejects if start == 0 else []
            yield piece


def convert_file(
    raw: str | Path,
    channel_map: str | Path | ChannelMap,
    output: str | Path | None = None,
    *,
    chunk_rows: int = DEFAULT_CHUNK_ROWS,
    layout: str = "tidy",
    every: str | None = None,
    progress: Callable[[int, int], None] | None = None,
) -> ConversionResult:
    """Convert ``raw`` with ``channel_map`` into ``output`` (.parquet or .csv).

    Raises :class:`countmill.errors.MapError` (exit 2), :class:`UsageError` (2) or
    :class:`InputError` (1); on any failure nothing is left at the final path.
    """
    raw = Path(raw)
    cmap = channel_map if isinstance(channel_map, ChannelMap) else load_map(channel_map)
    out = Path(output) if output is not None else default_output(raw)
    if out.suffix.lower() not in (".parquet", ".csv"):
        raise UsageError(f"{out}: the output suffix must be .parquet or .csv")
    if chunk_rows < 1:
        raise UsageError(f"--chunk-rows must be at least 1; got {chunk_rows}")
    if layout == "wide":
        from countmill.wide import convert_wide  # noqa: PLC0415 (optional layout)

        return convert_wide(raw, cmap, out, chunk_rows=chunk_rows, every=every, progress=progress)
    if layout != "tidy":
        raise UsageError(f"--layout must be tidy or wide; got {layout!r}")
    sink_type = CsvSink if out.suffix.lower() == ".csv" else ParquetSink
    return run_conversion(
        raw, cmap, out, lambda converter, info: sink_type(out, converter.names, converter.units, info),
        chunk_rows=chunk_rows, progress=progress,
    )


def run_conversion(
    raw: Path,
    cmap: ChannelMap,
    out: Path,
    make_sink: Callable[[Converter, dict], object],
    *,
    chunk_rows: int,
    progress: Callable[[int, int], None] | None = None,
    converter: Converter | None = None,
) -> ConversionResult:
    """The streaming loop read → convert → test → write, shared by every output layout.

    ``make_sink(converter, provenance)`` returns an object with ``write(rows)``, ``close()``
    and ``abort()``; it receives the tidy rows in input order, with their final flags. The
    source's SHA-256 is computed in a helper thread while the file is read; ``make_sink`` is
    called (in the writer thread) once it is known, with the whole provenance. Sinks write
    the provenance when they close. ``converter`` is a :class:`Converter` of ``cmap`` (made
    here when not given; the benchmark gives one that leaves the conversion out).
    """
    if not raw.exists():
        raise InputError(f"{raw}: no such file")

    converter = converter if converter is not None else Converter(cmap)
    out.parent.mkdir(parents=True, exist_ok=True)

    def source_hash() -> str:
        try:
            return file_sha256(raw)
        except OSError as exc:
            raise InputError(f"{raw}: cannot read: {exc.strerror}") from None

    # Three stages side by side (see countmill.pipeline.stream): the source is hashed and
    # read ahead in helper threads, converted here, and written by a third thread, which
    # opens the sink once the hash is known. (Opening it at once, with the hash added at
    # close, saved no measurable time, and a batch stopped by SIGTERM in the first moments
    # of a conversion then sometimes aborted at interpreter exit.)
    tally = _Tally(converter.names)

    def open_sink():
        return make_sink(converter, provenance(cmap, raw, digest.result()))

    def write(sink, rows: Rows) -> None:
        sink.write(rows)
        tally.add(rows)

    held: list[Rows] = []
    held_start = 0  # global index of the first held row
    rows_written = 0
    records = 0
    # The helper threads start inside the try: an interruption (SIGINT, SIGTERM in a batch)
    # that lands at any point after they exist still stops them before the error goes up,
    # so no helper is left running while the interpreter shuts down.
    digest = writer = rejects = None
    try:
        digest = InThread(source_hash, name="countmill-hash")
        writer = BackgroundWriter(open_sink, write)
        rejects = RejectsSink(out)
        with open_log(raw, cmap.input, cmap.timezone, chunk_rows) as reader:
            chunks = None
            try:
                chunks = Prefetch(iter_chunks(reader.blocks(), chunk_rows), name="countmill-read")
                for chunk in chunks:
                    rejects.write(chunk.rejects)
                    if len(chunk):
                        records += len(chunk)
                        held.append(converter.convert(chunk))
                        converter.expire_all(int(chunk.line[-1]))
                        held, held_start, n = _release(converter, held, held_start, writer.put, final=False)
                        rows_written += n
                    if progress is not None:
                        progress(reader.bytes_read, reader.total_bytes)
            finally:
                if chunks is not None:
                    chunks.close()
            held, held_start, n = _release(converter, held, held_start, writer.put, final=True)
            rows_written += n
            data_lines = reader.data_lines
        if records + rejects.count != data_lines:  # every data line is a record or a reject
            # checked before anything is published: exit 1 leaves nothing at the final path
            raise InputError(f"{raw}: accounting error: {data_lines} data lines, {records} records, {rejects.count} rejects")
        sink = writer.finish()
        sink.close()
        rejects_path = rejects.close()
    except BaseException:
        sink = writer.stop() if writer is not None else None
        if sink is not None:
            sink.abort()
        if rejects is not None:
            rejects.abort()
        if digest is not None:
            try:  # let the hash thread finish reading the source before the error goes up
                digest.result()
            except Exception:
                pass
        raise
    source_sha = digest.result()
    return ConversionResult(
        source=raw,
        output=out,
        rejects_path=rejects_path,
        data_lines=data_lines,
        rows=rows_written,
        records=records,
        rejects=rejects.count,
        quality_counts=tally.as_dict(),
        flag_events=tally.flag_list(),
        source_sha256=source_sha,
    )


def _release(converter: Converter, held: list[Rows], held_start: int, emit: Callable[[Rows], None], final: bool):
    """Emit held rows that no pending spike decision still needs; patch spike flags first.

    ``held`` is a list of consecutive parts (so a long chunk is never copied just to join
    it to the few rows still waiting before it); rows before the first pending decision
    are emitted part by part, the part it falls in is cut.
    """
    if not held:
        return held, held_start, 0
    ends = np.cumsum([len(part) for part in held])
    for row, flag in converter.patches:
        at = row - held_start
        k = int(np.searchsorted(ends, at, side="right"))
        held[k].flags[at - (int(ends[k - 1]) if k else 0)] |= flag
    converter.patches.clear()
    stop = int(ends[-1])
    if not final:
        first_pending = converter.held_from()
        if first_pending is not None:
            stop = max(0, first_pending - held_start)
    if stop == 0:
        return held, held_start, 0
    keep: list[Rows] = []
    done = 0
    for part in held:
        if done >= stop:
            keep.append(part)
        elif done + len(part) <= stop:
            emit(part)
            done += len(part)
        else:
            cut = stop - done
            emit(part.take(slice(0, cut)))
            keep.append(part.take(slice(cut, None)))
            done = stop
    return keep, held_start + stop, stop
