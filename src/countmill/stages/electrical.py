"""Stages of electrical front ends: dividers, current excitation, inverting amplifiers,
4–20 mA loops (voltage → resistance, or voltage → value).

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

from typing import Literal

import numpy as np
from pydantic import field_validator, model_validator

from countmill.flags import Flag
from countmill.stages._adapt import (
    Finite,
    NonNegative,
    Positive,
    _after_number,
    _as_float,
    _faults,
    _register,
    _resistance_faults,
    _result,
    _si,
)
from countmill.stages.registry import StageContext, StageParams, StageResult, flags_where
from countmill.sensors import current_loop, resistance


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
    "current_loop", CurrentLoopParams, "V", None, _current_loop, _describe_current_loop,
    current_loop.loop_current, current_loop.loop_value, current_loop.ne43_levels,
)
