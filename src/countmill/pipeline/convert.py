"""Convert record arrays into tidy output rows, one chunk at a time.

The loop per chunk is short: group records by channel once; for each channel in
dependency order, run ADC → gain → chain → unit → calibration → stateless tests → stateful
tests; then the derived channels; then assemble rows in input order, each derived row right
after the record that triggered it. Everything that crosses chunk boundaries lives in
small named state objects (:class:`ClockState`, :class:`SeriesState`, :class:`LatestValue`).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from countmill.chanmap.compiled import ChannelMap, ChannelRevision, DerivedChannel
from countmill.flags import BAD_MASK, Flag, Quality, combine_quality
from countmill.pipeline.lookup import LatestValue
from countmill.pipeline.reader import Records
from countmill.pipeline.stateful import ClockState, SeriesState
from countmill.pipeline.timezone import US
from countmill.sensors.adc import amplifier_input_volts, code_to_volts, valid_code_range
from countmill.stages.registry import StageContext

COLUMNS = ("time_us", "line", "name", "channel_id", "code", "gain", "volts", "value", "unit", "flags", "evaluated")


@dataclass
class Rows:
    """Output rows as plain arrays (``name``/``unit`` index the converter's tables, -1 = null;
    ``channel_id``/``code``/``gain`` are -1 with ``is_derived`` for derived rows)."""

    time_us: np.ndarray
    line: np.ndarray
    name: np.ndarray
    channel_id: np.ndarray
    code: np.ndarray
    gain: np.ndarray
    volts: np.ndarray
    value: np.ndarray
    unit: np.ndarray
    flags: np.ndarray
    evaluated: np.ndarray
    is_derived: np.ndarray

    def __len__(self) -> int:
        return len(self.line)

    @property
    def quality(self) -> np.ndarray:
        return combine_quality(self.value, self.flags, self.evaluated)

    def take(self, index) -> "Rows":
        return Rows(**{k: getattr(self, k)[index] for k in self.__dataclass_fields__})

    @staticmethod
    def concat(parts: list["Rows"]) -> "Rows":
        return Rows(**{k: np.concatenate([getattr(p, k) for p in parts]) for k in Rows.__dataclass_fields__})


def _usable(values: np.ndarray, flags: np.ndarray) -> np.ndarray:
    return ~np.isnan(values) & ((flags & BAD_MASK) == 0)


class Converter:
    """Turns :class:`Records` into :class:`Rows`; holds all cross-chunk state."""

    def __init__(self, cmap: ChannelMap):
        self.cmap = cmap
        self.names: list[str] = cmap.channel_names()
        self.units: list[str] = []
        for rev in cmap.revisions():
            if rev.unit not in self.units:
                self.units.append(rev.unit)
        for d in cmap.derived:
            if d.unit not in self.units:
                self.units.append(d.unit)
        self.name_index = {n: i for i, n in enumerate(self.names)}
        self.derived_by_name = {d.name: d for d in cmap.derived}
        self.unit_index = {u: i for i, u in enumerate(self.units)}
        self.latest: dict[str, LatestValue] = {name: LatestValue() for name in cmap.ids_by_name}
        self.clocks: dict[object, ClockState] = {}
        self.series: dict[object, SeriesState] = {}
        self.rows_emitted = 0  # global index of the next row produced
        self.patches: list[tuple[int, int]] = []  # spike flags for rows produced earlier

    # --- per chunk -------------------------------------------------------------------------
    def convert(self, rec: Records) -> Rows:
        n = len(rec)
        value = np.full(n, np.nan)
        volts = np.full(n, np.nan)
        flags = rec.time_flags.copy()
        name = np.full(n, -1, dtype=np.int32)
        unit = np.full(n, -1, dtype=np.int32)
        evaluated = np.zeros(n, dtype=bool)
        work = _Chunk(rec, value, volts, flags, name, unit, evaluated)

        order = np.argsort(rec.channel, kind="stable")
        ids, starts = np.unique(rec.channel[order], return_index=True)
        bounds = dict(zip(ids.tolist(), zip(starts.tolist(), np.append(starts[1:], n).tolist())))
        for cid in self.cmap.order:
            if cid in bounds:
                lo, hi = bounds.pop(cid)
                self._convert_channel(work, cid, order[lo:hi])
        for cid, (lo, hi) in bounds.items():  # channels the map does not know
            flags[order[lo:hi]] |= int(Flag.UNMAPPED_CHANNEL)

        derived_parts = [self._derive(work, d) for d in self.cmap.derived]
        rows = self._assemble(work, derived_parts)
        self._stateful_tests(work, rows)
        for latest in self.latest.values():
            latest.end_chunk()
        self.rows_emitted += len(rows)
        return rows

    def _convert_channel(self, work: "_Chunk", cid: int, positions: np.ndarray) -> None:
        rec = work.rec
        revisions = self.cmap.channels[cid]
        times = rec.time_us[positions]
        starts = np.array([r.valid_from_us for r in revisions], dtype=np.int64)
        which = np.searchsorted(starts, times, side="right") - 1
        work.flags[positions[which < 0]] |= int(Flag.UNMAPPED_CHANNEL)
        for k, rev in enumerate(revisions):
            sel = positions[which == k]
            if len(sel):
                self._convert_revision(work, rev, sel)
                usable = _usable(work.value[sel], work.flags[sel])
                if usable.any():
                    good = sel[usable]
                    q = combine_quality(work.value[good], work.flags[good], True)
                    self.latest[rev.name].add(good, rec.time_us[good], work.value[good], q)

    def _convert_revision(self, work: "_Chunk", rev: ChannelRevision, pos: np.ndarray) -> None:
        rec = work.rec
        code = rec.code[pos]
        flags = np.zeros(len(pos), dtype=np.int64)
        lowest, highest = valid_code_range(rev.adc.bits, rev.adc.coding)
        flags[(code < lowest) | (code > highest)] |= int(Flag.INVALID_CODE)
        flags[code == lowest] |= int(Flag.SATURATED_LOW)
        flags[code == highest] |= int(Flag.SATURATED_HIGH)
        at_adc = code_to_volts(code, bits=rev.adc.bits, span=rev.adc.span, coding=rev.adc.coding)
        x = amplifier_input_volts(at_adc, rec.gain[pos], rev.gains)
        flags[np.isnan(x) & ~np.isnan(at_adc)] |= int(Flag.UNKNOWN_GAIN)
        work.volts[pos] = x

        inputs = {}
        for need in rev.inputs:
            values, quality = self.latest[need.name].lookup(pos, rec.time_us[pos], round(need.max_age_s * US))
            if need.to_unit != (1.0, 0.0):
                values = values * need.to_unit[0] + need.to_unit[1]
            inputs[need.name] = values
            flags[np.isnan(values) & ~np.isnan(x)] |= int(Flag.INPUT_MISSING)
            flags[quality == Quality.SUSPECT] |= int(Flag.INPUT_SUSPECT)
        context = StageContext(inputs=inputs)
        for step in rev.chain:
            result = step.stage.apply(x, step.params, context)
            x = np.asarray(result.values, dtype=np.float64)
            if result.flags is not None:
                flags |= result.flags
        scale, offset = rev.to_unit
        if scale != 1.0 or offset != 0.0:
            x = x * scale + offset
        if rev.calibration is not None:
            x = np.polynomial.polynomial.polyval(x, rev.calibration.coefficients)
            if rev.calibration.overdue_from_us is not None:
                flags[rec.time_us[pos] >= rev.calibration.overdue_from_us] |= int(Flag.CALIBRATION_OVERDUE)
        flags |= limit_flags(x, rev.range, rev.expect)
        work.value[pos] = x
        work.flags[pos] |= flags
        work.name[pos] = self.name_index[rev.name]
        work.unit[pos] = self.unit_index[rev.unit]
        work.evaluated[pos] = True
        work.revision_of[pos] = rev.revision

    def _derive(self, work: "_Chunk", d: DerivedChannel) -> "_DerivedPart | None":
        trigger = d.expression.trigger
        trigger_index = self.name_index[trigger]
        pos = np.flatnonzero(work.name == trigger_index)
        if len(pos) == 0:
            return None
        rec = work.rec
        times = rec.time_us[pos]
        env = {}
        flags = np.zeros(len(pos), dtype=np.int64)
        worst = np.full(len(pos), Quality.GOOD, dtype=np.int8)
        for input_name in d.expression.names:
            if input_name == trigger:
                values = work.value[pos].copy()
                ok = _usable(values, work.flags[pos])
                quality = np.where(ok, combine_quality(values, work.flags[pos], True), np.int8(Quality.MISSING))
                values[~ok] = np.nan
            else:
                values, quality = self.latest[input_name].lookup(pos, times, round(d.max_age_s * US))
            env[input_name] = values
            worst = np.maximum(worst, np.where(quality == Quality.MISSING, worst, quality))
        with np.errstate(all="ignore"):
            result = np.asarray(d.expression.evaluate(env), dtype=np.float64) * np.ones(len(pos))
        missing = np.zeros(len(pos), dtype=bool)
        for values in env.values():
            missing |= np.isnan(values)
        result[missing] = np.nan
        flags[missing] |= int(Flag.INPUT_MISSING)
        flags[worst == Quality.SUSPECT] |= int(Flag.INPUT_SUSPECT)
        flags |= limit_flags(result, d.range, d.expect)
        evaluated = np.full(len(pos), d.range is not None or d.expect is not None or d.qc.any_value_test or d.qc.max_gap is not None)
        evaluated |= worst >= Quality.SUSPECT
        return _DerivedPart(d, pos, result, flags, evaluated)

    def _assemble(self, work: "_Chunk", derived_parts) -> Rows:
        rec = work.rec
        n = len(rec)
        base = Rows(
            time_us=rec.time_us,
            line=rec.line,
            name=work.name,
            channel_id=rec.channel,
            code=rec.code,
            gain=rec.gain,
            volts=work.volts,
            value=work.value,
            unit=work.unit,
            flags=work.flags,
            evaluated=work.evaluated,
            is_derived=np.zeros(n, dtype=bool),
        )
        parts = [base]
        keys = [np.arange(n, dtype=np.int64) * 64]
        for rank, part in enumerate(derived_parts, start=1):
            if part is None:
                continue
            m = len(part.positions)
            neg = np.full(m, -1, dtype=np.int64)
            parts.append(
                Rows(
                    time_us=rec.time_us[part.positions],
                    line=rec.line[part.positions],
                    name=np.full(m, self.name_index[part.channel.name], dtype=np.int32),
                    channel_id=neg,
                    code=neg,
                    gain=neg,
                    volts=np.full(m, np.nan),
                    value=part.values,
                    unit=np.full(m, self.unit_index[part.channel.unit], dtype=np.int32),
                    flags=part.flags,
                    evaluated=part.evaluated,
                    is_derived=np.ones(m, dtype=bool),
                )
            )
            keys.append(part.positions.astype(np.int64) * 64 + rank)
        if len(parts) == 1:
            rows = base
            self._revision = work.revision_of
            return rows
        rows = Rows.concat(parts)
        order = np.argsort(np.concatenate(keys), kind="stable")
        revision = np.concatenate([work.revision_of] + [np.full(len(p), -1, dtype=np.int32) for p in parts[1:]])
        self._revision = revision[order]
        return rows.take(order)

    def _stateful_tests(self, work: "_Chunk", rows: Rows) -> None:
        """Time order, gaps, rate, flat line and spike, per channel, on the assembled rows."""
        global_rows = self.rows_emitted + np.arange(len(rows), dtype=np.int64)
        # derived rows are keyed by name, measured rows by channel id
        key = np.where(
            rows.is_derived,
            -1 - rows.name.astype(np.int64),
            np.where(rows.channel_id >= 0, rows.channel_id, np.iinfo(np.int64).max),
        )
        order = np.argsort(key, kind="stable")
        keys, starts = np.unique(key[order], return_index=True)
        ends = np.append(starts[1:], len(order))
        for k, lo, hi in zip(keys.tolist(), starts.tolist(), ends.tolist()):
            idx = order[lo:hi]
            if k < 0:
                d = self.derived_by_name[self.names[-1 - k]]
                groups = [(("derived", d.name), d.qc, idx)]
                clock_key = ("derived", d.name)
                max_gap = np.full(len(idx), _gap_us(d.qc.max_gap), dtype=np.int64)
            else:
                if k not in self.cmap.channels:
                    continue
                revs = self.cmap.channels[k]
                rev_of = self._revision[idx]
                idx = idx[rev_of >= 0]
                rev_of = rev_of[rev_of >= 0]
                if len(idx) == 0:
                    continue
                groups = [((k, r.revision), r.qc, idx[rev_of == r.revision]) for r in revs]
                clock_key = k
                max_gap = np.array([_gap_us(r.qc.max_gap) for r in revs], dtype=np.int64)[rev_of]
            clock = self.clocks.setdefault(clock_key, ClockState())
            rows.flags[idx] |= clock.test(rows.time_us[idx], max_gap)
            rows.evaluated[idx] |= max_gap >= 0
            for series_key, qc, sel in groups:
                if len(sel) == 0 or not qc.any_value_test:
                    continue
                usable = sel[_usable(rows.value[sel], rows.flags[sel])]
                state = self.series.setdefault(series_key, SeriesState(qc))
                # expire by the series' first line in this chunk: a later line would drop a value
                # whose successor is near, when the chunk is long (output must not depend on it)
                state.expire(int(rows.line[sel[0]]) if len(sel) else 0)
                if len(usable) == 0:
                    continue
                found, patches = state.test(rows.time_us[usable], rows.value[usable], rows.line[usable], global_rows[usable])
                rows.flags[usable] |= found
                rows.evaluated[usable] = True
                self.patches.extend(patches)

    def held_from(self) -> int | None:
        """First global row that must wait (a spike decision pending), or None."""
        pending = [s.pending.row for s in self.series.values() if s.pending is not None and s.qc.spike is not None]
        return min(pending) if pending else None

    def expire_all(self, line: int) -> None:
        for s in self.series.values():
            s.expire(line)


@dataclass
class _Chunk:
    rec: Records
    value: np.ndarray
    volts: np.ndarray
    flags: np.ndarray
    name: np.ndarray
    unit: np.ndarray
    evaluated: np.ndarray

    def __post_init__(self):
        self.revision_of = np.full(len(self.rec), -1, dtype=np.int32)


@dataclass
class _DerivedPart:
    channel: DerivedChannel
    positions: np.ndarray
    values: np.ndarray
    flags: np.ndarray
    evaluated: np.ndarray


def _gap_us(max_gap_s: float | None) -> int:
    return -1 if max_gap_s is None else round(max_gap_s * US)


def limit_flags(x: np.ndarray, range_: tuple[float, float] | None, expect: tuple[float, float] | None) -> np.ndarray:
    """Gross range test: outside ``range`` is bad, outside ``expect`` is suspect (QARTOD)."""
    flags = np.zeros(len(x), dtype=np.int64)
    with np.errstate(invalid="ignore"):
        if range_ is not None:
            flags[x < range_[0]] |= int(Flag.BELOW_RANGE)
            flags[x > range_[1]] |= int(Flag.ABOVE_RANGE)
        if expect is not None:
            flags[(x < expect[0]) | (x > expect[1])] |= int(Flag.OUTSIDE_EXPECTED)
    return flags
