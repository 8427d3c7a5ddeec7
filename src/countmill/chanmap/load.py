"""Load a channel map: TOML → pydantic → unit-checked, compiled :class:`ChannelMap`.

Every error is a :class:`countmill.errors.MapError` naming the map file, the channel
(id and name) or derived channel, and the key, and saying what was expected.
"""

from __future__ import annotations

import datetime as dt
import hashlib
import tomllib
import zoneinfo
from pathlib import Path
from typing import Any

import numpy as np
from pydantic import ValidationError

from countmill.chanmap.compiled import (
    BEGINNING,
    Adc,
    Calibration,
    ChainStep,
    ChannelMap,
    ChannelRevision,
    CrossInput,
    DerivedChannel,
    QcSettings,
)
from countmill.chanmap.expression import ExpressionError, parse_expression
from countmill.chanmap.models import CalibrationSpec, ChannelSpec, DerivedSpec, MapFile
from countmill.errors import MapError
from countmill.stages.registry import all_stages
from countmill.units import affine_conversion, parse_unit, same_dimension

#: the quantity a chain starts from: volts at the amplifier input
CHAIN_INPUT_UNIT = "V"


def load_map(path: str | Path) -> ChannelMap:
    path = Path(path)
    try:
        raw = path.read_bytes()
    except OSError as exc:
        raise MapError(f"cannot read the map: {exc.strerror}", path=str(path)) from None
    return parse_map(raw, str(path))


def parse_map(raw: bytes, path: str = "<map>") -> ChannelMap:
    try:
        document = tomllib.loads(raw.decode("utf-8-sig"))
    except UnicodeDecodeError as exc:
        raise MapError(f"not UTF-8 text ({exc.reason} at byte {exc.start})", path=path) from None
    except tomllib.TOMLDecodeError as exc:
        raise MapError(f"not valid TOML: {exc}", path=path) from None
    loader = _Loader(path)
    return loader.compile(document, hashlib.sha256(raw).hexdigest())


def _pydantic_problem(exc: ValidationError) -> tuple[str, str]:
    """First problem of a pydantic error as (key path, message).

    An unknown key comes first: a misspelt key also makes the intended key "missing",
    and the user needs to see the one they typed.
    """
    errors = exc.errors()
    err = next((e for e in errors if e.get("type") == "extra_forbidden"), errors[0])
    key = ".".join(str(p) for p in err["loc"]) or None
    message = err["msg"]
    if err.get("type") == "extra_forbidden":
        message = "unknown key (misspelt?)"
    elif err.get("type") == "missing":
        message = "required key is missing"
    elif "input" in err and err.get("type") != "missing":
        message = f"{message}; got {err['input']!r}"
    return key or "", message


class _Loader:
    def __init__(self, path: str):
        self.path = path

    def error(self, message: str, where: str | None = None, key: str | None = None) -> MapError:
        return MapError(message, path=self.path, where=where, key=key)

    # --- top level -------------------------------------------------------------------
    def compile(self, document: dict[str, Any], sha256: str) -> ChannelMap:
        try:
            spec = MapFile.model_validate(document)
        except ValidationError as exc:
            key, message = _pydantic_problem(exc)
            raise self.error(message, key=key) from None
        try:
            self.zone = zoneinfo.ZoneInfo(spec.map.timezone)
        except (zoneinfo.ZoneInfoNotFoundError, ValueError):
            raise self.error(f"{spec.map.timezone!r} is not an IANA time zone (e.g. 'Europe/Berlin')", key="map.timezone") from None
        self.tz_name = spec.map.timezone
        self.spec = spec
        default_adc = Adc(spec.adc.bits, tuple(spec.adc.span), spec.adc.coding)
        if not spec.channel:
            raise self.error("the map has no [[channel]] entry", key="channel")

        revisions: dict[int, list[ChannelRevision]] = {}
        names_to_id: dict[str, int] = {}
        for index, entry in enumerate(spec.channel):
            rev = self.compile_channel(index, entry, default_adc, spec.gains)
            other = names_to_id.setdefault(rev.name, rev.id)
            if other != rev.id:
                raise self.error(
                    f"the name {rev.name!r} is used by channel {other} too; names must be unique per channel id",
                    where=self.where(rev.id, rev.name),
                    key="name",
                )
            revisions.setdefault(rev.id, []).append(rev)
        for cid, revs in revisions.items():
            self.order_revisions(cid, revs)

        derived = [self.compile_derived(i, d, revisions, names_to_id) for i, d in enumerate(spec.derived)]
        taken = set(names_to_id)
        for d in derived:
            if d.name in taken:
                raise self.error(f"the name {d.name!r} is already a channel name", where=f"derived '{d.name}'", key="name")
            taken.add(d.name)

        for revs in revisions.values():
            for rev in revs:
                for need in rev.inputs:
                    self.link_input(rev, need, revisions, names_to_id)
        order = self.dependency_order(revisions, names_to_id)
        return ChannelMap(
            path=self.path,
            sha256=sha256,
            name=spec.map.name,
            timezone=spec.map.timezone,
            input=spec.input,
            channels=revisions,
            derived=derived,
            order=order,
            ids_by_name=names_to_id,
        )

    def link_input(self, rev: ChannelRevision, need: CrossInput, revisions, names_to_id) -> None:
        """Check a cross-channel input exists and convert its unit once, here."""
        where = self.where(rev.id, rev.name)
        if need.name not in names_to_id:
            raise self.error(f"names channel {need.name!r}, which the map does not define", where=where, key="chain")
        source_units = {r.unit for r in revisions[names_to_id[need.name]]}
        if need.unit is None:
            return
        if len(source_units) > 1:
            raise self.error(
                f"channel {need.name!r} changes unit between revisions ({', '.join(sorted(source_units))}); "
                "an input channel must keep one unit",
                where=where,
                key="chain",
            )
        (source_unit,) = source_units
        if not same_dimension(source_unit, need.unit):
            raise self.error(
                f"reads channel {need.name!r} in {need.unit}, but that channel is in {source_unit!r}",
                where=where,
                key="chain",
            )
        need.to_unit = affine_conversion(source_unit, need.unit)

    @staticmethod
    def where(cid: Any, name: Any) -> str:
        return f"channel {cid} '{name}'" if name else f"channel {cid}"

    # --- one [[channel]] entry -------------------------------------------------------
    def compile_channel(self, index: int, entry: dict, default_adc: Adc, default_gains: dict[int, float]) -> ChannelRevision:
        where = self.where(entry.get("id", f"#{index + 1}"), entry.get("name"))
        try:
            spec = ChannelSpec.model_validate(entry)
        except ValidationError as exc:
            key, message = _pydantic_problem(exc)
            raise self.error(message, where=where, key=key) from None
        where = self.where(spec.id, spec.name)
        self.check_unit(spec.unit, where, "unit")

        adc = Adc(spec.adc.bits, tuple(spec.adc.span), spec.adc.coding) if spec.adc else default_adc
        gains = spec.gains if spec.gains is not None else default_gains
        for code, gain in gains.items():
            if not gain > 0 or code < 0:
                raise self.error(f"gain code {code} -> {gain}: codes must be >= 0 and gains > 0", where=where, key="gains")

        chain, chain_unit, inputs = self.compile_chain(spec, where)
        if not same_dimension(chain_unit, spec.unit):
            raise self.error(
                f"the chain ends in {chain_unit} ({parse_unit(chain_unit).dimensionality}) but the channel's unit is "
                f"{spec.unit!r} ({parse_unit(spec.unit).dimensionality}); they must be of the same dimension",
                where=where,
                key="unit",
            )
        calibration = self.compile_calibration(spec.calibration, where) if spec.calibration else None
        valid_from_us = BEGINNING
        if spec.valid_from is not None:
            valid_from_us = self.instant_us(spec.valid_from)
        return ChannelRevision(
            id=spec.id,
            name=spec.name,
            unit=spec.unit,
            description=spec.description,
            revision=0,
            valid_from_us=valid_from_us,
            valid_from_text=spec.valid_from.isoformat() if spec.valid_from else None,
            adc=adc,
            gains=dict(gains),
            chain=chain,
            chain_unit=chain_unit,
            to_unit=affine_conversion(chain_unit, spec.unit),
            calibration=calibration,
            range=spec.range,
            expect=spec.expect,
            qc=QcSettings.merged(self.spec.qc, spec.qc),
            inputs=inputs,
        )

    def check_unit(self, text: str, where: str, key: str) -> None:
        try:
            parse_unit(text)
        except ValueError as exc:
            raise self.error(str(exc), where=where, key=key) from None

    def compile_chain(self, spec: ChannelSpec, where: str):
        stages = all_stages()
        steps: list[ChainStep] = []
        inputs: list[CrossInput] = []
        unit = CHAIN_INPUT_UNIT
        if not spec.chain:
            raise self.error("the chain is empty; give at least one stage (e.g. linear with slope 1)", where=where, key="chain")
        for i, entry in enumerate(spec.chain):
            key = f"chain[{i + 1}]"
            name = entry.get("stage")
            if name not in stages:
                raise self.error(
                    f"unknown stage {name!r}; known stages: {', '.join(sorted(stages))}", where=where, key=f"{key}.stage"
                )
            stage = stages[name]
            try:
                params = stage.params.model_validate(entry)
            except ValidationError as exc:
                sub, message = _pydantic_problem(exc)
                raise self.error(message, where=where, key=f"{key}.{sub}" if sub else key) from None
            if stage.input_unit is not None and not same_dimension(unit, stage.input_unit):
                raise self.error(
                    f"stage '{name}' needs an input in {stage.input_unit} "
                    f"({parse_unit(stage.input_unit).dimensionality}), but the step before it gives {unit}",
                    where=where,
                    key=key,
                )
            last = i == len(spec.chain) - 1
            if stage.output_unit is not None:
                out_unit = stage.output_unit
                if params.unit is not None:
                    raise self.error(f"stage '{name}' always gives {out_unit}; remove 'unit'", where=where, key=f"{key}.unit")
            elif params.unit is not None:
                self.check_unit(params.unit, where, f"{key}.unit")
                out_unit = params.unit
            else:
                out_unit = spec.unit if last else unit
            steps.append(ChainStep(stage, params, unit, out_unit))
            max_age = float(getattr(params, "max_age", 60.0) or 60.0)
            for need in stage.needs(params):
                if need == spec.name:
                    raise self.error(f"stage '{name}' reads the channel itself", where=where, key=key)
                inputs.append(CrossInput(need, max_age, stage.needs_unit))
            unit = out_unit
        return steps, unit, inputs

    def compile_calibration(self, spec: CalibrationSpec, where: str) -> Calibration:
        points = np.asarray(spec.points, dtype=np.float64).reshape(-1, 2)
        if len(points) < spec.degree + 1:
            raise self.error(
                f"a degree-{spec.degree} fit needs at least {spec.degree + 1} points; got {len(points)}",
                where=where,
                key="calibration.points",
            )
        indicated, reference = points[:, 0], points[:, 1]
        vander = np.vander(indicated, spec.degree + 1, increasing=True)
        rank = np.linalg.matrix_rank(vander)
        condition = np.linalg.cond(vander) if rank == spec.degree + 1 else np.inf
        if rank < spec.degree + 1 or condition > 1e12:
            raise self.error(
                f"the points do not determine a degree-{spec.degree} fit (indicated values too few or too close; "
                f"condition number {condition:.3g})",
                where=where,
                key="calibration.points",
            )
        coefficients = np.polynomial.polynomial.polyfit(indicated, reference, spec.degree)
        overdue_from = None
        if spec.due is not None:
            if isinstance(spec.due, dt.datetime):
                # a due instant: records after it are overdue
                overdue_from = self.instant_us(spec.due) + 1
            else:
                # a due day is the last valid day: overdue from the next local midnight
                midnight = dt.datetime.combine(spec.due + dt.timedelta(days=1), dt.time())
                overdue_from = self.instant_us(midnight)
        return Calibration(
            coefficients=coefficients,
            points=[tuple(map(float, p)) for p in points],
            degree=spec.degree,
            date=spec.date,
            due=spec.due,
            overdue_from_us=overdue_from,
            certificate=spec.certificate,
        )

    def instant_us(self, when: dt.datetime) -> int:
        """A map timestamp as UTC microseconds; without an offset it is read in the map's zone."""
        if when.tzinfo is None:
            when = when.replace(tzinfo=self.zone)
        delta = when - dt.datetime(1970, 1, 1, tzinfo=dt.timezone.utc)
        return (delta.days * 86_400 + delta.seconds) * 1_000_000 + delta.microseconds

    def order_revisions(self, cid: int, revs: list[ChannelRevision]) -> None:
        starts = [r.valid_from_us for r in revs]
        if len(set(starts)) != len(starts):
            first = revs[0]
            if starts.count(BEGINNING) > 1:
                message = "has more than one entry without 'from'; a later revision needs a 'from' time"
            else:
                message = "has two revisions with the same 'from' time"
            raise self.error(message, where=self.where(cid, first.name), key="from")
        revs.sort(key=lambda r: r.valid_from_us)
        for i, rev in enumerate(revs):
            rev.revision = i

    # --- [[derived]] -----------------------------------------------------------------
    def compile_derived(self, index, entry, revisions, names_to_id) -> DerivedChannel:
        where = f"derived '{entry.get('name', f'#{index + 1}')}'"
        try:
            spec = DerivedSpec.model_validate(entry)
        except ValidationError as exc:
            key, message = _pydantic_problem(exc)
            raise self.error(message, where=where, key=key) from None
        self.check_unit(spec.unit, where, "unit")
        try:
            expression = parse_expression(spec.expression)
        except ExpressionError as exc:
            raise self.error(str(exc), where=where, key="expression") from None
        units = {}
        for name in expression.names:
            if name not in names_to_id:
                raise self.error(
                    f"names {name!r}, which is not a channel of this map (derived channels may read measured channels only)",
                    where=where,
                    key="expression",
                )
            units[name] = revisions[names_to_id[name]][-1].unit
            for rev in revisions[names_to_id[name]]:
                if not same_dimension(rev.unit, units[name]):
                    raise self.error(
                        f"channel {name!r} changes dimension between revisions; the expression cannot be checked",
                        where=where,
                        key="expression",
                    )
        try:
            result = expression.dimension_check(units)
        except ExpressionError as exc:
            raise self.error(str(exc), where=where, key="expression") from None
        dim = getattr(result, "dimensionality", parse_unit("dimensionless").dimensionality)
        if dim != parse_unit(spec.unit).dimensionality:
            raise self.error(
                f"the expression gives a quantity of dimension {dim}, but unit {spec.unit!r} is "
                f"{parse_unit(spec.unit).dimensionality}",
                where=where,
                key="unit",
            )
        return DerivedChannel(
            name=spec.name,
            unit=spec.unit,
            description=spec.description,
            expression=expression,
            max_age_s=spec.max_age,
            range=spec.range,
            expect=spec.expect,
            qc=QcSettings.merged(self.spec.qc, spec.qc),  # map-level [qc] defaults apply here too (contract §6)
        )

    def dependency_order(self, revisions, names_to_id) -> list[int]:
        needs = {cid: {names_to_id[i.name] for rev in revs for i in rev.inputs} for cid, revs in revisions.items()}
        order: list[int] = []
        state: dict[int, int] = {}  # 1 visiting, 2 done

        def visit(cid: int, path: list[int]):
            if state.get(cid) == 2:
                return
            if state.get(cid) == 1:
                cycle = path[path.index(cid):] + [cid]
                names = " -> ".join(self.where(c, revisions[c][0].name) for c in cycle)
                raise self.error(
                    f"channels read each other in a cycle: {names}",
                    where=self.where(cid, revisions[cid][0].name),
                    key="cold_junction",
                )
            state[cid] = 1
            for dep in sorted(needs[cid]):
                visit(dep, path + [cid])
            state[cid] = 2
            order.append(cid)

        for cid in sorted(revisions):
            visit(cid, [])
        return order

