"""The built-in conversion stages of a channel map (all but ``thermocouple``).

Each stage adapts a model of :mod:`countmill.sensors` to the map: a parameter model with the
contract's names, the units in and out, ``apply`` returning values and flags, and a sentence
for ``countmill describe``. NaN in gives NaN out with no new flag; where a stage cannot give a
number for a real input it says why in the flags.

Sensor faults, by topology (``V`` the measured voltage, ``Vex`` the excitation):

* ``divider``, sensor ``low`` (sensor to ground): V ≥ Vex means no current through the
  sensor, an **open** sensor (the equation gives +inf at Vex, a negative value beyond it);
  V ≤ 0 means the tap sits on ground, a **shorted** sensor (0 at ground, negative below).
* ``divider``, sensor ``high`` (sensor to the excitation): the other way round, V ≤ 0 is
  **open** and V ≥ Vex is **shorted**.
* ``current_excitation``: V at or below the lead drop gives R ≤ 0, a **shorted** sensor. An
  open sensor drives the current source to its compliance voltage, which the ADC sees as
  ``saturated_high`` upstream; the resistance then is large but finite and is not re-flagged.
* ``inverting_amp``, sensor ``rf`` (in the feedback path): an output at zero or with the sign
  of ``vin`` means the feedback conducts without a drop, a **shorted** sensor; so does a
  resistance at or below ``series``. An open feedback sensor drives the output to a supply
  rail (``saturated`` upstream).
* ``inverting_amp``, sensor ``ri`` (the input resistor): an output at zero or with the sign
  of ``vin`` means no input current, an **open** sensor (the equation gives ±inf or a negative
  value); a resistance at or below ``series`` is a **shorted** sensor.
* ``thermistor``, ``rtd``: an input resistance of +inf is **open**, zero or negative is
  **shorted** (normally already caught, as NaN, by the stage before).

Everything else that leaves no number (``table`` or ``rtd`` outside the model's range, a
bridge ratio no bridge can produce, a thermistor equation giving no positive kelvin) is
``outside_model``.
"""

from __future__ import annotations

import functools
import math
from typing import Annotated, Literal

import numpy as np
from pydantic import Field, PrivateAttr, field_validator, model_validator

from countmill.flags import Flag
from countmill.sensors import bridge, current_loop, curves, resistance, rtd, thermistor
from countmill.stages.registry import Stage, StageContext, StageParams, StageResult, flags_where, register

Finite = Annotated[float, Field(allow_inf_nan=False)]
Positive = Annotated[float, Field(gt=0, allow_inf_nan=False)]
NonNegative = Annotated[float, Field(ge=0, allow_inf_nan=False)]


# ---------------------------------------------------------------------------- helpers


def _si(value: float, unit: str) -> str:
    """``10000, 'Ω'`` → ``'10 kΩ'``."""
    if value == 0 or not math.isfinite(value):
        return f"{value:g} {unit}"
    prefixes = {-4: "p", -3: "n", -2: "µ", -1: "m", 0: "", 1: "k", 2: "M", 3: "G"}
    k = max(-4, min(3, math.floor(math.log10(abs(value)) / 3)))
    return f"{value / 1000.0**k:g} {prefixes[k]}{unit}"


def _unit(params: StageParams) -> str:
    return f", output in {params.unit}" if params.unit else ""


def _after_number(params: StageParams) -> str:
    return f" {params.unit}" if params.unit else ""


def _result(x: np.ndarray, values: np.ndarray, flags: np.ndarray | None = None) -> StageResult:
    """Values and flags; a NaN from a real input that no flag explains is ``outside_model``."""
    values = np.asarray(values, dtype=np.float64)
    unexplained = np.isnan(values) & ~np.isnan(x)
    if flags is not None:
        unexplained &= flags == 0
    if unexplained.any():
        flags = flags_where(unexplained, Flag.OUTSIDE_MODEL, flags)
    if flags is not None and not flags.any():
        flags = None
    return StageResult(values, flags)


def _faults(x: np.ndarray, values: np.ndarray, open_: np.ndarray, short: np.ndarray) -> StageResult:
    """NaN and ``open_circuit`` / ``short_circuit`` where the masks say so."""
    open_ = open_ & ~np.isnan(x)
    short = short & ~np.isnan(x) & ~open_
    flags = flags_where(open_, Flag.OPEN_CIRCUIT)
    flags_where(short, Flag.SHORT_CIRCUIT, flags)
    values = np.where(open_ | short, np.nan, values)
    return _result(x, values, flags)


def _resistance_faults(r: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """An input resistance of +inf is an open sensor; zero or negative is a shorted one."""
    return r == np.inf, r <= 0


def _as_float(x) -> np.ndarray:
    return np.asarray(x, dtype=np.float64)


class _Derived:
    """Arrays worked out once from a params object's fields and kept on it.

    Compares equal to any other ``_Derived``: it follows from the fields, so two params objects
    are equal exactly when their fields are (pydantic compares private attributes too, and
    ``==`` on arrays has no single truth value).
    """

    __slots__ = ("arrays",)

    def __init__(self, *arrays: np.ndarray):
        for array in arrays:
            array.setflags(write=False)
        self.arrays = arrays

    def __eq__(self, other: object) -> bool:
        return isinstance(other, _Derived)

    __hash__ = None


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


# ---------------------------------------------------------------------------- resistance


class DividerParams(StageParams):
    stage: Literal["divider"] = "divider"
    excitation: Positive
    r_fixed: Positive
    sensor: Literal["low", "high"]


def _divider(x, p: DividerParams, ctx: StageContext) -> StageResult:
    x = _as_float(x)
    r = resistance.divider_resistance(x, excitation=p.excitation, r_fixed=p.r_fixed, sensor=p.sensor)
    at_excitation, at_ground = x >= p.excitation, x <= 0
    if p.sensor == "low":
        return _faults(x, r, open_=at_excitation, short=at_ground)
    return _faults(x, r, open_=at_ground, short=at_excitation)


def _describe_divider(p: DividerParams) -> str:
    side = "low-side" if p.sensor == "low" else "high-side"
    return (
        f"resistance of the {side} sensor in a divider: {_si(p.excitation, 'V')} excitation, "
        f"{_si(p.r_fixed, 'Ω')} fixed"
    )


class CurrentExcitationParams(StageParams):
    stage: Literal["current_excitation"] = "current_excitation"
    amps: Positive
    lead_ohms: NonNegative = 0.0


def _current_excitation(x, p: CurrentExcitationParams, ctx: StageContext) -> StageResult:
    x = _as_float(x)
    r = resistance.current_excitation_resistance(x, amps=p.amps, lead_ohms=p.lead_ohms)
    return _faults(x, r, *_resistance_faults(r))


def _describe_current_excitation(p: CurrentExcitationParams) -> str:
    leads = f", less {_si(p.lead_ohms, 'Ω')} of leads" if p.lead_ohms else ""
    return f"resistance of a sensor driven by a {_si(p.amps, 'A')} current{leads}"


class InvertingAmpParams(StageParams):
    stage: Literal["inverting_amp"] = "inverting_amp"
    vin: Finite
    sensor: Literal["rf", "ri"]
    ri: Positive | None = None
    rf: Positive | None = None
    series: NonNegative = 0.0

    @field_validator("vin")
    @classmethod
    def _vin_not_zero(cls, vin: float) -> float:
        if vin == 0:
            raise ValueError("vin must not be 0 V: the amplifier needs a driving voltage")
        return vin

    @model_validator(mode="after")
    def _one_fixed_resistor(self) -> "InvertingAmpParams":
        fixed, other = ("ri", "rf") if self.sensor == "rf" else ("rf", "ri")
        if getattr(self, fixed) is None:
            raise ValueError(f"sensor = '{self.sensor}' needs the fixed resistor '{fixed}' (ohm)")
        if getattr(self, other) is not None:
            raise ValueError(f"sensor = '{self.sensor}' means the sensor is '{other}': give '{fixed}' only")
        return self

    @property
    def fixed(self) -> float:
        return self.ri if self.sensor == "rf" else self.rf


def _inverting_amp(x, p: InvertingAmpParams, ctx: StageContext) -> StageResult:
    x = _as_float(x)
    r = resistance.inverting_amp_resistance(x, vin=p.vin, fixed=p.fixed, sensor=p.sensor, series=p.series)
    no_gain = -x / p.vin <= 0  # output at zero or with the sign of vin
    if p.sensor == "rf":
        return _faults(x, r, open_=r == np.inf, short=no_gain | (r <= 0))
    return _faults(x, r, open_=no_gain | (r == np.inf), short=r <= 0)


def _describe_inverting_amp(p: InvertingAmpParams) -> str:
    where, fixed_name = ("feedback path", "input") if p.sensor == "rf" else ("input arm", "feedback")
    series = f", less {_si(p.series, 'Ω')} in series" if p.series else ""
    return (
        f"resistance of the sensor in the {where} of an inverting amplifier driven by "
        f"{_si(p.vin, 'V')}, {_si(p.fixed, 'Ω')} {fixed_name} resistor{series}"
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


# ---------------------------------------------------------------------------- current loop


class CurrentLoopParams(StageParams):
    stage: Literal["current_loop"] = "current_loop"
    shunt: Positive
    low: Finite
    high: Finite

    @model_validator(mode="after")
    def _span(self) -> "CurrentLoopParams":
        if self.low == self.high:
            raise ValueError("low and high must differ: they are the values at 4 mA and at 20 mA")
        return self


def _current_loop(x, p: CurrentLoopParams, ctx: StageContext) -> StageResult:
    x = _as_float(x)
    amps = current_loop.loop_current(x, shunt=p.shunt)
    fault, marginal = current_loop.ne43_levels(amps)
    flags = flags_where(fault, Flag.LOOP_FAULT)
    flags_where(marginal, Flag.LOOP_MARGINAL, flags)
    return _result(x, current_loop.loop_value(amps, low=p.low, high=p.high), flags)


def _describe_current_loop(p: CurrentLoopParams) -> str:
    return (
        f"4–20 mA loop across a {_si(p.shunt, 'Ω')} shunt, 4 mA → {p.low:g} and 20 mA → {p.high:g}"
        f"{_after_number(p)}, NAMUR NE 43 failure and marginal levels flagged"
    )


# ---------------------------------------------------------------------------- registry

def _register(name, params, input_unit, output_unit, apply, describe, *physics) -> None:
    """Register a stage; its ``apply`` runs with numpy's float warnings silenced, as every
    overflow or 0/0 it meets on absurd input ends as NaN (with a flag) or inf by design."""

    @functools.wraps(apply)
    def quiet_apply(x, p, ctx):
        with np.errstate(all="ignore"):
            return apply(x, p, ctx)

    register(Stage(name, params, input_unit, output_unit, quiet_apply, describe, physics=physics))


_register("linear", LinearParams, None, None, _linear, _describe_linear, curves.linear)
_register("polynomial", PolynomialParams, None, None, _polynomial, _describe_polynomial, curves.polynomial)
_register("table", TableParams, None, None, _table, _describe_table, curves.table, curves.table_arrays, curves.interpolate)
_register("divider", DividerParams, "V", "ohm", _divider, _describe_divider, resistance.divider_resistance)
_register(
    "current_excitation", CurrentExcitationParams, "V", "ohm", _current_excitation, _describe_current_excitation,
    resistance.current_excitation_resistance,
)
_register(
    "inverting_amp", InvertingAmpParams, "V", "ohm", _inverting_amp, _describe_inverting_amp,
    resistance.inverting_amp_resistance,
)
_register(
    "thermistor", ThermistorParams, "ohm", "degC", _thermistor, _describe_thermistor,
    thermistor.beta_temperature, thermistor.steinhart_hart_temperature, thermistor.steinhart_hart_coefficients,
)
_register("rtd", RtdParams, "ohm", "degC", _rtd, _describe_rtd, rtd.rtd_temperature)
_register("bridge", BridgeParams, "V", "strain", _bridge, _describe_bridge, bridge.bridge_strain)
_register("ratiometric", RatiometricParams, "V", None, _ratiometric, _describe_ratiometric, bridge.ratiometric_value)
_register(
    "current_loop", CurrentLoopParams, "V", None, _current_loop, _describe_current_loop,
    current_loop.loop_current, current_loop.loop_value, current_loop.ne43_levels,
)
