"""4–20 mA current loops: shunt current, scaling, and the NAMUR NE 43 signal levels.

NAMUR NE 43 (edition 2003-02-03) divides the loop current into

* measurement information: 3.8 mA ≤ I ≤ 20.5 mA (4–20 mA plus a little under- and over-range);
* failure information: I ≤ 3.6 mA or I ≥ 21.0 mA;
* between the two (3.6 < I < 3.8 mA, 20.5 < I < 21.0 mA): neither; a healthy transmitter
  does not drive the loop there. countmill calls these readings *marginal*.

Boundaries, as countmill's contract fixes them: a fault is *below* 3.6 mA or *above*
21.0 mA; 3.6 mA up to (not including) 3.8 mA and above 20.5 mA up to 21.0 mA are marginal;
exactly 3.8 mA and exactly 20.5 mA are measurement levels. A current within
:data:`LEVEL_TOLERANCE` of a level counts as at that level, so that a nominal 0.9 V across
250 Ω, whose quotient rounds a hair below 3.6 mA in floating point, lands where the
engineer expects.
"""

from __future__ import annotations

import numpy as np

#: NAMUR NE 43 levels [A].
NE43_FAILURE_LOW = 3.6e-3
NE43_MEASURE_LOW = 3.8e-3
NE43_MEASURE_HIGH = 20.5e-3
NE43_FAILURE_HIGH = 21.0e-3
#: Loop currents at the bottom and top of the scale [A].
SCALE_LOW = 4.0e-3
SCALE_HIGH = 20.0e-3
#: Currents closer than this to a level count as at the level [A] (1 pA: far below any
#: loop receiver's resolution, far above float64 rounding at 20 mA).
LEVEL_TOLERANCE = 1e-12


def loop_current(v, *, shunt: float) -> np.ndarray:
    """Loop current from the voltage across a shunt resistor.

    Parameters
    ----------
    v : array_like
        Voltage across the shunt [V].
    shunt : float
        Shunt resistance [ohm], > 0 (250 Ω turns 4–20 mA into 1–5 V).

    Returns
    -------
    ndarray of float64
        Loop current [A], same shape as ``v``.

    Notes
    -----
    I = V / R_shunt

    References
    ----------
    Ohm's law.
    """
    v = np.asarray(v, dtype=np.float64)
    return np.asarray(v / shunt, dtype=np.float64)


def loop_value(current, *, low: float, high: float) -> np.ndarray:
    """Scaled value of a 4–20 mA loop: linear, ``low`` at 4 mA, ``high`` at 20 mA.

    Parameters
    ----------
    current : array_like
        Loop current [A].
    low : float
        Value at 4 mA [out].
    high : float
        Value at 20 mA [out].

    Returns
    -------
    ndarray of float64
        Scaled value [out], same shape as ``current``. Currents outside 4–20 mA are scaled
        along the same line (no clamp); :func:`ne43_levels` says which of them to doubt.

    Notes
    -----
    value = low + (I − 4 mA) / (16 mA) · (high − low)

    References
    ----------
    IEC 60381-1:1982, Analogue signals for process control systems, part 1: direct current
    signals (the 4 to 20 mA range).
    """
    current = np.asarray(current, dtype=np.float64)
    fraction = (current - SCALE_LOW) / (SCALE_HIGH - SCALE_LOW)
    return np.asarray(low + fraction * (high - low), dtype=np.float64)


def ne43_levels(current) -> tuple[np.ndarray, np.ndarray]:
    """Classify loop currents by the NAMUR NE 43 signal levels.

    Parameters
    ----------
    current : array_like
        Loop current [A].

    Returns
    -------
    fault : ndarray of bool
        Failure information: I < 3.6 mA or I > 21.0 mA [1].
    marginal : ndarray of bool
        Between failure and measurement levels: 3.6 mA ≤ I < 3.8 mA or
        20.5 mA < I ≤ 21.0 mA [1].
        Both are False for NaN and for 3.8 mA ≤ I ≤ 20.5 mA.

    Notes
    -----
    Comparisons allow :data:`LEVEL_TOLERANCE` (1 pA) either side of a level:
    fault = I < 3.6 mA − tol or I > 21.0 mA + tol;
    marginal = not fault and (I < 3.8 mA − tol or I > 20.5 mA + tol).

    References
    ----------
    NAMUR Recommendation NE 43, Standardization of the signal level for the failure
    information of digital transmitters, edition 2003-02-03.
    """
    current = np.asarray(current, dtype=np.float64)
    tol = LEVEL_TOLERANCE
    fault = (current < NE43_FAILURE_LOW - tol) | (current > NE43_FAILURE_HIGH + tol)
    outside_measure = (current < NE43_MEASURE_LOW - tol) | (current > NE43_MEASURE_HIGH + tol)
    marginal = outside_measure & ~fault
    return fault, marginal
