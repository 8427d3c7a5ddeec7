"""Quality flags: the reasons a reading is doubted, and the quality level they add up to.

Two layers, as the CF conventions and the IOC/IODE primary-level scheme suggest:

* ``flags`` is a bitmask of *reasons* (``Flag``), published in the output metadata as
  CF ``flag_masks`` / ``flag_meanings``;
* ``quality`` is one level per row (``Quality``): 1 good, 2 not evaluated, 3 suspect,
  4 bad, 9 missing, published as CF ``flag_values`` / ``flag_meanings``.

Each reason has a severity. Quality is combined in one place, :func:`combine_quality`.
"""

from __future__ import annotations

import enum

import numpy as np


class Quality(enum.IntEnum):
    GOOD = 1
    NOT_EVALUATED = 2
    SUSPECT = 3
    BAD = 4
    MISSING = 9


class Flag(enum.IntFlag):
    """Reasons a reading is doubted. Bit positions are published in the output metadata."""

    SATURATED_LOW = 1 << 0
    SATURATED_HIGH = 1 << 1
    INVALID_CODE = 1 << 2
    UNKNOWN_GAIN = 1 << 3
    UNMAPPED_CHANNEL = 1 << 4
    BELOW_RANGE = 1 << 5
    ABOVE_RANGE = 1 << 6
    OUTSIDE_EXPECTED = 1 << 7
    SPIKE = 1 << 8
    RATE_OF_CHANGE = 1 << 9
    FLAT_LINE = 1 << 10
    OPEN_CIRCUIT = 1 << 11
    SHORT_CIRCUIT = 1 << 12
    LOOP_FAULT = 1 << 13
    LOOP_MARGINAL = 1 << 14
    OUTSIDE_MODEL = 1 << 15
    INPUT_MISSING = 1 << 16
    CALIBRATION_OVERDUE = 1 << 17
    TIME_OUT_OF_ORDER = 1 << 18
    TIME_DUPLICATE = 1 << 19
    GAP_BEFORE = 1 << 20
    TIME_AMBIGUOUS = 1 << 21
    # countmill's own extension: a value computed from an input that was itself suspect.
    INPUT_SUSPECT = 1 << 22


ALL_FLAGS: tuple[Flag, ...] = tuple(Flag)

#: Reasons that make a reading bad (4) when it still has a value.
BAD_MASK = int(
    Flag.SATURATED_LOW
    | Flag.SATURATED_HIGH
    | Flag.BELOW_RANGE
    | Flag.ABOVE_RANGE
    | Flag.OPEN_CIRCUIT
    | Flag.SHORT_CIRCUIT
    | Flag.LOOP_FAULT
    | Flag.OUTSIDE_MODEL
)

#: Reasons that make a reading suspect (3).
SUSPECT_MASK = int(
    Flag.OUTSIDE_EXPECTED
    | Flag.SPIKE
    | Flag.RATE_OF_CHANGE
    | Flag.FLAT_LINE
    | Flag.LOOP_MARGINAL
    | Flag.CALIBRATION_OVERDUE
    | Flag.TIME_OUT_OF_ORDER
    | Flag.TIME_DUPLICATE
    | Flag.GAP_BEFORE
    | Flag.TIME_AMBIGUOUS
    | Flag.INPUT_SUSPECT
)

#: Reasons that leave no value at all (9); listed for documentation, quality 9 follows NaN.
MISSING_MASK = int(
    Flag.INVALID_CODE | Flag.UNKNOWN_GAIN | Flag.UNMAPPED_CHANNEL | Flag.INPUT_MISSING
)


def flag_name(flag: Flag) -> str:
    return flag.name.lower()


FLAG_NAMES: tuple[str, ...] = tuple(flag_name(f) for f in ALL_FLAGS)


def cf_quality_attributes() -> dict[str, str]:
    """CF attributes for the ``quality`` column."""
    return {
        "flag_values": "1 2 3 4 9",
        "flag_meanings": "good not_evaluated suspect bad missing",
    }


def cf_flags_attributes() -> dict[str, str]:
    """CF attributes for the ``flags`` bitmask column."""
    return {
        "flag_masks": " ".join(str(int(f)) for f in ALL_FLAGS),
        "flag_meanings": " ".join(FLAG_NAMES),
    }


def combine_quality(values: np.ndarray, flags: np.ndarray, evaluated: np.ndarray | bool) -> np.ndarray:
    """Quality level per row from its value, its reasons and whether any test ran.

    Parameters
    ----------
    values : ndarray of float64
        Engineering values; NaN means there is no value.
    flags : ndarray of int64
        Bitmask of :class:`Flag` reasons.
    evaluated : ndarray of bool or bool
        True where at least one quality test applied to the row.

    Returns
    -------
    ndarray of int8
        9 where the value is NaN; else 4 if a bad reason is set, 3 if a suspect reason is
        set, 1 if a test ran, 2 otherwise.
    """
    flags = np.asarray(flags, dtype=np.int64)
    quality = np.where(np.asarray(evaluated, dtype=bool), np.int8(Quality.GOOD), np.int8(Quality.NOT_EVALUATED))
    shape = np.broadcast_shapes(np.shape(values), flags.shape, quality.shape)
    if quality.shape != shape:
        quality = np.broadcast_to(quality, shape).copy()
    # levels in rising order, each over the last (in place; a level no row has is skipped)
    present = int(np.bitwise_or.reduce(flags, axis=None)) if flags.size else 0
    if present & SUSPECT_MASK:
        np.copyto(quality, np.int8(Quality.SUSPECT), where=(flags & SUSPECT_MASK) != 0)
    if present & BAD_MASK:
        np.copyto(quality, np.int8(Quality.BAD), where=(flags & BAD_MASK) != 0)
    np.copyto(quality, np.int8(Quality.MISSING), where=np.isnan(values))
    return quality


def decode(flags) -> "list[list[str]] | list[str]":
    """Names of the reasons set in a flags value, or in each of a sequence of them.

    >>> decode(Flag.SPIKE | Flag.GAP_BEFORE)
    ['spike', 'gap_before']
    """
    if np.ndim(flags) == 0:
        value = int(flags)
        return [flag_name(f) for f in ALL_FLAGS if value & int(f)]
    return [decode(v) for v in np.asarray(flags, dtype=np.int64)]


def names_joined(flags: np.ndarray) -> list[str]:
    """``;``-joined reason names per row, for spreadsheet readers (CSV ``flag_names``)."""
    flags = np.asarray(flags, dtype=np.int64)
    unique, inverse = np.unique(flags, return_inverse=True)
    texts = [";".join(decode(int(v))) for v in unique]
    return [texts[i] for i in inverse.ravel()]
