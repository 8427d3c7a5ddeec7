"""The channel map after loading: plain objects the converter runs on.

Everything here is checked and precomputed once (units, conversion factors, calibration
polynomials, revision start instants in UTC microseconds), so the hot loop touches only
numpy arrays and floats.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

import numpy as np

from countmill.chanmap.expression import Expression
from countmill.chanmap.models import InputSpec, QcSpec
from countmill.stages.registry import Stage, StageParams

#: the start of time for a revision without ``from``
BEGINNING = np.iinfo(np.int64).min


@dataclass(frozen=True)
class Adc:
    bits: int
    span: tuple[float, float]
    coding: str

    @property
    def lsb(self) -> float:
        return (self.span[1] - self.span[0]) / 2**self.bits


@dataclass(frozen=True)
class ChainStep:
    stage: Stage
    params: StageParams
    input_unit: str
    output_unit: str

    def words(self) -> str:
        return self.stage.describe(self.params)


@dataclass(frozen=True)
class Calibration:
    #: polynomial coefficients, ascending powers, reference = poly(indicated)
    coefficients: np.ndarray
    points: list[tuple[float, float]]
    degree: int
    date: Any
    due: Any
    #: first instant (UTC µs) at which the calibration is overdue; None when no due date
    overdue_from_us: int | None
    certificate: str | None

    def as_metadata(self) -> dict:
        return {
            "points": [list(p) for p in self.points],
            "degree": self.degree,
            "coefficients_ascending": [float(c) for c in self.coefficients],
            "date": self.date.isoformat() if self.date else None,
            "due": self.due.isoformat() if self.due else None,
            "certificate": self.certificate,
        }


@dataclass(frozen=True)
class QcSettings:
    spike: float | None = None
    rate: float | None = None
    flat_tolerance: float | None = None
    flat_seconds: float | None = None
    max_gap: float | None = None

    @classmethod
    def merged(cls, defaults: QcSpec, own: QcSpec | None) -> "QcSettings":
        def pick(name):
            value = getattr(own, name) if own is not None else None
            return value if value is not None else getattr(defaults, name)

        flat = pick("flat")
        return cls(
            spike=pick("spike"),
            rate=pick("rate"),
            flat_tolerance=flat.tolerance if flat else None,
            flat_seconds=flat.seconds if flat else None,
            max_gap=pick("max_gap"),
        )

    @property
    def any_value_test(self) -> bool:
        return self.spike is not None or self.rate is not None or self.flat_seconds is not None


@dataclass
class CrossInput:
    """A channel value another stage or expression reads, and how old it may be."""

    name: str
    max_age_s: float
    #: unit the reading stage wants; None keeps the source channel's unit
    unit: str | None = None
    #: (scale, offset) from the source channel's unit to ``unit``, set once the map is loaded
    to_unit: tuple[float, float] = (1.0, 0.0)


@dataclass
class ChannelRevision:
    id: int
    name: str
    unit: str
    description: str
    revision: int  # index among this channel id's revisions, in time order
    valid_from_us: int
    valid_from_text: str | None
    adc: Adc
    gains: dict[int, float]
    chain: list[ChainStep]
    chain_unit: str  # unit the chain ends in
    to_unit: tuple[float, float]  # scale, offset from chain_unit to unit
    calibration: Calibration | None
    range: tuple[float, float] | None
    expect: tuple[float, float] | None
    qc: QcSettings
    inputs: list[CrossInput] = field(default_factory=list)

    def chain_metadata(self) -> list[dict]:
        return [
            {**step.params.model_dump(exclude_none=True), "input_unit": step.input_unit, "output_unit": step.output_unit}
            for step in self.chain
        ]


@dataclass
class DerivedChannel:
    name: str
    unit: str
    description: str
    expression: Expression
    max_age_s: float
    range: tuple[float, float] | None
    expect: tuple[float, float] | None
    qc: QcSettings


@dataclass
class ChannelMap:
    path: str
    sha256: str
    name: str
    timezone: str
    input: InputSpec
    #: revisions of each channel id, sorted by start
    channels: dict[int, list[ChannelRevision]]
    derived: list[DerivedChannel]
    #: channel ids in the order they must be converted (inputs before their users)
    order: list[int]
    #: channel name -> id
    ids_by_name: dict[str, int]

    def revisions(self) -> list[ChannelRevision]:
        return [rev for cid in self.order for rev in self.channels[cid]]

    def channel_names(self) -> list[str]:
        names: list[str] = []
        for rev in self.revisions():
            if rev.name not in names:
                names.append(rev.name)
        names.extend(d.name for d in self.derived)
        return names
