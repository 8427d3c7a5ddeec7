"""Letter-designated thermocouples (types B, E, J, K, N, R, S, T) on ITS-90.

Three vectorised models on plain float64 arrays:

* :func:`thermocouple_emf`: hot-junction temperature [degC] -> emf [mV], reference
  junction at 0 degC, by the NIST ITS-90 reference functions;
* :func:`thermocouple_temperature`: emf [mV] (reference junction at 0 degC) -> temperature
  [degC], by the NIST inverse polynomial refined on the reference function (one
  second-order step, or Newton steps near a subrange limit), so that the result is the
  inverse of :func:`thermocouple_emf` within 2e-8 degC;
* :func:`cold_junction_compensated_temperature`: measured emf [mV] with the reference
  junction at a known temperature [degC] -> hot-junction temperature [degC].

Out of range gives NaN, never a clamped value. The coefficients are in
:mod:`countmill.sensors._nist_its90`.

Range of the inverse, per type
------------------------------
:func:`thermocouple_temperature` accepts an emf from E(t_low) to E(t_high), where t_low and
t_high are the temperature limits of NIST's published inverse function for the type and E
is the reference function. NIST prints these emf limits rounded to 0.001 mV; the unrounded
values are used so that every temperature from t_low to t_high converts back and forth
(NIST's print is not always rounded to nearest: type S at -50 degC is -0.23556 mV, printed
-0.235). An allowance of 1e-9 mV absorbs float64 round-off at the limits.

====  ==================  =========================  ==========================
type  inverse [degC]      inverse, NIST print [mV]   reference function [degC]
====  ==================  =========================  ==========================
B     250 ... 1820        0.291 ... 13.820           0 ... 1820
E     -200 ... 1000       -8.825 ... 76.373          -270 ... 1000
J     -210 ... 1200       -8.095 ... 69.553          -210 ... 1200
K     -200 ... 1372       -5.891 ... 54.886          -270 ... 1372
N     -200 ... 1300       -3.990 ... 47.513          -270 ... 1300
R     -50 ... 1768.1      -0.226 ... 21.103          -50 ... 1768.1
S     -50 ... 1768.1      -0.235 ... 18.693          -50 ... 1768.1
T     -200 ... 400        -5.603 ... 20.872          -270 ... 400
====  ==================  =========================  ==========================

Below -200 degC (E, K, N, T) NIST publishes no inverse; those emfs give NaN although the
reference function goes down to -270 degC. Type B starts at 250 degC: below about 40 degC its
emf is not single-valued (it dips below zero), and NIST's inverse starts at 0.291 mV.
"""

from __future__ import annotations

import bisect
import functools
from dataclasses import dataclass, field, replace

import numpy as np

from countmill.sensors import _nist_its90 as _nist

__all__ = [
    "THERMOCOUPLE_TYPES",
    "cold_junction_compensated_temperature",
    "inverse_emf_range",
    "nist_inverse_polynomial",
    "reference_range",
    "thermocouple_emf",
    "thermocouple_temperature",
]

#: The letter types, upper case.
THERMOCOUPLE_TYPES: tuple[str, ...] = _nist.TYPES

#: Float64 round-off allowance at the limits of the inverse range [mV] (1 pV, far below any
#: logger's resolution): E(t) - E(t_cj) + E(t_cj) may miss E(t) by a few ulp.
_EMF_ROUND_OFF_MV = 1e-9

#: Newton steps after the NIST inverse polynomial where one second-order step will not do
#: (see :func:`_temperature`). Its error is below 0.06 degC; one Newton step leaves up to
#: 1.5e-5 degC, two leave less than 2e-8 degC over every type's range.
_NEWTON_STEPS = 2

#: Spacing of the slope table [degC]: a power of two, so that every interval starts exactly
#: on a multiple of it from the whole-degree lower limit of the reference function.
_SLOPE_STEP = 0.0625

#: How far the refinement moves the first estimate at most [degC] (the inverse polynomial's
#: error, 0.06 degC, rounded up): estimates that far inside one subrange of the reference
#: function stay in it.
_STEP_REACH = 0.1


@dataclass(frozen=True)
class _TypeTables:
    t_min: float  # reference function [degC]
    t_max: float
    t_breaks: np.ndarray  # inner subrange limits of the reference function [degC]
    c: tuple[np.ndarray, ...]  # reference-function coefficients per subrange, ascending
    exponential: tuple[float, float, float] | None  # type K: a0, a1, a2 on t >= 0 degC
    t_inv_min: float  # temperature limits of the inverse function [degC]
    t_inv_max: float
    e_min: float  # accepted emf: E(t_inv_min) .. E(t_inv_max) [mV]
    e_max: float
    e_breaks: np.ndarray  # inner subrange limits of the inverse function [mV]
    d: tuple[np.ndarray, ...]  # inverse-function coefficients per subrange, ascending
    # E [mV] and dE/dt [mV/degC] at the start of every interval of _SLOPE_STEP from t_min,
    # and the change of dE/dt over the interval (see :func:`_from_table`)
    emf_at: np.ndarray = field(default_factory=lambda: np.zeros(0))
    slope_at: np.ndarray = field(default_factory=lambda: np.zeros(0))
    slope_change: np.ndarray = field(default_factory=lambda: np.zeros(0))


def _letter(type: str) -> str:
    letter = str(type).strip().upper()
    if letter not in _nist.REFERENCE:
        raise ValueError(
            f"thermocouple type {type!r} is not one of {', '.join(THERMOCOUPLE_TYPES)}"
        )
    return letter


@functools.lru_cache(maxsize=None)
def _tables(letter: str) -> _TypeTables:
    ref = _nist.REFERENCE[letter]
    inv = _nist.INVERSE[letter]
    partial = _TypeTables(
        t_min=ref[0].t_low,
        t_max=ref[-1].t_high,
        t_breaks=np.array([r.t_high for r in ref[:-1]]),
        c=tuple(np.array(r.c) for r in ref),
        exponential=_nist.K_EXPONENTIAL if letter == "K" else None,
        t_inv_min=inv[0].t_low,
        t_inv_max=inv[-1].t_high,
        e_min=np.nan,
        e_max=np.nan,
        # Where NIST's subranges overlap (R, S) the later, more accurate one wins.
        e_breaks=np.array([r.e_low for r in inv[1:]]),
        d=tuple(np.array(r.d) for r in inv),
    )
    e_low, e_high = _emf_and_slope(np.array([partial.t_inv_min, partial.t_inv_max]), partial)[0]
    # dE/dt at both ends of each interval, from the subrange polynomial that holds the
    # interval's middle: where a subrange limit falls on an interval's start (0 degC for most
    # types) the derivative steps, and an interval must not interpolate across the step
    count = int(np.ceil((partial.t_max - partial.t_min) / _SLOPE_STEP)) + 1
    start = partial.t_min + _SLOPE_STEP * np.arange(count, dtype=np.float64)
    piece = np.searchsorted(partial.t_breaks, start + _SLOPE_STEP / 2, side="left")
    emf_at, slope_at, slope_end = np.empty_like(start), np.empty_like(start), np.empty_like(start)
    for k in np.unique(piece).tolist():
        sel = piece == k
        emf_at[sel], slope_at[sel] = _subrange(start[sel], k, partial, slope=True)
        slope_end[sel] = _subrange(start[sel] + _SLOPE_STEP, k, partial, slope=True)[1]
    return replace(partial, e_min=float(e_low), e_max=float(e_high), emf_at=emf_at, slope_at=slope_at,
                   slope_change=slope_end - slope_at)


def _from_table(t: np.ndarray, tab: _TypeTables, derivatives: bool = True):
    r"""E [mV] near ``t`` from the table of spacing h = :data:`_SLOPE_STEP`, and (with
    ``derivatives``) dE/dt [mV/degC] and d2E/dt2 [mV/degC2]; None for those without.

    On the table interval from :math:`t_j` holding :math:`t = t_j + x`, dE/dt is
    interpolated linearly, :math:`S = S_j + x\, \Delta S_j / h`, d2E/dt2 is the interval's
    :math:`\Delta S_j / h`, and E is the value at its start plus the integral of that slope,

    .. math:: E(t_j + x) = E(t_j) + x\, S(t_j) + \frac{x^2}{2}\, \frac{\Delta S_j}{h}.

    Each interval takes the subrange polynomial of its middle, so none interpolates across
    the step of dE/dt at a subrange limit. The slope is within 2e-7 (relative) of the
    analytic one; E (neglected term below h^3 |d3E/dt3| / 12) within 1e-10 mV of the
    reference polynomial over each type's inverse range and 1e-9 mV down to -270 degC (about
    2e-9 degC of temperature in the inverse range, observed on dense grids). Only for points
    at least one interval away from every subrange limit and the range's ends, where E is
    smooth (see :func:`_near_limits`). NaN in, NaN out: a NaN casts to a huge negative index,
    which the clipped takes keep in the table, and its fraction stays NaN.
    """
    fraction = t - tab.t_min
    fraction *= 1.0 / _SLOPE_STEP
    with np.errstate(invalid="ignore"):
        whole = fraction.astype(np.intp)
    fraction -= whole
    change = np.take(tab.slope_change, whole, mode="clip")
    start = np.take(tab.slope_at, whole, mode="clip")
    emf = np.take(tab.emf_at, whole, mode="clip")
    # (without the derivatives, ``change`` itself is the scratch array)
    part = change * fraction if derivatives else np.multiply(change, fraction, out=change)
    part *= 0.5
    part += start  # the mean slope from the interval's start to t
    part *= fraction
    part *= _SLOPE_STEP
    emf += part
    if not derivatives:
        return emf, None, None
    np.multiply(change, fraction, out=part)
    part += start
    change *= 1.0 / _SLOPE_STEP
    return emf, part, change


def _horner(coefficients: np.ndarray, x: np.ndarray) -> np.ndarray:
    if len(coefficients) == 1:
        return np.full_like(x, coefficients[0])
    y = x * coefficients[-1]
    y += coefficients[-2]
    for c in coefficients[-3::-1]:
        y *= x
        y += c
    return y


def _emf_and_slope(t: np.ndarray, tab: _TypeTables, slope: bool = True, bounds=None) -> tuple[np.ndarray, np.ndarray | None]:
    """E(t) [mV] and dE/dt [mV/degC] (None unless ``slope``), each subrange's polynomial
    used past its ends too. ``bounds``: min and max of ``t`` when already known."""
    single = _one_subrange(t, tab.t_breaks, "left", bounds)
    if single is not None:  # all in one subrange: no sorting out
        return _subrange(t, single, tab, slope)
    piece = np.searchsorted(tab.t_breaks, t, side="left")
    e = np.empty_like(t)
    s = np.empty_like(t) if slope else None
    for k in range(len(tab.c)):
        sel = piece == k
        if not sel.any():
            continue
        e[sel], dp = _subrange(t[sel], k, tab, slope)
        if slope:
            s[sel] = dp
    return e, s


def _one_subrange(x: np.ndarray, breaks: np.ndarray, side: str, bounds=None) -> int | None:
    """The subrange every value of ``x`` falls in, when they all fall in one (no NaN)."""
    if x.size == 0:
        return None
    low, high = (x.min(), x.max()) if bounds is None else bounds
    if np.isnan(low) or np.isnan(high):
        return None
    # (a handful of limits: bisect on floats, no arrays made for two numbers)
    find = bisect.bisect_left if side == "left" else bisect.bisect_right
    limits = breaks.tolist()
    first, last = find(limits, float(low)), find(limits, float(high))
    return first if first == last else None


def _bounds_within(x: np.ndarray, low: float, high: float):
    """(min, max) of ``x`` when every value is within [low, high] (none NaN), else None."""
    if x.size == 0:
        return None
    bounds = x.min(), x.max()
    return bounds if bounds[0] >= low and bounds[1] <= high else None


def _subrange(x: np.ndarray, k: int, tab: _TypeTables, slope: bool) -> tuple[np.ndarray, np.ndarray | None]:
    """E and dE/dt on subrange k of the reference function (Horner, both together)."""
    c = tab.c[k]
    if slope:
        p = np.full_like(x, c[-1])
        dp = np.zeros_like(x)
        for ci in c[-2::-1]:
            dp *= x
            dp += p
            p *= x
            p += ci
    else:
        dp = None
        p = x * c[-1] if len(c) > 1 else np.full_like(x, c[-1])  # = c[-1] times x, one pass
        for n, ci in enumerate(c[-2::-1]):
            if n:
                p *= x
            p += ci
    if tab.exponential is not None and k == len(tab.c) - 1:
        a0, a1, a2 = tab.exponential
        offset = np.subtract(x, a2, out=np.empty_like(x))  # (an array even when x is 0-d)
        if slope:
            g = a0 * np.exp(a1 * np.square(offset))
            p += g
            dp += g * (2.0 * a1) * offset
        else:  # in place: one array for the whole term
            np.square(offset, out=offset)
            offset *= a1
            np.exp(offset, out=offset)
            offset *= a0
            p += offset
    return p, dp


def _as_float_array(x) -> np.ndarray:
    return np.array(x, dtype=np.float64, copy=True)


def _shape_out(out: np.ndarray):
    return out[()] if out.ndim == 0 else out


def reference_range(type: str) -> tuple[float, float]:
    """Temperature limits of the NIST reference function of a type [degC]."""
    tab = _tables(_letter(type))
    return tab.t_min, tab.t_max


def inverse_emf_range(type: str) -> tuple[float, float]:
    """Emf limits [mV] (reference junction at 0 degC) :func:`thermocouple_temperature` accepts.

    E(t_low) and E(t_high) at the temperature limits of NIST's inverse function, unrounded.
    """
    tab = _tables(_letter(type))
    return tab.e_min, tab.e_max


def thermocouple_emf(t, *, type: str):
    r"""Thermocouple emf from the NIST ITS-90 reference function.

    Parameters
    ----------
    t : array_like of float
        Hot-junction temperature [degC] (ITS-90).
    type : str
        Letter type: ``"B"``, ``"E"``, ``"J"``, ``"K"``, ``"N"``, ``"R"``, ``"S"`` or ``"T"``
        (lower case accepted).

    Returns
    -------
    emf : ndarray of float64 or float
        Thermoelectric emf [mV] with the reference junction at 0 degC; NaN where ``t`` is
        NaN or outside the type's reference range (see :func:`reference_range`).

    Notes
    -----
    On each temperature subrange of the type,

    .. math:: E = \sum_{i=0}^{n} c_i\, t^i,

    and for type K at and above 0 degC

    .. math:: E = \sum_{i=0}^{n} c_i\, t^i + a_0 \exp\left(a_1 (t - a_2)^2\right).

    A temperature on the limit between two subranges uses the lower one, so that
    E(0 degC) is exactly 0 for every type (type K's upper subrange gives -2e-9 mV there).

    References
    ----------
    .. [1] G. W. Burns, M. G. Scroger, G. F. Strouse, M. C. Croarkin, W. F. Guthrie,
       "Temperature-Electromotive Force Reference Functions and Tables for the
       Letter-Designated Thermocouple Types Based on the ITS-90", NIST Monograph 175, 1993.
    .. [2] H. Preston-Thomas, "The International Temperature Scale of 1990 (ITS-90)",
       Metrologia 27, 3-10, 1990.
    .. [3] NIST Standard Reference Database 60, NIST ITS-90 Thermocouple Database.
    """
    tab = _tables(_letter(type))
    t = _as_float_array(t)
    bounds = _bounds_within(t, tab.t_min, tab.t_max)
    if bounds is None:
        t[~((t >= tab.t_min) & (t <= tab.t_max))] = np.nan
    return _shape_out(_emf_and_slope(t, tab, slope=False, bounds=bounds)[0])


def thermocouple_temperature(emf, *, type: str):
    r"""Hot-junction temperature from thermocouple emf (reference junction at 0 degC).

    Parameters
    ----------
    emf : array_like of float
        Thermoelectric emf [mV] with the reference junction at 0 degC.
    type : str
        Letter type: ``"B"``, ``"E"``, ``"J"``, ``"K"``, ``"N"``, ``"R"``, ``"S"`` or ``"T"``
        (lower case accepted).

    Returns
    -------
    t : ndarray of float64 or float
        Temperature [degC] (ITS-90); NaN where ``emf`` is NaN or outside the range of the
        type's NIST inverse function (see :func:`inverse_emf_range` and the module notes).

    Notes
    -----
    A first estimate comes from NIST's approximate inverse polynomial for the emf subrange,

    .. math:: t_0 = \sum_{i=0}^{n} d_i\, E^i,

    whose published error is at most 0.06 degC. One step on the reference function
    :math:`E(t)` of :func:`thermocouple_emf`, with its first and second derivatives
    :math:`S = dE/dt` (Seebeck coefficient) and :math:`S' = d^2E/dt^2` at the first
    estimate (Newton's step with its second-order term, Chebyshev's method),

    .. math:: u = \frac{E(t_0) - E}{S(t_0)}, \qquad
              t_1 = t_0 - u - \frac{S'(t_0)}{2\, S(t_0)}\, u^2,

    then makes the result the inverse of the reference function: ``thermocouple_temperature(
    thermocouple_emf(t))`` returns ``t`` within 2e-8 degC over every type's inverse range.
    Where a first estimate lies within 0.1 degC of a limit between the reference
    function's subranges (its derivatives step there) or of its ends, two plain Newton steps
    :math:`t_{k+1} = t_k - (E(t_k) - E)/S(t_0)` on the polynomials are taken instead, to the
    same accuracy. The choice is made value by value: a value converts the same whatever
    else is in the array.
    (At a few subrange limits NIST's neighbouring reference polynomials do not quite meet,
    so an emf there has two inverses and either may come back: 3.5e-7 degC apart for type B
    at 630.615 degC, 1.3e-7 for type R and 2.3e-8 for type S at 1664.5 degC.)
    :math:`S` and :math:`S'` come from a table of the analytic derivative at intervals of
    1/16 degC, interpolated linearly (relative error of :math:`S` below 2e-7); for the single
    step, :math:`E(t_0)` comes from the same table (the reference function's value at the
    interval's start plus the integral of the interpolated slope, within 1e-10 mV of the
    polynomial), which saves a second polynomial evaluation.
    The result is kept within the inverse function's temperature limits.

    References
    ----------
    .. [1] G. W. Burns, M. G. Scroger, G. F. Strouse, M. C. Croarkin, W. F. Guthrie,
       "Temperature-Electromotive Force Reference Functions and Tables for the
       Letter-Designated Thermocouple Types Based on the ITS-90", NIST Monograph 175, 1993.
    .. [2] H. Preston-Thomas, "The International Temperature Scale of 1990 (ITS-90)",
       Metrologia 27, 3-10, 1990.
    .. [3] NIST Standard Reference Database 60, NIST ITS-90 Thermocouple Database.
    """
    return _shape_out(_temperature(_as_float_array(emf), _tables(_letter(type))))


def _temperature(e: np.ndarray, tab: _TypeTables) -> np.ndarray:
    """:func:`thermocouple_temperature` on an emf array [mV] it may overwrite.

    Each value's way (one second-order step, or Newton steps near a subrange limit) depends
    on that value alone, never on the others in the array: a conversion's result must not
    depend on how its records are cut into chunks.
    """
    shape = e.shape
    e = e.reshape(-1)  # (one dimension: in-place steps work on a single value too)
    bounds = _bounds_within(e, tab.e_min - _EMF_ROUND_OFF_MV, tab.e_max + _EMF_ROUND_OFF_MV)
    if bounds is None:
        e[~((e >= tab.e_min - _EMF_ROUND_OFF_MV) & (e <= tab.e_max + _EMF_ROUND_OFF_MV))] = np.nan
    t0 = _inverse_polynomial(e, tab, bounds)
    # one step with its second-order term: u (1 + S'/(2S) u), u the Newton step (the term is
    # below 2e-5 degC; what it leaves is below 2e-8 degC), E(t0), S and S' from the table.
    # It holds where t0 lies _STEP_REACH inside a subrange of the reference function, which
    # the step (less than 0.06 degC) does not leave, and where E is smooth.
    u, s, curvature = _from_table(t0, tab)
    u -= e
    u /= s
    curvature /= s
    curvature *= 0.5
    curvature *= u
    curvature += 1.0
    u *= curvature
    near = _near_limits(t0, tab)
    if near is not None:  # (their first estimates, before t0 becomes the result)
        tn, en, sn = t0[near], e[near], s[near]
    t = t0
    t -= u
    if near is not None:
        # near a limit dE/dt steps: Newton steps on the reference polynomials, all with the
        # slope at the first estimate (over the hundredths of a degree they move it changes
        # by far less than the error left needs)
        for _ in range(_NEWTON_STEPS):
            f, _unused = _emf_and_slope(tn, tab, slope=False)
            f -= en
            f /= sn
            tn -= f
        t[near] = tn
    np.clip(t, tab.t_inv_min, tab.t_inv_max, out=t)
    return t.reshape(shape)


def _near_limits(t: np.ndarray, tab: _TypeTables) -> np.ndarray | None:
    """Indices into ``t.ravel()`` of the values within :data:`_STEP_REACH` of a subrange
    limit or an end of the reference function (where the table does not hold), or None
    when there are none. NaN is near nothing.

    The shortcut for an array with none near makes exactly the per-value comparisons, on
    its smallest and largest value (a rounded difference is monotonic, so they stand for
    all): whether a value counts as near never depends on the others.
    """
    if t.size == 0:
        return None
    low, high = float(t.min()), float(t.max())
    if low >= tab.t_min + _STEP_REACH and high <= tab.t_max - _STEP_REACH:  # (NaN: False)
        for limit in tab.t_breaks.tolist():
            if high < limit:
                if abs(high - limit) < _STEP_REACH:
                    break
            elif low > limit:
                if abs(low - limit) < _STEP_REACH:
                    break
            else:
                break
        else:
            return None
    t = t.reshape(-1)
    with np.errstate(invalid="ignore"):
        near = (t < tab.t_min + _STEP_REACH) | (t > tab.t_max - _STEP_REACH)
        for limit in tab.t_breaks.tolist():
            near |= np.abs(t - limit) < _STEP_REACH
    index = np.flatnonzero(near)
    return index if len(index) else None


def _inverse_polynomial(e: np.ndarray, tab: _TypeTables, bounds=None) -> np.ndarray:
    """NIST's approximate inverse t(E) [degC], no range check (NaN in, NaN out)."""
    single = _one_subrange(e, tab.e_breaks, "right", bounds)
    if single is not None:  # all in one subrange
        return _horner(tab.d[single], e)
    piece = np.searchsorted(tab.e_breaks, e, side="right")
    t = np.empty_like(e)
    for k, d in enumerate(tab.d):
        sel = piece == k
        if sel.any():
            t[sel] = _horner(d, e[sel])
    return t


def nist_inverse_polynomial(emf, *, type: str):
    """NIST's approximate inverse polynomial alone, without the Newton refinement.

    Parameters
    ----------
    emf : array_like of float
        Thermoelectric emf [mV] with the reference junction at 0 degC.
    type : str
        Letter type (``"B"`` ... ``"T"``, lower case accepted).

    Returns
    -------
    t : ndarray of float64 or float
        Temperature [degC] from the published inverse polynomial, within NIST's stated
        error band of :func:`thermocouple_temperature`; NaN outside the inverse range.

    Notes
    -----
    :math:`t = \\sum_{i=0}^{n} d_i E^i` on the emf subrange containing E. Kept for checking
    the transcribed coefficients against NIST's published error bands.

    References
    ----------
    .. [1] NIST Monograph 175, 1993, inverse functions on ITS-90.
    """
    tab = _tables(_letter(type))
    e = _as_float_array(emf)
    e[~((e >= tab.e_min - _EMF_ROUND_OFF_MV) & (e <= tab.e_max + _EMF_ROUND_OFF_MV))] = np.nan
    return _shape_out(_inverse_polynomial(e, tab))


def cold_junction_compensated_temperature(emf_measured_mV, t_cold_junction, *, type: str):
    r"""Hot-junction temperature from the emf measured with the cold junction at a known temperature.

    Parameters
    ----------
    emf_measured_mV : array_like of float
        Emf measured at the terminals [mV], cold (reference) junction at ``t_cold_junction``.
    t_cold_junction : array_like of float
        Cold-junction temperature [degC] (ITS-90); broadcast against ``emf_measured_mV``.
    type : str
        Letter type (``"B"`` ... ``"T"``, lower case accepted).

    Returns
    -------
    t : ndarray of float64 or float
        Hot-junction temperature [degC]; NaN where an input is NaN, where
        ``t_cold_junction`` is outside the reference range or where the compensated emf is
        outside the inverse range.

    Notes
    -----
    With the reference function :math:`E(t)` of :func:`thermocouple_emf` and its inverse
    :math:`E^{-1}` (:func:`thermocouple_temperature`),

    .. math:: t = E^{-1}\left(E_\mathrm{measured} + E(t_\mathrm{cj})\right).

    For the values of an array ``t_cold_junction`` that lie 0.1 degC inside a subrange of
    the reference function (a terminal block near room temperature), :math:`E(t_\mathrm{cj})`
    is taken from the slope table of :func:`thermocouple_temperature`: within 1e-10 mV of the
    polynomial from -200 degC up, 1e-9 mV below. Other values, and a single number, take
    the polynomial. The choice is made value by value.

    References
    ----------
    .. [1] G. W. Burns et al., NIST Monograph 175, 1993.
    .. [2] H. Preston-Thomas, "The International Temperature Scale of 1990 (ITS-90)",
       Metrologia 27, 3-10, 1990.
    """
    tab = _tables(_letter(type))
    t_cj = np.asarray(t_cold_junction, dtype=np.float64)
    if t_cj.ndim:
        # E(t_cj) from the table where t_cj lies inside a subrange (a terminal block near room
        # temperature), from the polynomials elsewhere: decided value by value
        e_cj = _from_table(t_cj, tab, derivatives=False)[0]
        near = _near_limits(t_cj, tab)
        if near is not None:  # (indices into the flattened arrays)
            np.put(e_cj, near, thermocouple_emf(t_cj.reshape(-1)[near], type=type))
    else:
        e_cj = thermocouple_emf(t_cj, type=type)
    measured = np.asarray(emf_measured_mV, dtype=np.float64)
    if e_cj.shape == np.broadcast_shapes(e_cj.shape, measured.shape):  # (a fresh array: add in place)
        e = e_cj
        e += measured
    else:
        e = np.add(measured, e_cj)
    return _shape_out(_temperature(np.atleast_1d(e), tab).reshape(e.shape))
