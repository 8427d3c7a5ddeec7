"""Time bins for the wide layout: the state that carries partial bins across chunks.

A bin is ``[start, start + every)`` with ``start`` a whole multiple of ``every`` counted
from the Unix epoch (1970-01-01T00:00:00Z), so bins line up with UTC clock time for any
width that divides a day.

Per bin and channel the state keeps the running sum and number of the samples that enter
the mean (quality good or suspect, as contract §5 says), and the number of samples at each
quality level. Sums are added in input order with ``np.add.at`` onto the running total,
so a bin comes out bit for bit the same however the input was cut into chunks.

Late samples: a sample is *late* when its bin ended at least ``settle`` before the newest
sample time already seen (earlier in the input). Late samples are counted per channel and
left out of every bin. Because that rule looks only at the input order, never at chunk
boundaries, a bin can be written as soon as it ends ``settle`` before the newest time: no
sample that is not late can reach it any more. Memory holds the bins of about one
``settle`` period, not the day.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from countmill.flags import Quality

#: quality levels in order of severity; a tie between levels goes to the later one
LEVELS = np.array([int(q) for q in Quality], dtype=np.int8)  # 1 2 3 4 9
_SLOT = np.zeros(10, dtype=np.intp)
_SLOT[LEVELS] = np.arange(len(LEVELS))
#: levels whose value enters the bin's mean
MEAN_LEVELS = (int(Quality.GOOD), int(Quality.SUSPECT))  # contract §5: good and suspect

_NEVER = np.iinfo(np.int64).min // 4


@dataclass
class ClosedBins:
    """Finished bins: ``start`` [µs since the epoch, UTC], and per channel (columns) the
    mean, the quality level and the number of samples."""

    start: np.ndarray  # (k,) int64
    mean: np.ndarray  # (k, n) float64
    quality: np.ndarray  # (k, n) int8
    count: np.ndarray  # (k, n) int32

    def __len__(self) -> int:
        return len(self.start)


def bin_quality(level_counts: np.ndarray) -> np.ndarray:
    """Quality level of a bin: the level most of its samples have, a tie to the worse level.

    Parameters
    ----------
    level_counts : ndarray of int, shape (..., 5)
        Samples at levels 1, 2, 3, 4, 9 (in that order).

    Returns
    -------
    ndarray of int8, shape (...)
        The most frequent level; among equally frequent levels the worse one; 9 (missing)
        where the bin has no sample.
    """
    worst_first = level_counts[..., ::-1]
    index = len(LEVELS) - 1 - np.argmax(worst_first, axis=-1)
    quality = LEVELS[index]
    return np.where(level_counts.sum(axis=-1) == 0, np.int8(Quality.MISSING), quality).astype(np.int8)


class TimeBins:
    """Open bins of ``n_channels`` channels, keyed by start time; see the module notes."""

    def __init__(self, n_channels: int, every_us: int, settle_us: int):
        if every_us <= 0:
            raise ValueError("every_us must be positive")
        self.n = n_channels
        self.every = int(every_us)
        self.settle = int(settle_us)
        self.start = np.empty(0, dtype=np.int64)
        self.total = np.empty((0, n_channels))
        self.used = np.empty((0, n_channels), dtype=np.int64)
        self.levels = np.empty((0, n_channels, len(LEVELS)), dtype=np.int64)
        self.newest = _NEVER
        self.late = np.zeros(n_channels, dtype=np.int64)

    def add(self, time_us: np.ndarray, channel: np.ndarray, value: np.ndarray, quality: np.ndarray) -> None:
        """Add samples in input order. ``channel`` indexes the columns (0 … n-1)."""
        if len(time_us) == 0:
            return
        time_us = np.asarray(time_us, dtype=np.int64)
        seen = np.maximum.accumulate(time_us)
        before = np.empty_like(seen)  # newest time among all earlier samples
        before[0] = self.newest
        np.maximum(seen[:-1], self.newest, out=before[1:])
        self.newest = max(self.newest, int(seen[-1]))
        start = np.floor_divide(time_us, self.every) * self.every
        late = start + self.every <= before - self.settle
        if late.any():
            self.late += np.bincount(channel[late], minlength=self.n)
            keep = ~late
            start, channel, value, quality = start[keep], channel[keep], value[keep], quality[keep]
            if len(start) == 0:
                return
        slot = self._slots(start)
        np.add.at(self.levels, (slot, channel, _SLOT[quality]), 1)
        usable = np.isin(quality, MEAN_LEVELS) & ~np.isnan(value)
        if usable.any():
            np.add.at(self.total, (slot[usable], channel[usable]), value[usable])
            np.add.at(self.used, (slot[usable], channel[usable]), 1)

    def _slots(self, start: np.ndarray) -> np.ndarray:
        new = np.setdiff1d(np.unique(start), self.start, assume_unique=True)
        if len(new):
            merged = np.union1d(self.start, new)
            where = np.searchsorted(merged, self.start)
            self.total = _grow(self.total, len(merged), where)
            self.used = _grow(self.used, len(merged), where)
            self.levels = _grow(self.levels, len(merged), where)
            self.start = merged
        return np.searchsorted(self.start, start)

    def pop_closed(self, final: bool = False) -> ClosedBins:
        """Remove and return the bins no sample can change any more (all of them if ``final``)."""
        if final:
            k = len(self.start)
        else:
            k = int(np.searchsorted(self.start + self.every, self.newest - self.settle, side="right"))
        with np.errstate(invalid="ignore", divide="ignore"):
            mean = self.total[:k] / self.used[:k]
        done = ClosedBins(
            start=self.start[:k],
            mean=np.where(self.used[:k] > 0, mean, np.nan),
            quality=bin_quality(self.levels[:k]),
            count=self.levels[:k].sum(axis=-1).astype(np.int32),
        )
        self.start, self.total, self.used, self.levels = self.start[k:], self.total[k:], self.used[k:], self.levels[k:]
        return done


def _grow(array: np.ndarray, size: int, where: np.ndarray) -> np.ndarray:
    grown = np.zeros((size,) + array.shape[1:], dtype=array.dtype)
    grown[where] = array
    return grown
