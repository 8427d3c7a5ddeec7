"""Straight line, polynomial and table, checked against pint, numpy and scipy as references."""

import numpy as np
import pytest
from numpy.polynomial import polynomial as npoly
from scipy.interpolate import interp1d

from countmill.sensors.curves import interpolate, linear, polynomial, table, table_arrays
from countmill.units import ureg


def test_linear_celsius_to_fahrenheit_matches_pint():
    # Reference: pint's degC -> degF conversion; 100 degC = 212 degF and -40 degC = -40 degF
    # (definition of the Fahrenheit scale; common practice, no source).
    celsius = np.array([-40.0, 0.0, 37.0, 100.0])
    expected = ureg.Quantity(celsius, "degC").to("degF").magnitude
    np.testing.assert_allclose(linear(celsius, slope=1.8, intercept=32.0), expected, rtol=1e-12)
    assert linear(100.0, slope=1.8, intercept=32.0) == pytest.approx(212.0)
    assert linear(-40.0, slope=1.8, intercept=32.0) == pytest.approx(-40.0)


def test_linear_nan_scalar_shape():
    assert np.isnan(linear(np.nan, slope=2.0, intercept=1.0))
    out = linear(np.ones((2, 3)), slope=2.0, intercept=1.0)
    assert out.shape == (2, 3) and out.dtype == np.float64
    assert np.ndim(linear(1, slope=2, intercept=0)) == 0


@pytest.mark.parametrize("coefficients", [[3.0], [1.0, -2.0], [1.0, -2.0, 0.5, 3e-3], [0.0, 0.0, 0.0, 0.0, 1e-6]])
def test_polynomial_matches_numpy_polyval(coefficients):
    # Reference: numpy.polynomial.polynomial.polyval (ascending powers).
    x = np.linspace(-50.0, 150.0, 41)
    np.testing.assert_allclose(polynomial(x, coefficients=coefficients), npoly.polyval(x, coefficients), rtol=1e-12, atol=1e-12)


def test_polynomial_nan_scalar_and_empty():
    out = polynomial([np.nan, 2.0], coefficients=[1.0, 1.0])
    assert np.isnan(out[0]) and out[1] == 3.0
    assert np.ndim(polynomial(2.0, coefficients=[1.0, 1.0])) == 0
    with pytest.raises(ValueError):
        polynomial(1.0, coefficients=[])


POINTS = [[0.0, 0.0], [1.0, 10.0], [2.5, 12.0], [4.0, -3.0]]


def test_table_matches_scipy_interp1d_inside_and_is_nan_outside():
    # Reference: scipy.interpolate.interp1d, linear, no extrapolation (NaN outside).
    xs = np.array([p[0] for p in POINTS])
    ys = np.array([p[1] for p in POINTS])
    reference = interp1d(xs, ys, kind="linear", bounds_error=False, fill_value=np.nan)
    x = np.linspace(-1.0, 5.0, 121)
    np.testing.assert_allclose(table(x, points=POINTS), reference(x), rtol=1e-12, equal_nan=True)


def test_table_end_points_are_inside():
    out = table([0.0, 4.0, -1e-12, 4.0 + 1e-12, np.nan], points=POINTS)
    assert out[0] == 0.0 and out[1] == -3.0
    assert np.all(np.isnan(out[2:]))
    assert np.isnan(table(np.inf, points=POINTS))


def test_table_shape_and_interpolate():
    xs, ys = table_arrays(POINTS)
    x = np.full((3, 2), 0.5)
    assert table(x, points=POINTS).shape == (3, 2)
    np.testing.assert_array_equal(interpolate(x, xs, ys), table(x, points=POINTS))


@pytest.mark.parametrize(
    "points, message",
    [
        ([[0.0, 0.0], [0.0, 1.0]], "strictly increasing"),
        ([[0.0, 0.0], [2.0, 1.0], [1.0, 2.0]], "strictly increasing"),
        ([[0.0, 0.0]], "at least two"),
        ([[0.0, 0.0], [1.0, float("nan")]], "finite"),
        ([[0.0, 0.0, 1.0], [1.0, 2.0, 3.0]], "pairs"),
    ],
)
def test_bad_tables_raise_with_a_reason(points, message):
    with pytest.raises(ValueError, match=message):
        table(0.5, points=points)
