"""The one pint unit registry of the package.

Units are checked once, when a channel map loads; the hot loop runs on plain float64.
``strain`` and ``microstrain`` are defined here as dimensionless units, as a bridge
stage outputs strain.
"""

from __future__ import annotations

import functools

import pint

ureg = pint.UnitRegistry(autoconvert_offset_to_baseunit=True)
ureg.define("strain = [] = ε")
ureg.define("microstrain = 1e-6 strain = µε = ue")
# Loggers speak of counts as units of raw codes.
ureg.define("code = [] = counts")


@functools.lru_cache(maxsize=None)
def parse_unit(text: str) -> pint.Unit:
    """Parse a unit string; raise ``ValueError`` with pint's reason if it is not a unit."""
    try:
        return ureg.Unit(text)
    except Exception as exc:  # pint raises several types; all mean "not a unit"
        raise ValueError(f"{text!r} is not a unit pint understands ({exc})") from None


def same_dimension(a: str, b: str) -> bool:
    return parse_unit(a).dimensionality == parse_unit(b).dimensionality


def affine_conversion(from_unit: str, to_unit: str) -> tuple[float, float]:
    """Return (scale, offset) such that value_in_to = scale * value_in_from + offset.

    Every conversion between units of one dimension that countmill meets is affine
    (temperatures included), so it is computed once at map load and applied in the hot loop
    as one multiply-add.
    """
    q0 = ureg.Quantity(0.0, parse_unit(from_unit)).to(parse_unit(to_unit)).magnitude
    q1 = ureg.Quantity(1.0, parse_unit(from_unit)).to(parse_unit(to_unit)).magnitude
    return float(q1 - q0), float(q0)
