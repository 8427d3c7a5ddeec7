"""The ``thermocouple`` stage: volts at the amplifier input -> hot-junction temperature [degC].

Map parameters (contract section 4):

``type``
    Letter type ``B``, ``E``, ``J``, ``K``, ``N``, ``R``, ``S`` or ``T``. Lower case is accepted
    and stored upper case (``"k"`` means type K): the letter is a name, not a unit, and a
    map written by hand should not fail over its case.
``cold_junction``
    Either a fixed cold-junction temperature [degC] (a TOML number, which must lie inside
    the type's reference-function range), or the name of the channel that measures it (a
    TOML string, e.g. ``"board_temp"``); that channel's values are read as [degC].
``max_age``
    Seconds, default 60, > 0: how old the cold-junction channel's latest good or suspect
    value may be. The pipeline applies it when it lines the values up (``ctx.inputs``);
    records without one get ``input_missing`` and NaN there.

The stage computes emf = 1000 * volts [mV], adds the reference-function emf at the cold
junction and inverts (:func:`countmill.sensors.thermocouple.cold_junction_compensated_temperature`).
``outside_model`` (bad) and NaN mark records whose compensated emf lies outside the range of
NIST's inverse function for the type, or whose cold-junction temperature lies outside the
type's reference function. A NaN input (volts or cold junction) gives NaN without a flag:
whatever made it NaN has already been flagged upstream.
"""

from __future__ import annotations

import math
from typing import Literal

import numpy as np
from pydantic import Field, field_validator, model_validator

from countmill.flags import Flag
from countmill.sensors.thermocouple import (
    cold_junction_compensated_temperature,
    reference_range,
    thermocouple_emf,
    thermocouple_temperature,
)
from countmill.stages.registry import Stage, StageContext, StageParams, StageResult, flags_where, register

ThermocoupleType = Literal["B", "E", "J", "K", "N", "R", "S", "T"]


class ThermocoupleParams(StageParams):
    """Parameters of the ``thermocouple`` stage (see the module docstring)."""

    type: ThermocoupleType
    cold_junction: float | str
    max_age: float = Field(60.0, gt=0, le=3600, allow_inf_nan=False)  # [s]; history holds 2 h

    @field_validator("type", mode="before")
    @classmethod
    def _upper_case_letter(cls, value):
        return value.strip().upper() if isinstance(value, str) else value

    @field_validator("cold_junction", mode="before")
    @classmethod
    def _number_or_channel(cls, value):
        if isinstance(value, bool):
            raise ValueError("must be a temperature in degC (a number) or a channel name (a string)")
        if isinstance(value, str) and not value.strip():
            raise ValueError("channel name is empty")
        if isinstance(value, (int, float)) and not math.isfinite(value):
            raise ValueError("must be a finite temperature in degC")
        return value

    @model_validator(mode="after")
    def _fixed_cold_junction_in_range(self):
        if not isinstance(self.cold_junction, str):
            low, high = reference_range(self.type)
            if not low <= self.cold_junction <= high:
                raise ValueError(
                    f"cold_junction {self.cold_junction:g} degC is outside the type "
                    f"{self.type} reference function, {low:g} to {high:g} degC"
                )
        return self


def _needs(params: ThermocoupleParams) -> tuple[str, ...]:
    return (params.cold_junction,) if isinstance(params.cold_junction, str) else ()


def _apply(x: np.ndarray, params: ThermocoupleParams, ctx: StageContext) -> StageResult:
    emf = 1000.0 * np.asarray(x, dtype=np.float64)  # [V] -> [mV]
    if isinstance(params.cold_junction, str):
        try:
            t_cj = np.asarray(ctx.inputs[params.cold_junction], dtype=np.float64)
        except KeyError:
            raise KeyError(
                f"thermocouple stage: no values of cold-junction channel {params.cold_junction!r} in the context"
            ) from None
    else:
        t_cj = np.float64(params.cold_junction)
    t = np.asarray(cold_junction_compensated_temperature(emf, t_cj, type=params.type), dtype=np.float64)
    if t.shape == emf.shape and not np.isnan(t.min(initial=0.0)):  # (min is NaN if any value is)
        # outside the model means no temperature: none here
        return StageResult(values=t, flags=None)
    # some record has no temperature: tell a NaN input from a value outside the model
    e_cj = np.asarray(thermocouple_emf(t_cj, type=params.type))
    e_hot = emf + e_cj
    outside = (~np.isnan(t_cj) & np.isnan(e_cj)) | (~np.isnan(e_hot) & np.isnan(t))
    t = np.broadcast_to(t, emf.shape).copy()
    outside = np.broadcast_to(outside, emf.shape)
    return StageResult(values=t, flags=flags_where(outside, Flag.OUTSIDE_MODEL))


def _describe(params: ThermocoupleParams) -> str:
    if isinstance(params.cold_junction, str):
        cj = f"cold junction from channel {params.cold_junction!r} (at most {params.max_age:g} s old)"
    else:
        cj = f"cold junction fixed at {params.cold_junction:g} degC"
    return f"type {params.type} thermocouple, NIST ITS-90, {cj}"


THERMOCOUPLE = register(
    Stage(
        name="thermocouple",
        params=ThermocoupleParams,
        input_unit="V",
        output_unit="degC",
        apply=_apply,
        describe=_describe,
        needs=_needs,
        needs_unit="degC",
        physics=(thermocouple_temperature, thermocouple_emf),
    )
)
