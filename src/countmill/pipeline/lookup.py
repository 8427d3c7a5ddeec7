"""Cross-channel inputs: a channel's latest usable value as seen from another record.

A record reads the named channel's latest good or suspect value *from an earlier line of
the file whose time is at or before the record's time and no older than* ``max_age``
(contract §4): the candidates are the channel's usable records on earlier lines with
``t − max_age ≤ time ≤ t``, and the last of them in file order is taken. Without a
candidate the input is missing.

To keep memory bounded, the history carried from chunk to chunk holds the values of the
last :data:`HISTORY_SECONDS` before the newest time the channel has reached; to keep the
result independent of chunking, the same limit applies inside a chunk: a candidate must
also lie within :data:`HISTORY_SECONDS` of the newest time reached by its earlier lines.
Only a record whose clock stepped back by more than that (minus ``max_age``) notices.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from countmill.flags import Quality

#: how far behind the channel's newest time a value may lie and still be found [s]
HISTORY_SECONDS = 7200
#: the largest ``max_age`` a map may give [s]; well inside the history
MAX_AGE_LIMIT_S = 3600
_US = 1_000_000
_NEVER = np.iinfo(np.int64).min


def _empty():
    return np.zeros(0, dtype=np.int64)


def _run_starts(times: np.ndarray) -> np.ndarray:
    """Starts of the stretches in which ``times`` never decrease (a clock step back begins
    a new one)."""
    if len(times) == 0:
        return _empty()
    return np.concatenate(([0], np.flatnonzero(times[1:] < times[:-1]) + 1))


def _last_within(times: np.ndarray, runs: np.ndarray, stop: int, low: int, high: int) -> int:
    """Index of the last value before ``stop`` with ``low <= time <= high``, or -1.

    Stretch by stretch from the end: in a stretch the times never decrease, so the last
    value at or before ``high`` is found by bisection, and if it is older than ``low`` so
    is every earlier value of the stretch.
    """
    for r in range(int(np.searchsorted(runs, stop, side="left")) - 1, -1, -1):
        a = int(runs[r])
        b = min(int(runs[r + 1]) if r + 1 < len(runs) else len(times), stop)
        j = a + int(np.searchsorted(times[a:b], high, side="right")) - 1
        if j >= a and times[j] >= low:
            return j
    return -1


@dataclass
class _Stretch:
    """Values of one earlier chunk, in file order."""

    times: np.ndarray
    values: np.ndarray
    quality: np.ndarray
    newest: int
    _runs: np.ndarray | None = None

    @property
    def runs(self) -> np.ndarray:
        """Starts of its stretches of non-decreasing times (made when a search first needs
        them: only a clock step back does)."""
        if self._runs is None:
            self._runs = _run_starts(self.times)
        return self._runs


@dataclass
class LatestValue:
    """Usable values of one channel: the carried history and this chunk's values.

    The history is kept chunk by chunk (no copy of it per chunk or per lookup); a chunk's
    values leave it once all of them are more than :data:`HISTORY_SECONDS` older than the
    newest time reached, which is when no lookup can take them any more.
    """

    history: list[_Stretch] = field(default_factory=list)  # earlier chunks, file order
    hist_newest: int = _NEVER
    # this chunk's usable records (positions within the chunk)
    positions: np.ndarray = field(default_factory=_empty)
    times: np.ndarray = field(default_factory=_empty)
    values: np.ndarray = field(default_factory=lambda: np.zeros(0))
    quality: np.ndarray = field(default_factory=lambda: np.zeros(0, dtype=np.int8))
    _newest_so_far: np.ndarray | None = None  # running maximum of ``times``
    _runs: np.ndarray | None = None
    _ordered: bool | None = None  # this chunk's times never decrease, from the history's newest on
    _all_good: bool | None = None  # every value of this chunk is good (none suspect)

    def add(self, positions, times, values, quality) -> None:
        """Record this chunk's usable values of the channel."""
        if len(self.positions):
            positions = np.concatenate([self.positions, positions])
            order = np.argsort(positions, kind="stable")
            self.positions = positions[order]
            self.times = np.concatenate([self.times, times])[order]
            self.values = np.concatenate([self.values, values])[order]
            self.quality = np.concatenate([self.quality, quality])[order]
        else:
            self.positions, self.times, self.values, self.quality = positions, times, values, quality
        self._newest_so_far = self._runs = self._ordered = self._all_good = None

    def lookup(self, positions: np.ndarray, times: np.ndarray, max_age_us: int):
        """Values (NaN where none) and their quality for records at ``positions``/``times``.

        The quality is None when every value found is good (the common case: the caller
        then has no suspect input to flag, and no array is made for it).
        """
        if (not self.history and len(self.times) == 0) or len(positions) == 0:
            return np.full(len(positions), np.nan), np.full(len(positions), Quality.MISSING, dtype=np.int8)
        if self._ordered is None:
            own = self.times
            self._ordered = bool(len(own)) and own[0] >= self.hist_newest and bool(np.all(own[1:] >= own[:-1]))
            self._all_good = bool(np.all(self.quality == Quality.GOOD))
        # the last usable record on an earlier line: in this chunk (k >= 0) or the last
        # value of the history; and the newest time reached up to it
        k, first = self._preceding(positions)
        if len(self.times) and (k.min() >= 0 if first is None else first >= 0):  # all in this chunk
            # (consecutive values: slices instead of gathers)
            taken = k if first is None else slice(first, first + len(k))
            src_t = self.times[taken]
            if self._ordered:
                # no clock step back: the newest time reached is the value's own time,
                # which the history window (newest - HISTORY_SECONDS) always admits
                direct = (src_t <= times) & (src_t >= times - max_age_us)
            else:
                newest = np.maximum(self._newest_reached()[k], self.hist_newest)
                lo = np.maximum(times - max_age_us, newest - HISTORY_SECONDS * _US)
                direct = (src_t <= times) & (src_t >= lo)
            if direct.all():  # the common case: the last earlier value is the one
                values = self.values[taken]
                quality = None if self._all_good else self.quality[taken]
                if first is not None:  # views of the state: the caller gets its own copies
                    values = values.copy()
                    quality = None if quality is None else quality.copy()
                return values, quality
        out_v = np.full(len(positions), np.nan)
        out_q = np.full(len(positions), Quality.MISSING, dtype=np.int8)
        here = k >= 0
        ks = np.maximum(k, 0)
        newest = np.full(len(positions), self.hist_newest, dtype=np.int64)
        if len(self.times):
            newest[here] = np.maximum(self.hist_newest, self._newest_reached()[ks[here]])
        have = here | bool(self.history)
        lo = np.maximum(times - max_age_us, newest - HISTORY_SECONDS * _US)
        if len(self.times):
            src_t = np.where(here, self.times[ks], self.history[-1].times[-1] if self.history else _NEVER)
        else:
            src_t = np.full(len(positions), self.history[-1].times[-1])
        direct = have & (src_t <= times) & (src_t >= lo)
        if direct.any():
            d_here = direct & here
            out_v[d_here] = self.values[k[d_here]]
            out_q[d_here] = self.quality[k[d_here]]
            d_hist = direct & ~here
            if d_hist.any():
                last = self.history[-1]
                out_v[d_hist] = last.values[-1]
                out_q[d_hist] = last.quality[-1]
        # the last record failed the time test; an earlier one may pass (clocks stepped back)
        for i in np.flatnonzero(have & ~direct & (newest >= lo)).tolist():
            found = self._search(int(k[i]), int(lo[i]), int(times[i]))
            if found is not None:
                out_v[i], out_q[i] = found
        return out_v, out_q

    def _newest_reached(self) -> np.ndarray:
        """Running maximum of this chunk's times (made when a lookup first needs it)."""
        if self._newest_so_far is None:
            self._newest_so_far = np.maximum.accumulate(self.times) if len(self.times) else _empty()
        return self._newest_so_far

    def _preceding(self, positions: np.ndarray) -> tuple[np.ndarray, int | None]:
        """For each record at ``positions`` (ascending), the index of this chunk's last value
        on an earlier line (-1: none in this chunk); and, when those indices are consecutive,
        the first of them.

        A logger that reads the input once per scan, as often as it reads the record's
        channel (a terminal-block sensor read once per scan for each thermocouple channel),
        makes them consecutive: index i + first for the i-th record. That guess is checked
        with two comparisons of slices; only when it fails is every record searched for.
        """
        have = self.positions
        m, h = len(positions), len(have)
        if m and h:
            first = int(np.searchsorted(have, positions[0], side="left")) - 1
            last = first + m - 1
            if last < h:
                # value k_i before record i, and value k_i + 1 (where there is one) after it
                before = have[max(first, 0): last + 1] < positions[max(-first, 0):]
                after = have[first + 1: last + 2] > positions[: h - first - 1]
                if before.all() and after.all():
                    return np.arange(first, last + 1), first
        return np.searchsorted(have, positions, side="left") - 1, None

    def _search(self, k: int, low: int, high: int):
        """(value, quality) of the last record before the one at chunk index ``k`` (or, for
        ``k < 0``, before the history's last value) with ``low <= time <= high``."""
        if k >= 0:
            if self._runs is None:  # only a clock step back needs them
                self._runs = _run_starts(self.times)
            j = _last_within(self.times, self._runs, k, low, high)
            if j >= 0:
                return self.values[j], self.quality[j]
        for n, part in enumerate(reversed(self.history)):
            stop = len(part.times) - 1 if (k < 0 and n == 0) else len(part.times)
            j = _last_within(part.times, part.runs, stop, low, high)
            if j >= 0:
                return part.values[j], part.quality[j]
        return None

    def end_chunk(self) -> None:
        """Fold this chunk into the carried history and drop what no lookup can take."""
        if len(self.times):
            newest = int(self.times.max())
            self.history.append(_Stretch(self.times, self.values, self.quality, newest))
            self.hist_newest = max(self.hist_newest, newest)
            oldest_useful = self.hist_newest - HISTORY_SECONDS * _US
            while self.history and self.history[0].newest < oldest_useful:
                self.history.pop(0)
        self.positions, self.times = _empty(), _empty()
        self.values, self.quality = np.zeros(0), np.zeros(0, dtype=np.int8)
        self._newest_so_far = self._runs = self._ordered = self._all_good = None
