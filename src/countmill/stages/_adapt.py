"""What the built-in stage modules share: parameter types, result and fault helpers.

A stage adapts a model of :mod:`countmill.sensors` to the map; these helpers keep the
adapters short and alike (NaN in gives NaN out with no new flag; a NaN from a real input
that no flag explains is ``outside_model``).
"""

from __future__ import annotations

import functools
import math
from typing import Annotated

import numpy as np
from pydantic import Field

from countmill.flags import Flag
from countmill.stages.registry import Stage, StageParams, StageResult, flags_where, register

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




def _register(name, params, input_unit, output_unit, apply, describe, *physics) -> None:
    """Register a stage; its ``apply`` runs with numpy's float warnings silenced, as every
    overflow or 0/0 it meets on absurd input ends as NaN (with a flag) or inf by design."""

    @functools.wraps(apply)
    def quiet_apply(x, p, ctx):
        with np.errstate(all="ignore"):
            return apply(x, p, ctx)

    register(Stage(name, params, input_unit, output_unit, quiet_apply, describe, physics=physics))
