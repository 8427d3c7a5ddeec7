"""NTC thermistors: the beta (B-parameter) model and the Steinhart–Hart equation."""

from __future__ import annotations

from typing import Sequence

import numpy as np

#: 0 °C in kelvin [K] (ITS-90 / SI definition of the degree Celsius).
ZERO_CELSIUS = 273.15
#: Reference temperature of the beta model, 25 °C [K].
T25 = ZERO_CELSIUS + 25.0


def _usable_resistance(r: np.ndarray) -> np.ndarray:
    return np.isfinite(r) & (r > 0)


def beta_temperature(r, *, r25: float, beta: float) -> np.ndarray:
    """Thermistor temperature by the beta (B-parameter) model.

    Parameters
    ----------
    r : array_like
        Thermistor resistance [ohm].
    r25 : float
        Resistance at 25 °C [ohm], > 0.
    beta : float
        B value [K], > 0.

    Returns
    -------
    ndarray of float64
        Temperature [degC], same shape as ``r``; NaN where ``r`` is NaN, zero, negative
        or infinite, or where the model gives no positive absolute temperature.

    Notes
    -----
    1/T = 1/T25 + ln(R / R25) / B, T in kelvin, T25 = 298.15 K; the result is T − 273.15.
    It is the Steinhart–Hart equation with a = 1/T25 − ln(R25)/B, b = 1/B, c = 0.

    References
    ----------
    Common practice: the B-parameter equation of NTC thermistor data sheets
    (B defined from the resistances at two temperatures, e.g. B25/85).
    """
    r = np.asarray(r, dtype=np.float64)
    ok = _usable_resistance(r)
    with np.errstate(divide="ignore", invalid="ignore"):
        inverse_t = 1.0 / T25 + np.log(np.where(ok, r, 1.0) / r25) / beta
        t = 1.0 / inverse_t - ZERO_CELSIUS
    return np.asarray(np.where(ok & (inverse_t > 0), t, np.nan), dtype=np.float64)


def steinhart_hart_temperature(r, *, a: float, b: float, c: float) -> np.ndarray:
    """Thermistor temperature by the Steinhart–Hart equation.

    Parameters
    ----------
    r : array_like
        Thermistor resistance [ohm].
    a : float
        Coefficient a [1/K].
    b : float
        Coefficient b [1/K].
    c : float
        Coefficient c [1/K].

    Returns
    -------
    ndarray of float64
        Temperature [degC], same shape as ``r``; NaN where ``r`` is NaN, zero, negative or
        infinite, or where the equation gives no positive absolute temperature.

    Notes
    -----
    1/T = a + b · ln R + c · (ln R)^3, T in kelvin, R in ohm; the result is T − 273.15.

    References
    ----------
    J. S. Steinhart and S. R. Hart, "Calibration curves for thermistors",
    Deep-Sea Research 15 (1968), 497–503.
    """
    r = np.asarray(r, dtype=np.float64)
    ok = _usable_resistance(r)
    ln_r = np.log(np.where(ok, r, 1.0))
    inverse_t = a + ln_r * (b + c * ln_r * ln_r)
    with np.errstate(divide="ignore", invalid="ignore"):
        t = 1.0 / inverse_t - ZERO_CELSIUS
    return np.asarray(np.where(ok & (inverse_t > 0), t, np.nan), dtype=np.float64)


def steinhart_hart_coefficients(points: Sequence[Sequence[float]]) -> tuple[float, float, float]:
    """Steinhart–Hart coefficients through three (temperature, resistance) points.

    Parameters
    ----------
    points : sequence of three (float, float)
        (temperature [degC], resistance [ohm]) pairs: three different temperatures above
        −273.15 °C, three different positive resistances.

    Returns
    -------
    a, b, c : float
        Coefficients [1/K] such that the equation passes exactly through the three points.

    Notes
    -----
    Solves the 3 × 3 linear system 1/T_k = a + b · L_k + c · L_k^3, L_k = ln R_k, k = 1, 2, 3.

    References
    ----------
    J. S. Steinhart and S. R. Hart, "Calibration curves for thermistors",
    Deep-Sea Research 15 (1968), 497–503.
    """
    arr = np.asarray(points, dtype=np.float64)
    if arr.shape != (3, 2):
        raise ValueError("points must be exactly three [degC, ohm] pairs")
    if not np.all(np.isfinite(arr)):
        raise ValueError("points must be finite numbers")
    t_kelvin = arr[:, 0] + ZERO_CELSIUS
    r = arr[:, 1]
    if np.any(t_kelvin <= 0):
        raise ValueError("point temperatures must be above absolute zero (-273.15 degC)")
    if np.any(r <= 0):
        raise ValueError("point resistances must be positive")
    if len(set(arr[:, 0])) < 3 or len(set(r)) < 3:
        raise ValueError("points need three different temperatures and three different resistances")
    ln_r = np.log(r)
    matrix = np.column_stack([np.ones(3), ln_r, ln_r**3])
    try:
        a, b, c = np.linalg.solve(matrix, 1.0 / t_kelvin)
    except np.linalg.LinAlgError:
        raise ValueError("points do not determine Steinhart-Hart coefficients") from None
    return float(a), float(b), float(c)


def steinhart_hart_resistance(t, *, a: float, b: float, c: float) -> np.ndarray:
    """Thermistor resistance at a temperature: the inverse of the Steinhart–Hart equation.

    Parameters
    ----------
    t : array_like
        Temperature [degC].
    a : float
        Coefficient a [1/K].
    b : float
        Coefficient b [1/K].
    c : float
        Coefficient c [1/K].

    Returns
    -------
    ndarray of float64
        Resistance [ohm], same shape as ``t``; NaN where ``t`` is NaN or at or below
        absolute zero, or where the cubic has no single real root.

    Notes
    -----
    With x = ln R the equation is the depressed cubic c·x³ + b·x + (a − 1/T) = 0.
    For c ≠ 0, with y = (a − 1/T) / (2c) and s = √((b / (3c))³ + y²) (Cardano):
    x = ∛(s − y) − ∛(s + y). For c = 0: x = (1/T − a) / b. One Newton step on the cubic
    then removes rounding error. R = exp(x).

    References
    ----------
    J. S. Steinhart and S. R. Hart, "Calibration curves for thermistors",
    Deep-Sea Research 15 (1968), 497–503; Cardano's formula for the depressed cubic.
    """
    t = np.asarray(t, dtype=np.float64)
    t_kelvin = t + ZERO_CELSIUS
    ok = t_kelvin > 0
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        inverse_t = 1.0 / np.where(ok, t_kelvin, 1.0)
        if c == 0.0:
            x = (inverse_t - a) / b
        else:
            y = (a - inverse_t) / (2.0 * c)
            s = np.sqrt((b / (3.0 * c)) ** 3 + y**2)
            x = np.cbrt(s - y) - np.cbrt(s + y)
            x = x - (a + b * x + c * x**3 - inverse_t) / (b + 3.0 * c * x**2)
        r = np.exp(x)
    return np.asarray(np.where(ok & np.isfinite(r), r, np.nan), dtype=np.float64)
