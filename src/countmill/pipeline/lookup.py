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


@dataclass
class LatestValue:
    """Usable values of one channel: the carried history and this chunk's values."""

    # history from earlier chunks (file order), all before any position of this chunk
    hist_times: np.ndarray = field(default_factory=_empty)
    hist_values: np.ndarray = field(default_factory=lambda: np.zeros(0))
    hist_quality: np.ndarray = field(default_factory=lambda: np.zeros(0, dtype=np.int8))
    hist_newest: int = _NEVER
    # this chunk's usable records (positions within the chunk)
    positions: np.ndarray = field(default_factory=_empty)
    times: np.ndarray = field(default_factory=_empty)
    values: np.ndarray = field(default_factory=lambda: np.zeros(0))
    quality: np.ndarray = field(default_factory=lambda: np.zeros(0, dtype=np.int8))

    def add(self, positions, times, values, quality) -> None:
        """Record this chunk's usable values of the channel."""
        positions = np.concatenate([self.positions, positions])
        order = np.argsort(positions, kind="stable")
        self.positions = positions[order]
        self.times = np.concatenate([self.times, times])[order]
        self.values = np.concatenate([self.values, values])[order]
        self.quality = np.concatenate([self.quality, quality])[order]

    def lookup(self, positions: np.ndarray, times: np.ndarray, max_age_us: int):
        """Values (NaN where none) and their quality for records at ``positions``/``times``."""
        n_hist = len(self.hist_times)
        all_t = np.concatenate([self.hist_times, self.times])
        all_v = np.concatenate([self.hist_values, self.values])
        all_q = np.concatenate([self.hist_quality, self.quality])
        out_v = np.full(len(positions), np.nan)
        out_q = np.full(len(positions), Quality.MISSING, dtype=np.int8)
        if len(all_t) == 0 or len(positions) == 0:
            return out_v, out_q
        # last usable record on an earlier line, and the newest time reached up to it
        last = n_hist + np.searchsorted(self.positions, positions, side="left") - 1
        newest = np.maximum.accumulate(np.concatenate([[self.hist_newest], all_t]))[last + 1]
        have = last >= 0
        lo = np.maximum(times - max_age_us, newest - HISTORY_SECONDS * _US)
        src_t = np.where(have, all_t[np.maximum(last, 0)], _NEVER)
        direct = have & (src_t <= times) & (src_t >= lo)
        take = np.where(direct, last, -1)
        # the last record failed the time test; an earlier one may pass (clocks stepped back)
        for i in np.flatnonzero(have & ~direct & (newest >= lo)):
            ok = np.flatnonzero((all_t[: last[i]] <= times[i]) & (all_t[: last[i]] >= lo[i]))
            if len(ok):
                take[i] = ok[-1]
        found = take >= 0
        out_v[found] = all_v[take[found]]
        out_q[found] = all_q[take[found]]
        return out_v, out_q

    def end_chunk(self) -> None:
        """Fold this chunk into the carried history, keeping the last HISTORY_SECONDS."""
        all_t = np.concatenate([self.hist_times, self.times])
        if len(all_t):
            self.hist_newest = max(self.hist_newest, int(all_t.max()))
            keep = all_t >= self.hist_newest - HISTORY_SECONDS * _US
            self.hist_times = all_t[keep]
            self.hist_values = np.concatenate([self.hist_values, self.values])[keep]
            self.hist_quality = np.concatenate([self.hist_quality, self.quality])[keep]
        self.positions, self.times = _empty(), _empty()
        self.values, self.quality = np.zeros(0), np.zeros(0, dtype=np.int8)
