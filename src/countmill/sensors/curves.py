"""General transfer curves: straight line, polynomial, piecewise-linear table.

These take and give any unit; the channel map says which. ``[any]`` below means
"whatever unit the map gives the input" and ``[out]`` "whatever unit it gives the output".
"""

from __future__ import annotations

from typing import Sequence

import numpy as np


def linear(x, *, slope: float, intercept: float = 0.0) -> np.ndarray:
    """Straight line y = slope · x + intercept.

    Parameters
    ----------
    x : array_like
        Input [any].
    slope : float
        Output per unit of input [out/any].
    intercept : float
        Output at x = 0 [out].

    Returns
    -------
    ndarray of float64
        y [out], same shape as ``x``.

    Notes
    -----
    y = slope · x + intercept

    References
    ----------
    Common practice: two-point (span and offset) linear scaling of a transducer.
    """
    x = np.asarray(x, dtype=np.float64)
    return np.asarray(slope * x + intercept, dtype=np.float64)


def polynomial(x, *, coefficients: Sequence[float]) -> np.ndarray:
    """Polynomial in x, coefficients in ascending powers.

    Parameters
    ----------
    x : array_like
        Input [any].
    coefficients : sequence of float
        c0, c1, …, cn: y = c0 + c1·x + … + cn·x^n [out/any^k for the k-th].

    Returns
    -------
    ndarray of float64
        y [out], same shape as ``x``.

    Notes
    -----
    y = Σ_k c_k · x^k, evaluated by Horner's scheme.

    References
    ----------
    Common practice: polynomial transfer functions of transducers, coefficients in
    ascending powers (the order used by ``numpy.polynomial.polynomial.polyval``).
    """
    coefficients = [float(c) for c in coefficients]
    if not coefficients:
        raise ValueError("coefficients is empty: at least one coefficient is needed")
    x = np.asarray(x, dtype=np.float64)
    y = np.full(x.shape, coefficients[-1])
    for c in reversed(coefficients[:-1]):
        y = y * x + c
    return np.asarray(y, dtype=np.float64)


def table_arrays(points: Sequence[Sequence[float]]) -> tuple[np.ndarray, np.ndarray]:
    """Check a table's points and split them into x and y arrays.

    Parameters
    ----------
    points : sequence of (float, float)
        (x [any], y [out]) pairs, at least two, x strictly increasing, all finite.

    Returns
    -------
    xs : ndarray of float64
        Break points [any].
    ys : ndarray of float64
        Values at the break points [out].

    Notes
    -----
    Raises ``ValueError`` if x is not strictly increasing: x[k] < x[k+1] for every k.

    References
    ----------
    Common practice: a calibration table of (input, output) pairs read by linear
    interpolation.
    """
    arr = np.asarray(points, dtype=np.float64)
    if arr.ndim != 2 or arr.shape[1] != 2:
        raise ValueError("points must be a list of [x, y] pairs")
    if arr.shape[0] < 2:
        raise ValueError("points needs at least two [x, y] pairs")
    if not np.all(np.isfinite(arr)):
        raise ValueError("points must be finite numbers")
    steps = np.diff(arr[:, 0])
    if np.any(steps <= 0):
        k = int(np.argmax(steps <= 0))
        raise ValueError(
            f"x must be strictly increasing: point {k + 2} has x = {arr[k + 1, 0]:g} "
            f"after x = {arr[k, 0]:g}"
        )
    return arr[:, 0].copy(), arr[:, 1].copy()


def table(x, *, points: Sequence[Sequence[float]]) -> np.ndarray:
    """Piecewise-linear interpolation in a table of points; NaN outside the table.

    Parameters
    ----------
    x : array_like
        Input [any].
    points : sequence of (float, float)
        (x [any], y [out]) pairs, x strictly increasing, at least two pairs.

    Returns
    -------
    ndarray of float64
        y [out], same shape as ``x``; NaN where x lies outside [x_first, x_last]
        (the end points themselves are inside) or x is NaN.

    Notes
    -----
    For x_k ≤ x ≤ x_(k+1): y = y_k + (x − x_k) · (y_(k+1) − y_k) / (x_(k+1) − x_k).
    No extrapolation.

    References
    ----------
    Common practice: linear interpolation in a calibration table.
    """
    xs, ys = table_arrays(points)
    return interpolate(x, xs, ys)


def interpolate(x, xs: np.ndarray, ys: np.ndarray) -> np.ndarray:
    """:func:`table` on break points already checked by :func:`table_arrays`.

    Parameters
    ----------
    x : array_like
        Input [any].
    xs : ndarray of float64
        Break points, strictly increasing [any].
    ys : ndarray of float64
        Values at the break points [out].

    Returns
    -------
    ndarray of float64
        y [out], NaN outside [xs[0], xs[-1]].

    Notes
    -----
    Same equation as :func:`table`.

    References
    ----------
    Common practice: linear interpolation in a calibration table.
    """
    x = np.asarray(x, dtype=np.float64)
    y = np.interp(x, xs, ys, left=np.nan, right=np.nan)
    return np.asarray(np.where(np.isnan(x), np.nan, y), dtype=np.float64)
