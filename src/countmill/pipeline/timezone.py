"""Local logger time → UTC, with the fall-back and spring-forward rules of the contract.

A timestamp without an offset is a wall-clock time in the map's IANA zone.

* In the repeated hour of a fall-back transition a wall time has two instants. Records take
  the earlier one until the clock is seen to step back (a record in the repeated hour whose
  wall time is earlier than one already seen there by more than half the transition), and
  the later one from then on. The state crosses chunk boundaries.
* A wall time inside a spring-forward gap does not exist; it is read with the offset in
  force before the transition (the wall time "continued" in the old offset).

Both are flagged ``time_ambiguous``. Arrow's ``assume_timezone`` does the bulk work in C++.
"""

from __future__ import annotations

import numpy as np
import pyarrow as pa
import pyarrow.compute as pc

from countmill.flags import Flag

US = 1_000_000


class LocalClock:
    """Turns naive wall-clock microseconds into UTC microseconds for one zone."""

    def __init__(self, zone: str):
        self.zone = zone
        self.trivial = zone in ("UTC", "Etc/UTC", "GMT", "Etc/GMT", "Z")
        # per fall-back transition (keyed by its earlier instant): highest wall time seen
        # in the repeated hour, and whether the clock has stepped back yet
        self._max_wall: dict[int, int] = {}
        self._stepped_back: dict[int, bool] = {}

    def to_utc(self, wall_us: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Return (utc_us, flags) for wall times in file order."""
        flags = np.zeros(wall_us.shape, dtype=np.int64)
        if self.trivial or wall_us.size == 0:
            return wall_us.copy(), flags
        plain = self._unambiguous(wall_us)
        if plain is not None:  # the common case: no wall time near a transition
            return plain, flags
        naive = pa.array(wall_us, type=pa.timestamp("us"))
        early = pc.assume_timezone(naive, timezone=self.zone, ambiguous="earliest", nonexistent="earliest")
        late = pc.assume_timezone(naive, timezone=self.zone, ambiguous="latest", nonexistent="latest")
        early_us = early.cast(pa.int64()).to_numpy()
        late_us = late.cast(pa.int64()).to_numpy()
        utc = early_us.copy()
        odd = np.flatnonzero(early_us != late_us)
        if odd.size == 0:
            return utc, flags
        flags[odd] |= int(Flag.TIME_AMBIGUOUS)
        width = late_us[odd] - early_us[odd]
        gap = width <= US  # Arrow maps a nonexistent time to either side of the gap
        if gap.any():
            pos = odd[gap]
            # offset before the transition: the one in force at the instant just before it
            before = pc.local_timestamp(pa.array(early_us[pos], type=pa.timestamp("us", self.zone)))
            offset = before.cast(pa.int64()).to_numpy() - early_us[pos]
            offset = np.round(offset / US).astype(np.int64) * US
            utc[pos] = wall_us[pos] - offset
        repeated = odd[~gap]
        if repeated.size:
            self._resolve_fold(wall_us, early_us, late_us, repeated, utc)
        return utc, flags

    def _unambiguous(self, wall_us: np.ndarray) -> np.ndarray | None:
        """UTC of wall times when none is ambiguous or nonexistent; else None.

        The tz database counts offsets and transition instants in whole seconds, so every
        wall time of one wall-clock second has the same offset: one lookup per run of
        records in the same second serves the whole run (a logger writes many records a
        second, in time order).
        """
        seconds = wall_us // US
        change = np.empty(len(seconds), dtype=bool)
        change[0] = True
        np.not_equal(seconds[1:], seconds[:-1], out=change[1:])
        starts = np.flatnonzero(change)
        firsts = seconds[starts] * US
        try:
            utc = pc.assume_timezone(pa.array(firsts, type=pa.timestamp("us")), timezone=self.zone,
                                     ambiguous="raise", nonexistent="raise")
        except pa.ArrowInvalid:
            return None
        offset = firsts - utc.cast(pa.int64()).to_numpy()
        if offset.min() == offset.max():  # one offset for the whole block (no transition in it)
            return wall_us - offset[0]
        return wall_us - np.repeat(offset, np.diff(np.append(starts, len(seconds))))

    def _resolve_fold(self, wall_us, early_us, late_us, positions, utc) -> None:
        # each fall-back transition is identified by the local day it happens on
        delta = late_us[positions] - early_us[positions]
        key = wall_us[positions] // (86_400 * US)
        for k in np.unique(key):
            sel = positions[key == k]
            walls = wall_us[sel]
            half = int(delta[key == k][0]) // 2
            ident = int(k)
            previous_max = self._max_wall.get(ident, np.iinfo(np.int64).min)
            running = np.maximum.accumulate(np.concatenate(([previous_max], walls)))[:-1]
            # (walls + half, not running - half: running starts at int64 min and must not wrap)
            back = walls + half < running
            second = np.logical_or.accumulate(back) | self._stepped_back.get(ident, False)
            utc[sel] = np.where(second, late_us[sel], early_us[sel])
            self._max_wall[ident] = int(max(previous_max, walls.max()))
            self._stepped_back[ident] = bool(second[-1])
