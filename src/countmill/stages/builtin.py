"""Built-in stages for curves, temperature sensors and bridges (all but the electrical front
ends of :mod:`countmill.stages.electrical` and ``thermocouple``).

Each stage adapts a model of :mod:`countmill.sensors` to the map: a parameter model with the
contract's names, the units in and out, ``apply`` returning values and flags, and a sentence
for ``countmill describe``. ``thermistor`` and ``rtd``: an input resistance of +inf is an
**open** sensor, zero or negative a **shorted** one. Everything else that leaves no number
(``table`` or ``rtd`` outside the model's range, a bridge ratio no bridge can produce, a
thermistor equation giving no positive kelvin) is ``outside_model``.
"""

from __future__ import annotations

from typing import Literal

import numpy as np
from pydantic import Field, PrivateAttr, field_validator, model_validator

from countmill.flags import Flag
from countmill.stages._adapt import (
    Finite,
    Positive,
    _after_number,
    _as_float,
    _Derived,
    _faults,
    _register,
    _resistance_faults,
    _result,
    _si,
    _unit,
)
from countmill.stages.registry import StageContext, StageParams, StageResult, flags_where
from countmill.sensors import bridge, curves, rtd, thermistor


# ---------------------------------------------------------------------------- curves


class LinearParams(StageParams):
    stage: Literal["linear"] = "linear"
    slope: Finite
    intercept: Finite = 0.0


def _linear(x, p: LinearParams, ctx: StageContext) -> StageResult:
    x = _as_float(x)
    return _result(x, curves.linear(x, slope=p.slope, intercept=p.intercept))


def _describe_linear(p: LinearParams) -> str:
    sign = "−" if p.intercept < 0 else "+"
    return f"straight line y = {p.slope:g}·x {sign} {abs(p.intercept):g}{_unit(p)}"


class PolynomialParams(StageParams):
    stage: Literal["polynomial"] = "polynomial"
    coefficients: tuple[Finite, ...] = Field(min_length=1)


def _polynomial(x, p: PolynomialParams, ctx: StageContext) -> StageResult:
    x = _as_float(x)
    return _result(x, curves.polynomial(x, coefficients=p.coefficients))


def _describe_polynomial(p: PolynomialParams) -> str:
    terms = ", ".join(f"{c:g}" for c in p.coefficients)
    return f"polynomial of degree {len(p.coefficients) - 1}, coefficients in ascending powers {terms}{_unit(p)}"


class TableParams(StageParams):
    stage: Literal["table"] = "table"
    points: tuple[tuple[Finite, Finite], ...] = Field(min_length=2)
    _arrays: _Derived = PrivateAttr()

    @model_validator(mode="after")
    def _prepare(self) -> "TableParams":
        self._arrays = _Derived(*curves.table_arrays(self.points))
        return self


def _table(x, p: TableParams, ctx: StageContext) -> StageResult:
    x = _as_float(x)
    values = curves.interpolate(x, *p._arrays.arrays)
    outside = np.isnan(values) & ~np.isnan(x)
    return _result(x, values, flags_where(outside, Flag.OUTSIDE_MODEL))


def _describe_table(p: TableParams) -> str:
    return (
        f"piecewise-linear table of {len(p.points)} points for inputs {p.points[0][0]:g} … "
        f"{p.points[-1][0]:g}, no value outside them{_unit(p)}"
    )


# ---------------------------------------------------------------------------- temperature


class ThermistorParams(StageParams):
    stage: Literal["thermistor"] = "thermistor"
    r25: Positive | None = None
    beta: Positive | None = None
    a: Finite | None = None
    b: Finite | None = None
    c: Finite | None = None
    points: tuple[tuple[Finite, Positive], ...] | None = None
    _coefficients: tuple[float, float, float] | None = PrivateAttr(default=None)

    @model_validator(mode="after")
    def _one_model(self) -> "ThermistorParams":
        groups = {"r25 + beta": ("r25", "beta"), "a + b + c": ("a", "b", "c"), "points": ("points",)}
        given = [name for name, keys in groups.items() if any(getattr(self, k) is not None for k in keys)]
        if len(given) != 1:
            raise ValueError(
                "give exactly one of: r25 + beta (beta model), a + b + c (Steinhart-Hart), "
                f"points (three [degC, ohm] pairs); got {' and '.join(given) or 'none'}"
            )
        missing = [k for k in groups[given[0]] if getattr(self, k) is None]
        if missing:
            raise ValueError(f"{given[0]} go together: {', '.join(missing)} missing")
        if self.points is not None:
            self._coefficients = thermistor.steinhart_hart_coefficients(self.points)
        elif self.a is not None:
            self._coefficients = (self.a, self.b, self.c)
        return self


def _thermistor(x, p: ThermistorParams, ctx: StageContext) -> StageResult:
    x = _as_float(x)
    if p._coefficients is None:
        t = thermistor.beta_temperature(x, r25=p.r25, beta=p.beta)
    else:
        a, b, c = p._coefficients
        t = thermistor.steinhart_hart_temperature(x, a=a, b=b, c=c)
    return _faults(x, t, *_resistance_faults(x))


def _describe_thermistor(p: ThermistorParams) -> str:
    if p.r25 is not None:
        return f"thermistor temperature by the beta model: {_si(p.r25, 'Ω')} at 25 °C, B = {p.beta:g} K"
    if p.points is not None:
        through = ", ".join(f"{_si(r, 'Ω')} at {t:g} °C" for t, r in p.points)
        return f"thermistor temperature by the Steinhart–Hart equation through {through}"
    return f"thermistor temperature by the Steinhart–Hart equation: a = {p.a:.6g}, b = {p.b:.6g}, c = {p.c:.6g}"


class RtdParams(StageParams):
    stage: Literal["rtd"] = "rtd"
    r0: Positive = 100.0
    a: Positive = rtd.IEC60751_A
    b: Finite = rtd.IEC60751_B
    c: Finite = rtd.IEC60751_C


def _rtd(x, p: RtdParams, ctx: StageContext) -> StageResult:
    x = _as_float(x)
    t = rtd.rtd_temperature(x, r0=p.r0, a=p.a, b=p.b, c=p.c)
    return _faults(x, t, *_resistance_faults(x))


def _describe_rtd(p: RtdParams) -> str:
    standard = (p.a, p.b, p.c) == (rtd.IEC60751_A, rtd.IEC60751_B, rtd.IEC60751_C)
    coefficients = "IEC 60751 coefficients" if standard else f"A = {p.a:g}, B = {p.b:g}, C = {p.c:g}"
    return (
        f"platinum RTD temperature by the Callendar–Van Dusen equation, R0 = {_si(p.r0, 'Ω')}, "
        f"{coefficients}, −200 … 850 °C"
    )


# ---------------------------------------------------------------------------- bridges


class BridgeParams(StageParams):
    stage: Literal["bridge"] = "bridge"
    excitation: Positive
    arrangement: Literal["quarter", "half", "full"]
    gauge_factor: Positive = 2.0


def _bridge(x, p: BridgeParams, ctx: StageContext) -> StageResult:
    x = _as_float(x)
    strain = bridge.bridge_strain(x, excitation=p.excitation, arrangement=p.arrangement, gauge_factor=p.gauge_factor)
    return _result(x, strain)


def _describe_bridge(p: BridgeParams) -> str:
    return f"strain from a {p.arrangement} bridge: {_si(p.excitation, 'V')} excitation, gauge factor {p.gauge_factor:g}"


class RatiometricParams(StageParams):
    stage: Literal["ratiometric"] = "ratiometric"
    excitation: Positive
    rated_output: Finite
    capacity: Finite
    zero: Finite = 0.0

    @field_validator("rated_output", "zero")
    @classmethod
    def _volts_per_volt(cls, value: float, info) -> float:
        if abs(value) >= 1:
            raise ValueError(f"{info.field_name} is in V/V and a bridge gives less than 1 V/V (2 mV/V is 0.002)")
        return value

    @field_validator("rated_output", "capacity")
    @classmethod
    def _not_zero(cls, value: float, info) -> float:
        if value == 0:
            raise ValueError(f"{info.field_name} must not be 0")
        return value


def _ratiometric(x, p: RatiometricParams, ctx: StageContext) -> StageResult:
    x = _as_float(x)
    value = bridge.ratiometric_value(
        x, excitation=p.excitation, rated_output=p.rated_output, capacity=p.capacity, zero=p.zero
    )
    return _result(x, value)


def _describe_ratiometric(p: RatiometricParams) -> str:
    zero = f", zero {p.zero * 1000:g} mV/V" if p.zero else ""
    return (
        f"ratiometric bridge transducer: {_si(p.excitation, 'V')} excitation, "
        f"{p.rated_output * 1000:g} mV/V at {p.capacity:g}{_after_number(p)}{zero}"
    )


_register("linear", LinearParams, None, None, _linear, _describe_linear, curves.linear)
_register("polynomial", PolynomialParams, None, None, _polynomial, _describe_polynomial, curves.polynomial)
_register("table", TableParams, None, None, _table, _describe_table, curves.table, curves.table_arrays, curves.interpolate)
_register(
    "thermistor", ThermistorParams, "ohm", "degC", _thermistor, _describe_thermistor,
    thermistor.beta_temperature, thermistor.steinhart_hart_temperature, thermistor.steinhart_hart_coefficients,
)
_register("rtd", RtdParams, "ohm", "degC", _rtd, _describe_rtd, rtd.rtd_temperature)
_register("bridge", BridgeParams, "V", "strain", _bridge, _describe_bridge, bridge.bridge_strain)
_register("ratiometric", RatiometricParams, "V", None, _ratiometric, _describe_ratiometric, bridge.ratiometric_value)
