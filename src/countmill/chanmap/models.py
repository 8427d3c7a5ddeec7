"""Pydantic models of the channel map's TOML sections, as the user writes them.

These models only check shape and types; :mod:`countmill.chanmap.load` turns them into
compiled, unit-checked objects for the converter.
"""

from __future__ import annotations

import datetime as dt
from typing import Any, Literal

from pydantic import BaseModel, ConfigDict, Field, field_validator, model_validator


class _Strict(BaseModel):
    model_config = ConfigDict(extra="forbid", populate_by_name=True)


class MapInfo(_Strict):
    name: str
    timezone: str = "UTC"
    description: str = ""
    #: glob of raw file names this map covers, for ``countmill batch --maps``
    files: str | None = None


class BinaryField(_Strict):
    name: str
    dtype: str


class InputSpec(_Strict):
    columns: list[str] = Field(default_factory=lambda: ["time", "channel", "code", "gain"])
    time: Literal["iso", "unix_s", "unix_ms"] = "iso"
    #: field separator; detected from the first data line when omitted (tab or comma)
    delimiter: str | None = None
    # binary record layout (fixed-size little-endian records)
    format: Literal["text", "binary"] = "text"
    record: list[BinaryField] | None = None
    time_unit: Literal["s", "ms", "us", "ns"] = "ms"
    epoch: dt.datetime | None = None

    @field_validator("columns")
    @classmethod
    def _known_columns(cls, columns: list[str]) -> list[str]:
        required = {"time", "channel", "code"}
        missing = required - set(columns)
        if missing:
            raise ValueError(f"columns must include {sorted(missing)}; got {columns}")
        unknown = set(columns) - {"time", "channel", "code", "gain"}
        if unknown:
            raise ValueError(f"unknown column names {sorted(unknown)}; known: time, channel, code, gain")
        if len(set(columns)) != len(columns):
            raise ValueError(f"a column is named twice in {columns}")
        return columns


class AdcSpec(_Strict):
    bits: int = Field(ge=2, le=32)
    span: tuple[float, float]
    coding: Literal["straight", "twos"] = "straight"

    @field_validator("span")
    @classmethod
    def _span_not_empty(cls, span: tuple[float, float]) -> tuple[float, float]:
        if span[1] == span[0]:
            raise ValueError(f"span must have two different ends; got {list(span)}")
        return span


class FlatSpec(_Strict):
    tolerance: float = Field(ge=0)
    seconds: float = Field(gt=0)


class QcSpec(_Strict):
    spike: float | None = Field(default=None, gt=0)
    rate: float | None = Field(default=None, gt=0)
    flat: FlatSpec | None = None
    max_gap: float | None = Field(default=None, gt=0)


class CalibrationSpec(_Strict):
    points: list[tuple[float, float]]
    degree: int = Field(default=1, ge=0, le=5)
    date: dt.date | None = None
    due: dt.datetime | dt.date | None = None
    certificate: str | None = None


def _limits(value: Any) -> Any:
    if value is None:
        return value
    if len(value) != 2 or not value[0] < value[1]:
        raise ValueError(f"must be [low, high] with low < high; got {value}")
    return value


class ChannelSpec(_Strict):
    id: int = Field(ge=0)
    name: str = Field(min_length=1)
    unit: str
    description: str = ""
    valid_from: dt.datetime | None = Field(default=None, alias="from")
    range: tuple[float, float] | None = None
    expect: tuple[float, float] | None = None
    chain: list[dict[str, Any]] = Field(default_factory=list)
    qc: QcSpec | None = None
    calibration: CalibrationSpec | None = None
    adc: AdcSpec | None = None
    gains: dict[int, float] | None = None

    _check_range = field_validator("range", "expect")(classmethod(lambda cls, v: _limits(v)))

    @field_validator("name")
    @classmethod
    def _name_is_identifier(cls, name: str) -> str:
        if not name.isidentifier():
            raise ValueError(f"{name!r} must be a name of letters, digits and underscores (used in expressions)")
        return name


class DerivedSpec(_Strict):
    name: str
    unit: str
    expression: str
    description: str = ""
    range: tuple[float, float] | None = None
    expect: tuple[float, float] | None = None
    qc: QcSpec | None = None
    max_age: float = Field(default=60.0, gt=0)

    _check_range = field_validator("range", "expect")(classmethod(lambda cls, v: _limits(v)))


class MapFile(_Strict):
    """The whole map file, section by section (channels are validated one by one)."""

    map: MapInfo
    input: InputSpec = Field(default_factory=InputSpec)
    adc: AdcSpec
    gains: dict[int, float] = Field(default_factory=lambda: {0: 1.0})
    qc: QcSpec = Field(default_factory=QcSpec)
    channel: list[dict[str, Any]] = Field(default_factory=list)
    derived: list[dict[str, Any]] = Field(default_factory=list)

    @model_validator(mode="after")
    def _gains_positive(self) -> "MapFile":
        for code, gain in self.gains.items():
            if not gain > 0:
                raise ValueError(f"gains: gain code {code} has gain {gain}; a gain must be > 0")
        return self
