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


#: field types of a binary record (all little-endian), with their size in bytes
BINARY_DTYPES = {
    "int8": 1, "uint8": 1, "int16": 2, "uint16": 2, "int32": 4, "uint32": 4,
    "int64": 8, "uint64": 8, "float32": 4, "float64": 8,
}


class BinaryField(_Strict):
    """One field of a fixed-size binary record: ``time``, ``channel``, ``code``, ``gain``,
    or a name starting with ``_`` for bytes the converter skips (status, padding)."""

    name: str
    dtype: Literal["int8", "uint8", "int16", "uint16", "int32", "uint32", "int64", "uint64", "float32", "float64"]

    @field_validator("name")
    @classmethod
    def _known_name(cls, name: str) -> str:
        if name not in ("time", "channel", "code", "gain") and not name.startswith("_"):
            raise ValueError(f"unknown field name {name!r}; known: time, channel, code, gain, or _name for skipped bytes")
        return name


class InputSpec(_Strict):
    columns: list[str] = Field(default_factory=lambda: ["time", "channel", "code", "gain"])
    time: Literal["iso", "unix_s", "unix_ms"] = "iso"
    #: field separator; detected from the first data line when omitted (tab or comma)
    delimiter: str | None = None
    # binary record layout (fixed-size little-endian records, packed, in the order given)
    format: Literal["text", "binary"] = "text"
    record: list[BinaryField] | None = None
    #: the binary ``time`` field counts these since ``epoch``
    time_unit: Literal["s", "ms", "us", "ns"] = "ms"
    #: start of the binary time count; with an offset (or Z) an instant, without one a
    #: wall-clock time in the map's timezone; default 1970-01-01T00:00:00Z
    epoch: dt.datetime | None = None
    #: bytes before the first binary record (a file header the converter skips)
    header_bytes: int = Field(default=0, ge=0)

    @model_validator(mode="after")
    def _binary_layout(self) -> "InputSpec":
        if self.format != "binary":
            if self.record is not None:
                raise ValueError('record is for format = "binary"; this input is text')
            return self
        if not self.record:
            raise ValueError('format = "binary" needs record = [{ name = "time", dtype = "int64" }, ...]')
        names = [f.name for f in self.record]
        missing = {"time", "channel", "code"} - set(names)
        if missing:
            raise ValueError(f"record must have fields {sorted(missing)}; got {names}")
        twice = sorted({n for n in names if names.count(n) > 1})
        if twice:
            raise ValueError(f"record names {twice} more than once")
        for f in self.record:
            if f.name in ("channel", "code", "gain") and f.dtype.startswith("float"):
                raise ValueError(f"record field {f.name!r} must be an integer type; got {f.dtype}")
        return self

    @property
    def record_bytes(self) -> int:
        return sum(BINARY_DTYPES[f.dtype] for f in self.record or [])

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
    max_age: float = Field(default=60.0, gt=0, le=3600)  # [s]; inputs keep two hours of history

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
