"""Platinum resistance thermometers: the Callendar–Van Dusen equation of IEC 60751."""

from __future__ import annotations

import numpy as np

#: IEC 60751 coefficients of industrial platinum (alpha = 0.00385055 /K).
IEC60751_A = 3.9083e-3
IEC60751_B = -5.775e-7
IEC60751_C = -4.183e-12
#: Temperature range the standard defines the equation over [degC].
T_MIN = -200.0
T_MAX = 850.0

_NEWTON_STEPS = 8


def rtd_resistance(
    t, *, r0: float = 100.0, a: float = IEC60751_A, b: float = IEC60751_B, c: float = IEC60751_C
) -> np.ndarray:
    """Resistance of a platinum RTD at a temperature.

    Parameters
    ----------
    t : array_like
        Temperature [degC].
    r0 : float
        Resistance at 0 °C [ohm] (100 for Pt100, 1000 for Pt1000).
    a : float
        Coefficient A [1/degC].
    b : float
        Coefficient B [1/degC^2].
    c : float
        Coefficient C [1/degC^4], used below 0 °C only.

    Returns
    -------
    ndarray of float64
        Resistance [ohm], same shape as ``t``; NaN outside −200 … 850 °C and for NaN.

    Notes
    -----
    −200 °C ≤ t < 0 °C: R = R0 · (1 + A·t + B·t² + C·(t − 100)·t³)

    0 °C ≤ t ≤ 850 °C: R = R0 · (1 + A·t + B·t²)

    References
    ----------
    IEC 60751:2008, Industrial platinum resistance thermometers and platinum temperature
    sensors, clause 4.2 (temperature/resistance relationship).
    """
    t = np.asarray(t, dtype=np.float64)
    with np.errstate(invalid="ignore", over="ignore"):
        cold = np.where(t < 0.0, c * (t - 100.0) * (t * t * t), 0.0)
        r = r0 * (1.0 + t * (a + b * t) + cold)
    inside = (t >= T_MIN) & (t <= T_MAX)
    return np.asarray(np.where(inside, r, np.nan), dtype=np.float64)


def rtd_temperature(
    r, *, r0: float = 100.0, a: float = IEC60751_A, b: float = IEC60751_B, c: float = IEC60751_C
) -> np.ndarray:
    """Temperature of a platinum RTD from its resistance: the exact inverse of
    :func:`rtd_resistance`.

    Parameters
    ----------
    r : array_like
        Resistance [ohm].
    r0 : float
        Resistance at 0 °C [ohm].
    a : float
        Coefficient A [1/degC].
    b : float
        Coefficient B [1/degC^2].
    c : float
        Coefficient C [1/degC^4].

    Returns
    -------
    ndarray of float64
        Temperature [degC], same shape as ``r``; NaN where the resistance lies outside
        R(−200 °C) … R(850 °C), and for NaN.

    Notes
    -----
    R ≥ R0: t = (−A + √(A² − 4B·(1 − R/R0))) / (2B), the root of the quadratic.

    R < R0: the same root is the first guess; Newton steps on the quartic
    f(t) = 1 + A·t + B·t² + C·(t − 100)·t³ − R/R0, f'(t) = A + 2B·t + C·(4t³ − 300t²),
    run on the whole array at once, bring it within 1e-9 °C of the root.

    References
    ----------
    IEC 60751:2008, Industrial platinum resistance thermometers and platinum temperature
    sensors, clause 4.2 (temperature/resistance relationship).
    """
    r = np.asarray(r, dtype=np.float64)
    r_low = float(rtd_resistance(T_MIN, r0=r0, a=a, b=b, c=c))
    r_high = float(rtd_resistance(T_MAX, r0=r0, a=a, b=b, c=c))
    flat = r.ravel()
    inside = (flat >= r_low) & (flat <= r_high)
    ratio = np.where(inside, flat / r0, 1.0)
    with np.errstate(invalid="ignore"):
        if b == 0.0:
            t = (ratio - 1.0) / a
        else:
            t = (-a + np.sqrt(a * a - 4.0 * b * (1.0 - ratio))) / (2.0 * b)
    cold = ratio < 1.0
    if c != 0.0 and np.any(cold):
        tc, target = t[cold], ratio[cold]
        constant = 1.0 - target
        for _ in range(_NEWTON_STEPS):
            # Horner forms of f and f' (multiplications only: much faster than ** on arrays)
            f = (((c * tc - 100.0 * c) * tc + b) * tc + a) * tc + constant
            slope = ((4.0 * c * tc - 300.0 * c) * tc + 2.0 * b) * tc + a
            step = f / slope
            tc = tc - step
            if np.max(np.abs(step)) < 1e-10:
                break
        t[cold] = tc
    # Only rounding can put t a hair past a range limit: the resistance itself was checked.
    t = np.clip(t, T_MIN, T_MAX) + 0.0  # + 0.0 turns -0.0 at R0 into 0.0
    return np.where(inside, t, np.nan).reshape(r.shape)
