"""Cross-channel inputs: a channel's latest usable value as seen from another record.

A record reads the named channel's latest good or suspect value from an earlier line of
the file. It is used when its time is at or before the record's time and no older than
``max_age``; otherwise the record's input is missing. The latest value of the previous
chunks is carried in :class:`LatestValue`, so the result does not depend on chunking.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from countmill.flags import Quality


@dataclass
class LatestValue:
    """Usable values of one channel: this chunk's, and the last one before it."""

    carried: tuple[int, float, int] | None = None  # (time µs, value, quality)
    positions: np.ndarray = field(default_factory=lambda: np.zeros(0, dtype=np.int64))
    times: np.ndarray = field(default_factory=lambda: np.zeros(0, dtype=np.int64))
    values: np.ndarray = field(default_factory=lambda: np.zeros(0))
    quality: np.ndarray = field(default_factory=lambda: np.zeros(0, dtype=np.int8))

    def add(self, positions, times, values, quality) -> None:
        """Record this chunk's usable values of the channel (positions ascending)."""
        if len(self.positions):
            order = np.argsort(np.concatenate([self.positions, positions]), kind="stable")
            self.positions = np.concatenate([self.positions, positions])[order]
            self.times = np.concatenate([self.times, times])[order]
            self.values = np.concatenate([self.values, values])[order]
            self.quality = np.concatenate([self.quality, quality])[order]
        else:
            self.positions, self.times, self.values, self.quality = positions, times, values, quality

    def lookup(self, positions: np.ndarray, times: np.ndarray, max_age_us: int, include_same: bool = False):
        """Values (NaN where none) and their quality for records at ``positions``/``times``."""
        side = "right" if include_same else "left"
        j = np.searchsorted(self.positions, positions, side=side) - 1
        have = j >= 0
        src_t = np.zeros(len(positions), dtype=np.int64)
        src_v = np.full(len(positions), np.nan)
        src_q = np.full(len(positions), Quality.MISSING, dtype=np.int8)
        jj = j[have]
        src_t[have] = self.times[jj]
        src_v[have] = self.values[jj]
        src_q[have] = self.quality[jj]
        if self.carried is not None:
            use = ~have
            src_t[use], src_v[use], src_q[use] = self.carried
        else:
            src_v[~have] = np.nan
        age = times - src_t
        ok = (age >= 0) & (age <= max_age_us) & ~np.isnan(src_v)
        return np.where(ok, src_v, np.nan), np.where(ok, src_q, np.int8(Quality.MISSING))

    def end_chunk(self) -> None:
        if len(self.positions):
            self.carried = (int(self.times[-1]), float(self.values[-1]), int(self.quality[-1]))
        self.positions = np.zeros(0, dtype=np.int64)
        self.times = np.zeros(0, dtype=np.int64)
        self.values = np.zeros(0)
        self.quality = np.zeros(0, dtype=np.int8)
