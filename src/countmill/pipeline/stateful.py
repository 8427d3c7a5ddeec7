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
        if self.previous_us is not None and step.min() > 0:
            # the common case: every time after the one before, and no gap to look for
            gaps = np.asarray(max_gap_us) if max_gap_us is not None else None
            if gaps is None or (gaps.ndim == 0 and (gaps < 0 or step.max() <= gaps)):
                self.previous_us = int(times[-1])
                return flags
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
    time_us: int
    value: float
    before: float | None  # the value before it, if any (None across a gap)


@dataclass
class SeriesState:
    """History of one channel's usable values."""

    qc: QcSettings
    last_time_us: int | None = None
    last_value: float | None = None
    pending: Pending | None = None
    flat: "FlatWindow" = field(default_factory=lambda: FlatWindow())

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
            patches = self._spike(times, values, lines, rows, qc.spike, flags)
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
        flat = self.flat.test(times, values, tolerance, round(seconds * US))
        return np.where(flat, np.int64(Flag.FLAT_LINE), np.int64(0))

    def _spike(self, times, values, lines, rows, threshold, flags) -> list[tuple[int, int]]:
        # A neighbour more than max_gap seconds away (a pause, an hour of bad readings) says
        # nothing about a spike: the test needs both neighbours close in time and in lines.
        max_gap = np.inf if self.qc.max_gap is None else self.qc.max_gap * US
        patches: list[tuple[int, int]] = []
        pending = self.pending
        if (
            pending is not None
            and pending.before is not None
            and lines[0] - pending.line <= SPIKE_LOOKAHEAD_LINES
            and times[0] - pending.time_us <= max_gap
        ):
            if abs(pending.value - (pending.before + values[0]) / 2) > threshold:
                patches.append((pending.row, int(Flag.SPIKE)))
        before = np.concatenate(([pending.value if pending is not None else np.nan], values[:-1]))
        after = np.concatenate((values[1:], [np.nan]))
        next_line = np.concatenate((lines[1:], [lines[-1]]))
        next_time = np.concatenate((times[1:], [times[-1]]))
        near = ((next_line - lines) <= SPIKE_LOOKAHEAD_LINES) & ((next_time - times) <= max_gap)
        prev_line = np.concatenate(([pending.line if pending is not None else lines[0]], lines[:-1]))
        prev_time = np.concatenate(([pending.time_us if pending is not None else times[0]], times[:-1]))
        before[((lines - prev_line) > SPIKE_LOOKAHEAD_LINES) | ((times - prev_time) > max_gap)] = np.nan
        with np.errstate(invalid="ignore"):
            spike = near & (np.abs(values - (before + after) / 2) > threshold)
        flags[spike] |= int(Flag.SPIKE)
        last_before = before[-1]
        self.pending = Pending(
            row=int(rows[-1]),
            line=int(lines[-1]),
            time_us=int(times[-1]),
            value=float(values[-1]),
            before=None if np.isnan(last_before) else float(last_before),
        )
        return patches

    def expire(self, current_line: int) -> None:
        """Give up on a pending value whose successor is too far ahead to judge it."""
        if self.pending is not None and current_line - self.pending.line > SPIKE_LOOKAHEAD_LINES:
            self.pending = None


@dataclass
class FlatWindow:
    """What the flat-line test needs of a channel's past values, in constant memory.

    Contract §6: a record is flagged when the channel has records reaching back at least
    ``seconds`` (its first record is at or before the record's time minus ``seconds``) and
    every value in the window ``[t − seconds, t]`` (this record included) lies within
    ± ``tolerance`` of the record's value. Times are taken as a running maximum, so a clock
    step back cannot shrink or reopen a window.

    Of the past values, a later record only needs the minimum and maximum from the start of
    its window to the end of the past, so the state keeps those suffix extremes as steps:
    ``starts[k]`` is the time of the first value of step k, ``high[k]``/``low[k]`` the
    maximum/minimum from there to the last value. Steps whose spread exceeds twice the
    tolerance are dropped (no window that contains them can be flat; ``dropped_until``
    remembers how far they reached), as are steps older than any later window, so a noisy or
    moving channel keeps only a few steps however long ``seconds`` is.
    """

    first_time_us: int | None = None  # time of the channel's first value
    last_time_us: int | None = None  # running maximum of the times seen
    dropped_until: int | None = None  # start of the last step dropped for its spread
    starts: np.ndarray = field(default_factory=lambda: np.zeros(0, dtype=np.int64))
    high: np.ndarray = field(default_factory=lambda: np.zeros(0))
    low: np.ndarray = field(default_factory=lambda: np.zeros(0))

    def test(self, times: np.ndarray, values: np.ndarray, tolerance: float, span_us: int) -> np.ndarray:
        """True where a value is flat (values in file order, times in µs)."""
        n = len(values)
        if n == 0:
            return np.zeros(0, dtype=bool)
        mono = np.maximum.accumulate(times)
        if self.last_time_us is not None and self.last_time_us > mono[0]:
            np.maximum(mono, self.last_time_us, out=mono)
        if self.first_time_us is None:
            self.first_time_us = int(mono[0])
        target = mono - span_us  # the window of record i is [target[i], mono[i]]
        if target[-1] < self.first_time_us:  # no window reaches back far enough yet
            self._keep(mono, values, tolerance, span_us)
            return np.zeros(n, dtype=bool)
        reaches = self.first_time_us <= target
        start = np.searchsorted(mono, target, side="left")  # first value of this call inside
        hi = np.empty(n)
        lo = np.empty(n)
        # a lone value is no line: the window must hold another value besides the record
        # (after a gap or a stretch of bad readings, the first good one is not "flat")
        company = start < np.arange(n)
        inside = start > 0  # the window begins among this call's values
        if inside.any():
            here = np.flatnonzero(inside)
            if tolerance == 0:
                # all values equal: the window must start inside the run of equal values
                # that ends at the record (one pass instead of a sparse table); a value
                # that is not finite is never flat (inf - inf is no number)
                change = np.empty(n, dtype=bool)
                change[0] = True
                np.not_equal(values[1:], values[:-1], out=change[1:])
                run_start = np.maximum.accumulate(np.where(change, np.arange(n), 0))
                same = (start[here] >= run_start[here]) & np.isfinite(values[here])
                hi[here] = np.where(same, values[here], np.inf)
                lo[here] = np.where(same, values[here], -np.inf)
            else:
                lo[here], hi[here] = range_min_max(values, start[here], here)
        if not inside.all():
            past = np.flatnonzero(~inside)
            prefix_hi = np.maximum.accumulate(values)
            prefix_lo = np.minimum.accumulate(values)
            hi[past] = prefix_hi[past]
            lo[past] = prefix_lo[past]
            step = np.searchsorted(self.starts, target[past], side="left")
            some = step < len(self.starts)
            hi[past[some]] = np.maximum(self.high[step[some]], hi[past[some]])
            lo[past[some]] = np.minimum(self.low[step[some]], lo[past[some]])
            company[past[some]] = True
            if self.dropped_until is not None:
                # the window reaches into values dropped for their spread: it cannot be flat
                reaches[past[target[past] <= self.dropped_until]] = False
        with np.errstate(invalid="ignore"):
            flat = reaches & company & (hi - values <= tolerance) & (values - lo <= tolerance)
        self._keep(mono, values, tolerance, span_us)
        return flat

    def _keep(self, mono: np.ndarray, values: np.ndarray, tolerance: float, span_us: int) -> None:
        """Fold this call's values into the steps and drop the steps no later record needs.

        The same steps as :meth:`_keep_all_steps`, without making the suffix extremes of
        every value: the steps kept are those with a spread within twice the tolerance, a
        tail of the call's values (the spread of a suffix only shrinks as it starts later),
        so only that tail is looked at. A moving or noisy channel keeps a short tail; a
        flat one the whole call, as before.
        """
        n = len(values)
        top, bottom = values.max(), values.min()
        if not (np.isfinite(top) and np.isfinite(bottom)):
            return self._keep_all_steps(mono, values, tolerance, span_us)
        threshold = _widest_flat_spread(tolerance)

        def too_wide(i: int) -> bool:  # the spread of the values from i on
            return values[i:].max() - values[i:].min() > threshold

        # tail: the first call value whose suffix has a spread within the threshold
        if top - bottom <= threshold:
            tail = 0
        else:
            wide, narrow, length = 0, n - 1, 1  # suffix at ``wide`` too wide, at ``narrow`` not
            while length < n:  # from the end, doubling, then halving the bracket
                i = n - length
                if too_wide(i):
                    wide = i
                    break
                narrow = i
                length *= 2
            while narrow - wide > 1:
                mid = (wide + narrow) // 2
                if too_wide(mid):
                    wide = mid
                else:
                    narrow = mid
            tail = narrow
        old = len(self.starts)
        old_high = np.maximum(self.high, top)
        old_low = np.minimum(self.low, bottom)
        # steps are the old ones, then one per call value: index old + i for value i
        with np.errstate(invalid="ignore"):
            old_wide = int(np.count_nonzero(old_high - old_low > threshold))
        narrow_from = old + tail if tail > 0 else old_wide  # first step within the threshold
        self.last_time_us = int(mono[-1])
        cut = mono[-1] - span_us  # every later window starts at or after it
        first = int(np.searchsorted(self.starts, cut, side="left"))
        if first == old:
            first = old + int(np.searchsorted(mono, cut, side="left"))
        if self.dropped_until is not None and self.dropped_until < cut:
            self.dropped_until = None  # no later window reaches that far back
        if narrow_from > first:
            last_wide = narrow_from - 1
            self.dropped_until = int(self.starts[last_wide] if last_wide < old else mono[last_wide - old])
            first = narrow_from
        from_call = max(first - old, 0)
        rest = values[from_call:]
        suffix_hi = np.maximum.accumulate(rest[::-1])[::-1]
        suffix_lo = np.minimum.accumulate(rest[::-1])[::-1]
        if first < old:
            starts = np.concatenate([self.starts[first:], mono])
            high = np.concatenate([old_high[first:], suffix_hi])
            low = np.concatenate([old_low[first:], suffix_lo])
        else:
            starts, high, low = mono[from_call:], suffix_hi, suffix_lo
        self._set_steps(starts, high, low)

    def _set_steps(self, starts: np.ndarray, high: np.ndarray, low: np.ndarray) -> None:
        if len(starts) > 1:
            # equal suffix extremes: keep the *last* start of a run (a window starting
            # anywhere in the run sees the same extremes from the run's last start on...)
            new = np.concatenate(((high[1:] != high[:-1]) | (low[1:] != low[:-1]), [True]))
            starts, high, low = starts[new], high[new], low[new]
        self.starts, self.high, self.low = starts.copy(), high.copy(), low.copy()

    def _keep_all_steps(self, mono: np.ndarray, values: np.ndarray, tolerance: float, span_us: int) -> None:
        """:meth:`_keep` from the suffix extremes of every value (any values, also infinite)."""
        suffix_hi = np.maximum.accumulate(values[::-1])[::-1]
        suffix_lo = np.minimum.accumulate(values[::-1])[::-1]
        starts = np.concatenate([self.starts, mono])
        high = np.concatenate([np.maximum(self.high, suffix_hi[0]), suffix_hi])
        low = np.concatenate([np.minimum(self.low, suffix_lo[0]), suffix_lo])
        self.last_time_us = int(mono[-1])
        # every later window starts at or after the last record's window start
        first = int(np.searchsorted(starts, mono[-1] - span_us, side="left"))
        if self.dropped_until is not None and self.dropped_until < mono[-1] - span_us:
            self.dropped_until = None  # no later window reaches that far back
        # a window holding a step with more than twice the tolerance of spread is never flat
        with np.errstate(invalid="ignore"):
            spread = high[first:] - low[first:]
            wide = int(np.count_nonzero(spread > _widest_flat_spread(tolerance)))
        if wide:
            self.dropped_until = int(starts[first + wide - 1])
            first += wide
        self._set_steps(starts[first:], high[first:], low[first:])


def _widest_flat_spread(tolerance: float) -> float:
    """The largest spread of values a flat window can hold: twice the tolerance, with a
    small margin for rounding in the per-record comparison."""
    return 2.0 * tolerance * (1.0 + 1e-9) + 1e-300


def range_min_max(x: np.ndarray, start: np.ndarray, stop: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Min and max of ``x[start[i]:stop[i]+1]`` for every i, with a sparse table.

    O(n log w) numpy work for windows up to w values long, no Python loop per element.
    """
    n = len(x)
    if n == 0 or len(start) == 0:
        return np.zeros(len(start)), np.zeros(len(start))
    length = stop - start + 1
    levels = int(np.log2(max(int(length.max()), 1)))
    mins = [x]
    maxs = [x]
    width = 1
    for _ in range(levels):
        prev_min, prev_max = mins[-1], maxs[-1]
        mins.append(np.minimum(prev_min[:-width], prev_min[width:]))
        maxs.append(np.maximum(prev_max[:-width], prev_max[width:]))
        width *= 2
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
