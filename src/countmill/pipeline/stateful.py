"""Quality tests that need history, after the intent of the U.S. IOOS QARTOD manuals.

Each channel keeps its state in small objects carried from chunk to chunk, so a file gives
the same flags whatever the chunk size:

* :class:`ClockState`: time order and gaps against the channel's previous record;
* :class:`SeriesState`: rate of change, flat line and spike over the channel's usable
  values (good or suspect; bad and missing values are not part of the series).

The spike test needs the *next* value, so the last value of each chunk waits
(``pending``) until the next value arrives; the writer holds rows back meanwhile.

References
----------
U.S. Integrated Ocean Observing System, Manual for Real-Time Quality Control of In-situ
Temperature and Salinity Data (QARTOD), version 2.1, 2020: gross range, spike, rate of
change and flat line tests.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from countmill.chanmap.compiled import QcSettings
from countmill.flags import Flag
from countmill.pipeline.timezone import US

#: the spike test looks at most this many lines ahead for a channel's next value
SPIKE_LOOKAHEAD_LINES = 100_000


@dataclass
class ClockState:
    """Time of the channel's previous record in file order."""

    previous_us: int | None = None

    def test(self, times: np.ndarray, max_gap_us: np.ndarray | None) -> np.ndarray:
        """Flags for records in file order; ``max_gap_us`` per record (no gap test where < 0)."""
        flags = np.zeros(len(times), dtype=np.int64)
        if len(times) == 0:
            return flags
        previous = np.empty_like(times)
        previous[1:] = times[:-1]
        has_previous = np.ones(len(times), dtype=bool)
        if self.previous_us is None:
            has_previous[0] = False
            previous[0] = times[0]
        else:
            previous[0] = self.previous_us
        step = times - previous
        flags[has_previous & (step < 0)] |= int(Flag.TIME_OUT_OF_ORDER)
        flags[has_previous & (step == 0)] |= int(Flag.TIME_DUPLICATE)
        if max_gap_us is not None:
            flags[has_previous & (max_gap_us >= 0) & (step > max_gap_us)] |= int(Flag.GAP_BEFORE)
        self.previous_us = int(times[-1])
        return flags


@dataclass
class Pending:
    """The last value of a series, waiting for its successor before the spike test."""

    row: int  # global output row
    line: int
    value: float
    before: float | None  # the value before it, if any


@dataclass
class SeriesState:
    """History of one channel's usable values."""

    qc: QcSettings
    last_time_us: int | None = None
    last_value: float | None = None
    pending: Pending | None = None
    # flat-line window: monotone times and values reaching back flat_seconds (plus anchor)
    window_times: np.ndarray = field(default_factory=lambda: np.zeros(0, dtype=np.int64))
    window_values: np.ndarray = field(default_factory=lambda: np.zeros(0))

    def test(self, times, values, lines, rows) -> tuple[np.ndarray, list[tuple[int, int]]]:
        """Flags for this chunk's usable values, plus spike flags for earlier held rows.

        ``rows`` are the global output rows of the values; the second result lists
        (row, flag) pairs to set on rows already held back.
        """
        flags = np.zeros(len(values), dtype=np.int64)
        patches: list[tuple[int, int]] = []
        if len(values) == 0:
            return flags, patches
        qc = self.qc
        if qc.rate is not None:
            flags |= self._rate(times, values, qc.rate)
        if qc.flat_seconds is not None:
            flags |= self._flat(times, values, qc.flat_tolerance, qc.flat_seconds)
        if qc.spike is not None:
            patches = self._spike(values, lines, rows, qc.spike, flags)
        self.last_time_us = int(times[-1])
        self.last_value = float(values[-1])
        return flags, patches

    def _rate(self, times, values, limit) -> np.ndarray:
        prev_t = np.concatenate(([self.last_time_us if self.last_time_us is not None else times[0]], times[:-1]))
        prev_x = np.concatenate(([self.last_value if self.last_value is not None else np.nan], values[:-1]))
        dt_s = (times - prev_t) / US
        with np.errstate(all="ignore"):
            rate = np.abs(values - prev_x) / dt_s
        bad = (dt_s > 0) & (rate > limit)
        return np.where(bad, np.int64(Flag.RATE_OF_CHANGE), np.int64(0))

    def _flat(self, times, values, tolerance, seconds) -> np.ndarray:
        span = round(seconds * US)
        previous_max = self.window_times[-1] if len(self.window_times) else np.iinfo(np.int64).min
        mono = np.maximum.accumulate(np.concatenate(([previous_max], times)))[1:]
        all_t = np.concatenate([self.window_times, mono])
        all_x = np.concatenate([self.window_values, values])
        offset = len(self.window_times)
        here = np.arange(offset, len(all_t))
        anchor = np.searchsorted(all_t, all_t[here] - span, side="right") - 1
        reaches = anchor >= 0
        lo, hi = range_min_max(all_x, np.maximum(anchor, 0), here)
        x = all_x[here]
        flat = reaches & (hi - x <= tolerance) & (x - lo <= tolerance)
        keep = max(int(np.searchsorted(all_t, all_t[-1] - span, side="right")) - 1, 0)
        self.window_times = all_t[keep:].copy()
        self.window_values = all_x[keep:].copy()
        return np.where(flat, np.int64(Flag.FLAT_LINE), np.int64(0))

    def _spike(self, values, lines, rows, threshold, flags) -> list[tuple[int, int]]:
        patches: list[tuple[int, int]] = []
        pending = self.pending
        if pending is not None and pending.before is not None and lines[0] - pending.line <= SPIKE_LOOKAHEAD_LINES:
            if abs(pending.value - (pending.before + values[0]) / 2) > threshold:
                patches.append((pending.row, int(Flag.SPIKE)))
        before = np.concatenate(([pending.value if pending is not None else np.nan], values[:-1]))
        after = np.concatenate((values[1:], [np.nan]))
        next_line = np.concatenate((lines[1:], [lines[-1]]))
        near = (next_line - lines) <= SPIKE_LOOKAHEAD_LINES
        prev_line = np.concatenate(([pending.line if pending is not None else lines[0]], lines[:-1]))
        before[(lines - prev_line) > SPIKE_LOOKAHEAD_LINES] = np.nan
        with np.errstate(invalid="ignore"):
            spike = near & (np.abs(values - (before + after) / 2) > threshold)
        flags[spike] |= int(Flag.SPIKE)
        last_before = before[-1]
        self.pending = Pending(
            row=int(rows[-1]),
            line=int(lines[-1]),
            value=float(values[-1]),
            before=None if np.isnan(last_before) else float(last_before),
        )
        return patches

    def expire(self, current_line: int) -> None:
        """Give up on a pending value whose successor is too far ahead to judge it."""
        if self.pending is not None and current_line - self.pending.line > SPIKE_LOOKAHEAD_LINES:
            self.pending = None


def range_min_max(x: np.ndarray, start: np.ndarray, stop: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Min and max of ``x[start[i]:stop[i]+1]`` for every i, with a sparse table.

    O(n log n) numpy work, no Python loop per element.
    """
    n = len(x)
    if n == 0:
        return np.zeros(0), np.zeros(0)
    mins = [x]
    maxs = [x]
    width = 1
    while width * 2 <= n:
        prev_min, prev_max = mins[-1], maxs[-1]
        mins.append(np.minimum(prev_min[:-width], prev_min[width:]))
        maxs.append(np.maximum(prev_max[:-width], prev_max[width:]))
        width *= 2
    length = stop - start + 1
    level = np.floor(np.log2(np.maximum(length, 1))).astype(np.int64)
    lo = np.empty(len(start))
    hi = np.empty(len(start))
    for k in np.unique(level):
        sel = level == k
        s = start[sel]
        e = stop[sel] - (1 << int(k)) + 1
        lo[sel] = np.minimum(mins[k][s], mins[k][e])
        hi[sel] = np.maximum(maxs[k][s], maxs[k][e])
    return lo, hi
