"""Convert record arrays into tidy output rows, one chunk at a time.

The loop per chunk is short: group records by channel once (the chunk is laid out channel
by channel, each channel's records contiguous and in file order); for each channel in
dependency order, run ADC → gain → chain → unit → calibration → stateless tests; then the
derived channels; then the stateful tests per channel; then lay the rows out in input
order, each derived row right after the record that triggered it. Everything that crosses
chunk boundaries lives in small named state objects (:class:`ClockState`,
:class:`SeriesState`, :class:`LatestValue`).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from countmill.chanmap.compiled import BEGINNING, ChannelMap, ChannelRevision, DerivedChannel
from countmill.flags import BAD_MASK, Flag, Quality, combine_quality
from countmill.pipeline.chunk import ChannelChunk, row_positions
from countmill.pipeline.front_end import add_limit_flags, adc_volts, amplifier_input, limit_flags, set_flag
from countmill.pipeline.lookup import LatestValue
from countmill.pipeline.reader import Records
from countmill.pipeline.stateful import ClockState, SeriesState
from countmill.pipeline.timezone import US
from countmill.stages.registry import StageContext

COLUMNS = ("time_us", "line", "name", "channel_id", "code", "gain", "volts", "value", "unit", "flags", "evaluated")


@dataclass
class Rows:
    """Output rows as plain arrays (``name``/``unit`` index the converter's tables, -1 = null;
    ``channel_id``/``code``/``gain`` are -1 with ``is_derived`` for derived rows; any integer
    width that holds the output column's numbers)."""

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
        """Quality level per row, computed once (rows are final when they are read out:
        spike flags are patched before :meth:`take` makes the rows that are written)."""
        quality = self.__dict__.get("_quality")
        if quality is None:
            quality = self.__dict__["_quality"] = combine_quality(self.value, self.flags, self.evaluated)
        return quality

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
        # only channels another channel or a derived expression reads need their values kept
        self.read_by_others = {need.name for rev in cmap.revisions() for need in rev.inputs}
        self.read_by_others |= {name for d in cmap.derived for name in d.expression.names}
        # every revision gets a number (its "rid"); per rid + 1 (0 = no revision): name, unit
        self.revisions = cmap.revisions()
        self.rid = {id(rev): i for i, rev in enumerate(self.revisions)}
        self.rid_name = np.array([-1] + [self.name_index[r.name] for r in self.revisions], dtype=np.int32)
        self.rid_unit = np.array([-1] + [self.unit_index[r.unit] for r in self.revisions], dtype=np.int32)
        self.rid_revision = np.array([-1] + [r.revision for r in self.revisions], dtype=np.int32)
        self.clocks: dict[object, ClockState] = {}
        self.series: dict[object, SeriesState] = {}
        self.rows_emitted = 0  # global index of the next row produced
        self.patches: list[tuple[int, int]] = []  # spike flags for rows produced earlier

    # --- per chunk -------------------------------------------------------------------------
    def convert(self, rec: Records) -> Rows:
        work = ChannelChunk.grouped(rec)
        for cid in self.cmap.order:
            span = work.spans.get(cid)
            if span is not None:
                self._convert_channel(work, cid, *span)
        for cid, (lo, hi) in work.spans.items():  # channels the map does not know
            if cid not in self.cmap.channels:
                work.flags[lo:hi] |= int(Flag.UNMAPPED_CHANNEL)

        derived_parts = [self._derive(work, d) for d in self.cmap.derived]
        row_of = row_positions(len(rec), derived_parts)
        extra = np.zeros(len(rec), dtype=np.int64)  # flags of the stateful tests
        for cid, (lo, hi) in work.spans.items():
            if cid in self.cmap.channels:
                self._test_channel(work, cid, lo, hi, row_of, extra)
        for part in derived_parts:
            if part is not None:
                self._test_derived(work, part)
        rows = self._assemble(work, extra, row_of, derived_parts)
        for latest in self.latest.values():
            latest.end_chunk()
        self.rows_emitted += len(rows)
        return rows

    def _convert_channel(self, work: "ChannelChunk", cid: int, lo: int, hi: int) -> None:
        revisions = self.cmap.channels[cid]
        if len(revisions) == 1 and revisions[0].valid_from_us == BEGINNING:
            self._convert_revision(work, revisions[0], slice(lo, hi))
            return
        starts = np.array([r.valid_from_us for r in revisions], dtype=np.int64)
        which = np.searchsorted(starts, work.time_us[lo:hi], side="right") - 1
        work.flags[lo + np.flatnonzero(which < 0)] |= int(Flag.UNMAPPED_CHANNEL)
        for k, rev in enumerate(revisions):
            sel = lo + np.flatnonzero(which == k)
            if len(sel):
                self._convert_revision(work, rev, sel)

    def _convert_revision(self, work: "ChannelChunk", rev: ChannelRevision, sel) -> None:
        """Convert the records at ``sel`` (a slice or index array of the grouped chunk)."""
        code = work.code[sel]
        times = work.time_us[sel]
        flags = work.flags[sel].copy()  # the time flags so far
        at_adc = adc_volts(code, rev, flags)
        x = amplifier_input(at_adc, work.gain[sel], rev, flags)
        work.volts[sel] = x

        inputs = {}
        if rev.inputs:
            positions = work.order[sel]
            for need in rev.inputs:
                values, quality = self.latest[need.name].lookup(positions, times, round(need.max_age_s * US))
                if need.to_unit != (1.0, 0.0):
                    values = values * need.to_unit[0] + need.to_unit[1]
                inputs[need.name] = values
                missing = np.isnan(values)
                if missing.any():
                    set_flag(flags, missing & ~np.isnan(x), Flag.INPUT_MISSING)
                if quality is not None:
                    set_flag(flags, quality == Quality.SUSPECT, Flag.INPUT_SUSPECT)
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
            due = rev.calibration.overdue_from_us
            if due is not None and len(times) and times.max() >= due:
                set_flag(flags, times >= due, Flag.CALIBRATION_OVERDUE)
        add_limit_flags(x, rev.range, rev.expect, flags)
        work.value[sel] = x
        work.flags[sel] = flags
        work.rid[sel] = self.rid[id(rev)]
        usable = _usable(x, flags)
        work.usable[sel] = usable
        if rev.name in self.read_by_others and usable.any():
            good = np.flatnonzero(usable)
            q = combine_quality(x[good], flags[good], True)
            self.latest[rev.name].add(work.order[sel][good], times[good], x[good], q)

    def _derive(self, work: "ChannelChunk", d: DerivedChannel) -> "_DerivedPart | None":
        trigger = d.expression.trigger
        trigger_index = self.name_index[trigger]
        span = work.spans.get(self.cmap.ids_by_name.get(trigger, -1))
        if span is None:
            return None
        lo, hi = span
        sel = lo + np.flatnonzero(self.rid_name[work.rid[lo:hi] + 1] == trigger_index)
        if len(sel) == 0:
            return None
        pos = work.order[sel]  # ascending: the channel's records in file order
        times = work.time_us[sel]
        env = {}
        flags = np.zeros(len(pos), dtype=np.int64)
        worst = np.full(len(pos), Quality.GOOD, dtype=np.int8)
        for input_name in d.expression.names:
            if input_name == trigger:
                values = work.value[sel]
                trigger_flags = work.flags[sel]
                ok = _usable(values, trigger_flags)
                quality = np.where(ok, combine_quality(values, trigger_flags, True), np.int8(Quality.MISSING))
                values[~ok] = np.nan
            else:
                values, quality = self.latest[input_name].lookup(pos, times, round(d.max_age_s * US))
                if quality is None:  # every value found is good
                    quality = np.full(len(pos), Quality.GOOD, dtype=np.int8)
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
        return _DerivedPart(d, pos, result, flags, evaluated, times, work.line_at(pos))

    # --- stateful tests: time order, gaps, rate, flat line and spike, per channel ------------
    def _test_channel(self, work: "ChannelChunk", cid: int, lo: int, hi: int, row_of, extra: np.ndarray) -> None:
        revs = self.cmap.channels[cid]
        if len(revs) == 1 and revs[0].valid_from_us == BEGINNING:
            idx = slice(lo, hi)
            max_gap = np.int64(_gap_us(revs[0].qc.max_gap))
            groups = [((cid, revs[0].revision), revs[0].qc, idx)]
        else:
            rev_of = self.rid_revision[work.rid[lo:hi] + 1]
            mapped = np.flatnonzero(rev_of >= 0)
            if len(mapped) == 0:
                return
            idx = lo + mapped
            rev_of = rev_of[mapped]
            max_gap = np.array([_gap_us(r.qc.max_gap) for r in revs], dtype=np.int64)[rev_of]
            groups = [((cid, r.revision), r.qc, idx[rev_of == r.revision]) for r in revs]
        clock = self.clocks.setdefault(cid, ClockState())
        extra[idx] |= clock.test(work.time_us[idx], max_gap)
        # (every converted record is already "evaluated"; clock flags never make a value
        # unusable, so the usable mask of the conversion stands)
        for series_key, qc, sel in groups:
            if isinstance(sel, slice):
                if sel.stop == sel.start:
                    continue
            elif len(sel) == 0:
                continue
            if not qc.any_value_test:
                continue
            values = work.value[sel]
            usable = np.flatnonzero(work.usable[sel])
            state = self.series.setdefault(series_key, SeriesState(qc))
            # expire by the series' first line in this chunk: a later line would drop a value
            # whose successor is near, when the chunk is long (output must not depend on it)
            first = sel.start if isinstance(sel, slice) else sel[0]
            state.expire(int(work.line_at(work.order[first])))
            if len(usable) == 0:
                continue
            if isinstance(sel, slice) and len(usable) == sel.stop - sel.start:
                at, usable = sel, slice(None)  # every value usable: views, no gathers
            else:
                at = usable + sel.start if isinstance(sel, slice) else sel[usable]
            if qc.spike is not None:  # the spike test waits for the next value: rows and lines
                positions = work.order[at]
                rows = self.rows_emitted + (positions if row_of is None else row_of[positions])
                lines = work.line_at(positions)
            else:
                rows = lines = None
            found, patches = state.test(work.time_us[at], values[usable], lines, rows)
            extra[at] |= found
            self.patches.extend(patches)

    def _test_derived(self, work: "ChannelChunk", part: "_DerivedPart") -> None:
        d = part.channel
        key = ("derived", d.name)
        max_gap = np.full(len(part.positions), _gap_us(d.qc.max_gap), dtype=np.int64)
        clock = self.clocks.setdefault(key, ClockState())
        part.flags |= clock.test(part.times, max_gap)
        part.evaluated |= max_gap >= 0
        if not d.qc.any_value_test:
            return
        usable = np.flatnonzero(_usable(part.values, part.flags))
        state = self.series.setdefault(key, SeriesState(d.qc))
        state.expire(int(part.lines[0]))
        if len(usable) == 0:
            return
        rows = self.rows_emitted + part.rows[usable]
        found, patches = state.test(part.times[usable], part.values[usable], part.lines[usable], rows)
        part.flags[usable] |= found
        part.evaluated[usable] = True
        self.patches.extend(patches)

    # --- rows in input order -----------------------------------------------------------------
    def _assemble(self, work: "ChannelChunk", extra: np.ndarray, row_of, derived_parts) -> Rows:
        rec = work.rec
        n = len(rec)
        order = work.order
        flags = work.flags | extra
        if row_of is None:
            def lay(grouped):
                out = np.empty_like(grouped)
                out[order] = grouped
                return out

            rid = lay(work.rid) + 1
            return Rows(
                time_us=rec.time_us,
                line=rec.line,
                name=self.rid_name[rid],
                channel_id=rec.channel,
                code=rec.code,
                gain=rec.gain,
                volts=lay(work.volts),
                value=lay(work.value),
                unit=self.rid_unit[rid],
                flags=lay(flags),
                evaluated=rid > 0,  # every record a revision converted was evaluated
                is_derived=np.zeros(n, dtype=bool),
            )
        total = n + sum(len(p.positions) for p in derived_parts if p is not None)
        target = row_of[order]
        derived = np.zeros(total, dtype=bool)
        rid = np.empty(total, dtype=np.int32)
        rid[target] = work.rid + 1
        for part in derived_parts:
            if part is not None:
                derived[part.rows] = True
                rid[part.rows] = 0  # no revision
        rows = Rows(
            time_us=np.empty(total, dtype=np.int64),
            line=np.empty(total, dtype=np.int64),
            name=self.rid_name[rid],
            # (already in the output columns' widths: the reader checked the numbers fit)
            channel_id=np.empty(total, dtype=np.int32),
            code=np.empty(total, dtype=np.int32),
            gain=np.empty(total, dtype=np.int16),
            volts=np.empty(total),
            value=np.empty(total),
            unit=self.rid_unit[rid],
            flags=np.empty(total, dtype=np.int64),
            evaluated=rid > 0,
            is_derived=derived,
        )
        for name in ("time_us", "line", "channel", "code", "gain"):
            getattr(rows, "channel_id" if name == "channel" else name)[row_of] = getattr(rec, name)
        rows.volts[target] = work.volts
        rows.value[target] = work.value
        rows.flags[target] = flags
        for part in derived_parts:
            if part is None:
                continue
            at = part.rows
            rows.channel_id[at] = rows.code[at] = rows.gain[at] = -1
            rows.volts[at] = np.nan
            rows.time_us[at] = part.times
            rows.line[at] = part.lines
            rows.name[at] = self.name_index[part.channel.name]
            rows.value[at] = part.values
            rows.unit[at] = self.unit_index[part.channel.unit]
            rows.flags[at] = part.flags
            rows.evaluated[at] = part.evaluated
        return rows

    def held_from(self) -> int | None:
        """First global row that must wait (a spike decision pending), or None."""
        pending = [s.pending.row for s in self.series.values() if s.pending is not None and s.qc.spike is not None]
        return min(pending) if pending else None

    def expire_all(self, line: int) -> None:
        for s in self.series.values():
            s.expire(line)


@dataclass
class _DerivedPart:
    channel: DerivedChannel
    positions: np.ndarray  # file positions of the trigger records
    values: np.ndarray
    flags: np.ndarray
    evaluated: np.ndarray
    times: np.ndarray
    lines: np.ndarray
    rows: np.ndarray | None = None  # rows in the chunk's output


def _gap_us(max_gap_s: float | None) -> int:
    return -1 if max_gap_s is None else round(max_gap_s * US)


__all__ = ["Converter", "Rows", "limit_flags"]
