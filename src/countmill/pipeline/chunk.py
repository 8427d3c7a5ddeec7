"""A chunk of records laid out channel by channel, and where its rows go in the output.

The converter groups a chunk by channel once (a stable sort, so each channel's records stay
in file order) and runs every stage on contiguous arrays; :func:`row_positions` tells
where each record's row lands once the derived rows are put right after their triggers.
"""

from __future__ import annotations

import numpy as np

from countmill.pipeline.reader import Records


class ChannelChunk:
    """One chunk laid out channel by channel (stable, so each channel stays in file order).

    ``order[i]`` is the file position of grouped record i; ``spans`` maps each channel id
    met to its (start, stop) in the grouped arrays. The per-record results are grouped
    too: ``value``, ``volts``, ``flags`` (of the conversion), ``rid`` (the converting
    revision's number, -1 for none) and ``usable`` (a value good or suspect).
    """

    def __init__(self, rec: Records, order: np.ndarray, spans: dict[int, tuple[int, int]]):
        n = len(rec)
        self.rec = rec
        self.order = order
        self.spans = spans
        self.time_us = rec.time_us[order]
        self.code = rec.code[order]
        self.gain = rec.gain[order]
        self.value = np.full(n, np.nan)
        self.volts = np.full(n, np.nan)
        self.flags = rec.time_flags[order] if rec.time_flags.any() else np.zeros(n, dtype=np.int64)
        self.rid = np.full(n, -1, dtype=np.int32)
        self.usable = np.zeros(n, dtype=bool)

    @classmethod
    def grouped(cls, rec: Records) -> "ChannelChunk":
        channel = rec.channel
        n = len(channel)
        low, high = (int(channel.min()), int(channel.max())) if n else (0, 0)
        if n and 0 <= low and high < 1 << 16:
            # numpy sorts 8- and 16-bit keys stably by radix (8-bit: one counting pass)
            key = channel.astype(np.uint8 if high < 1 << 8 else np.uint16)
            order = np.argsort(key, kind="stable")
            counts = np.bincount(key)
            ids = np.flatnonzero(counts)
            stops = np.cumsum(counts)[ids]
            starts = stops - counts[ids]
        else:
            order = np.argsort(channel, kind="stable")
            ids, starts = np.unique(channel[order], return_index=True)
            stops = np.append(starts[1:], n)
        spans = dict(zip(ids.tolist(), zip(starts.tolist(), stops.tolist())))
        return cls(rec, order, spans)

    def line_at(self, positions) -> np.ndarray:
        return self.rec.line[positions]


def row_positions(n: int, derived_parts) -> np.ndarray | None:
    """Output row of each record when derived rows follow their triggers (None: no derived
    rows, row = record); also sets each derived part's ``rows``."""
    parts = [p for p in derived_parts if p is not None]
    if not parts:
        return None
    count = np.zeros(n, dtype=np.int64)
    for part in parts:
        count[part.positions] += 1
    row_of = np.arange(n, dtype=np.int64) + np.cumsum(count) - count
    taken = np.zeros(n, dtype=np.int64)
    for part in parts:  # several derived rows after one record: in map order
        q = part.positions
        part.rows = row_of[q] + 1 + taken[q]
        taken[q] += 1
    return row_of
