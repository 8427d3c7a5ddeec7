"""The front end of a reading: ADC code to volts, PGA gain, and the gross range limits.

Each function ORs its reasons into a revision's int64 flags in place and leaves the
physics to :mod:`countmill.sensors.adc`; a test that no value can trip (no code at a
rail, no value beyond a limit, as the minimum and maximum show) is not run at all.
"""

from __future__ import annotations

import numpy as np

from countmill.chanmap.compiled import ChannelRevision
from countmill.flags import Flag
from countmill.sensors.adc import amplifier_input_volts, code_to_volts, valid_code_range


def set_flag(flags: np.ndarray, mask: np.ndarray, flag: int) -> None:
    """``flags[mask] |= flag``, in place (nothing to do when no record is hit)."""
    if mask.any():
        flags[mask] |= int(flag)


def adc_volts(code: np.ndarray, rev: ChannelRevision, flags: np.ndarray) -> np.ndarray:
    """Volts at the ADC (NaN for an invalid code); sets the code's rail and range flags."""
    lowest, highest = valid_code_range(rev.adc.bits, rev.adc.coding)
    at_adc = code_to_volts(code, bits=rev.adc.bits, span=rev.adc.span, coding=rev.adc.coding)
    low, high = (int(code.min()), int(code.max())) if len(code) else (lowest + 1, lowest + 1)
    if low < lowest or high > highest:
        set_flag(flags, (code < lowest) | (code > highest), Flag.INVALID_CODE)
    if low <= lowest:
        set_flag(flags, code == lowest, Flag.SATURATED_LOW)
    if high >= highest:
        set_flag(flags, code == highest, Flag.SATURATED_HIGH)
    return at_adc


def amplifier_input(at_adc: np.ndarray, gain: np.ndarray, rev: ChannelRevision, flags: np.ndarray) -> np.ndarray:
    """Volts at the amplifier input; flags an unknown gain code."""
    x = amplifier_input_volts(at_adc, gain, rev.gains)
    missing = np.isnan(x)
    if missing.any():
        set_flag(flags, missing & ~np.isnan(at_adc), Flag.UNKNOWN_GAIN)
    return x


def add_limit_flags(x: np.ndarray, range_, expect, flags: np.ndarray) -> None:
    """:func:`limit_flags`, ORed into ``flags`` in place; the bounds are compared only when
    some value lies beyond them."""
    if (range_ is None and expect is None) or len(x) == 0:
        return
    low, high = np.fmin.reduce(x), np.fmax.reduce(x)  # NaN-blind: NaN is never out of range
    with np.errstate(invalid="ignore"):
        if range_ is not None:
            if low < range_[0]:
                set_flag(flags, x < range_[0], Flag.BELOW_RANGE)
            if high > range_[1]:
                set_flag(flags, x > range_[1], Flag.ABOVE_RANGE)
        if expect is not None and (low < expect[0] or high > expect[1]):
            set_flag(flags, (x < expect[0]) | (x > expect[1]), Flag.OUTSIDE_EXPECTED)


def limit_flags(x: np.ndarray, range_: tuple[float, float] | None, expect: tuple[float, float] | None) -> np.ndarray:
    """Gross range test: outside ``range`` is bad, outside ``expect`` is suspect (QARTOD)."""
    flags = np.zeros(len(x), dtype=np.int64)
    with np.errstate(invalid="ignore"):
        if range_ is not None:
            flags[x < range_[0]] |= int(Flag.BELOW_RANGE)
            flags[x > range_[1]] |= int(Flag.ABOVE_RANGE)
        if expect is not None:
            flags[(x < expect[0]) | (x > expect[1])] |= int(Flag.OUTSIDE_EXPECTED)
    return flags
