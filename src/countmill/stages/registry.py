"""One registry for the conversion stages a channel map may name.

A stage turns the running quantity of a channel into the next one (volts into ohms, ohms
into degrees Celsius, ...). Each entry couples

* a pydantic model of the stage's parameters (``extra="forbid"``, so a misspelt key is a
  map error naming the key),
* the unit its input must have (compared by pint dimension, once, at map load) and the
  unit it gives,
* a pure vectorised ``apply`` on plain float64 arrays that returns values and flags,
* a one-line description in words for ``countmill describe``.

The physics lives in :mod:`countmill.sensors`; the entries here only adapt it to the map.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Callable, Mapping

import numpy as np
from pydantic import BaseModel, ConfigDict


class StageParams(BaseModel):
    """Base of every stage's parameter model."""

    model_config = ConfigDict(extra="forbid", frozen=True)

    stage: str
    #: Unit of this stage's output, for stages whose output can be anything
    #: (``linear``, ``polynomial``, ``table``, ``ratiometric``, ``current_loop``).
    #: When omitted: the channel's unit for the last stage, else the input's unit.
    unit: str | None = None


@dataclass(frozen=True)
class StageResult:
    """What a stage returns: values (NaN where it cannot give a number) and reasons.

    ``flags`` is an int64 bitmask of :class:`countmill.flags.Flag`, same shape as
    ``values``, or None when the stage never raises a flag.
    """

    values: np.ndarray
    flags: np.ndarray | None = None


@dataclass(frozen=True)
class StageContext:
    """What a stage may know besides its input.

    ``inputs`` maps each channel name the stage asked for (see ``Stage.needs``) to an
    array aligned with the stage's input: that channel's latest usable value for each
    record, NaN where there is none. The pipeline has already flagged those records
    ``input_missing``; the stage only has to let the NaN through.
    """

    inputs: Mapping[str, np.ndarray] = field(default_factory=dict)


@dataclass(frozen=True)
class Stage:
    name: str
    params: type[StageParams]
    #: unit whose dimension the input must have; None accepts any
    input_unit: str | None
    #: unit the stage gives; None means "any" (taken from ``params.unit`` or context)
    output_unit: str | None
    apply: Callable[[np.ndarray, StageParams, StageContext], StageResult]
    describe: Callable[[StageParams], str]
    #: names of other channels whose values the stage reads (cold junction, ...)
    needs: Callable[[StageParams], tuple[str, ...]] = lambda params: ()
    #: unit the stage wants the values of the channels it reads in (converted at map load)
    needs_unit: str | None = None
    #: the sensors-module function(s) behind the stage, for the docstring audit test
    physics: tuple[Callable, ...] = ()


STAGES: dict[str, Stage] = {}


def register(stage: Stage) -> Stage:
    if stage.name in STAGES:
        raise ValueError(f"stage {stage.name!r} registered twice")
    STAGES[stage.name] = stage
    return stage


def get_stage(name: str) -> Stage:
    _load_builtin()
    return STAGES[name]


def all_stages() -> dict[str, Stage]:
    _load_builtin()
    return dict(STAGES)


_loaded = False


def _load_builtin() -> None:
    global _loaded
    if _loaded:
        return
    _loaded = True
    # Importing a module registers its stages.
    from countmill.stages import builtin, electrical  # noqa: F401

    try:
        from countmill.stages import thermocouple  # noqa: F401
    except ImportError:  # thermocouples land separately
        pass


def flags_where(mask: np.ndarray, flag: int, out: np.ndarray | None = None) -> np.ndarray:
    """Set ``flag`` where ``mask`` is true in an int64 flags array (created if ``out`` is None)."""
    if out is None:
        out = np.zeros(mask.shape, dtype=np.int64)
    out[mask] |= np.int64(flag)
    return out
