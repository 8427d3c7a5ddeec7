"""Platinum RTDs, IEC 60751 Callendar-Van Dusen equation.

Reference values: IEC 60751:2008, Pt100 reference table (resistance printed to 0.01 Ohm);
values from memory, cross-checked against a vendor's reprint of the same table. The table is
itself computed from the standard's equation, so a printed value agrees with the exact one
to +-0.005 Ohm (rounding). The four-decimal values at +-100 degC are quoted to 0.0001 Ohm.
"""

import numpy as np
import pytest
from scipy.optimize import brentq

from countmill.sensors.rtd import rtd_resistance, rtd_temperature

# IEC 60751:2008, Pt100 table, [degC, Ohm] to 0.01 Ohm (from memory).
IEC60751_PT100 = [
    (-200.0, 18.52),
    (-100.0, 60.26),
    (-50.0, 80.31),
    (-40.0, 84.27),
    (0.0, 100.00),
    (25.0, 109.73),
    (50.0, 119.40),
    (100.0, 138.51),
    (200.0, 175.86),
    (300.0, 212.05),
    (400.0, 247.09),
    (500.0, 280.98),
    (600.0, 313.71),
    (700.0, 345.28),
    (800.0, 375.70),
    (850.0, 390.48),
]
TABLE_T = np.array([t for t, _ in IEC60751_PT100])
TABLE_R = np.array([r for _, r in IEC60751_PT100])


def test_resistance_matches_iec60751_table():
    np.testing.assert_allclose(rtd_resistance(TABLE_T), TABLE_R, atol=0.005 + 1e-9)


def test_four_decimal_values_at_plus_minus_100_degc():
    # IEC 60751: 100 degC -> 138.5055 Ohm, -100 degC -> 60.2558 Ohm, 0 degC -> 100 Ohm exactly.
    assert rtd_resistance(100.0) == pytest.approx(138.5055, abs=5e-5)
    assert rtd_resistance(-100.0) == pytest.approx(60.2558, abs=5e-5)
    assert rtd_resistance(0.0) == 100.0


def test_mean_temperature_coefficient_alpha():
    # IEC 60751: alpha = (R100 - R0) / (100 degC * R0) = 0.00385055 /degC
    alpha = (rtd_resistance(100.0) - 100.0) / (100.0 * 100.0)
    assert alpha == pytest.approx(0.00385055, abs=5e-9)


def test_temperature_from_iec60751_table():
    # Inverse of the table values: the 0.005 Ohm print rounding is at most 0.014 degC
    # (sensitivity >= 0.36 Ohm/degC over the range); the end points are checked separately.
    inside = slice(1, -1)
    np.testing.assert_allclose(rtd_temperature(TABLE_R[inside]), TABLE_T[inside], atol=0.015)


def test_pt1000_is_ten_times_pt100():
    # IEC 60751 applies to any R0; Pt1000 values are ten times the Pt100 table.
    np.testing.assert_allclose(rtd_resistance(TABLE_T, r0=1000.0), 10 * TABLE_R, atol=0.05 + 1e-9)
    np.testing.assert_allclose(rtd_temperature(10 * TABLE_R[1:-1], r0=1000.0), TABLE_T[1:-1], atol=0.015)


def test_round_trip_better_than_a_microkelvin():
    t = np.linspace(-200.0, 850.0, 210_001)
    np.testing.assert_allclose(rtd_temperature(rtd_resistance(t)), t, rtol=0, atol=1e-6)


def test_below_zero_matches_scipy_root_finder_on_the_quartic():
    # Independent inverse: scipy's brentq on R0 (1 + A t + B t^2 + C (t - 100) t^3) = R.
    a, b, c = 3.9083e-3, -5.775e-7, -4.183e-12

    def reference(r):
        return brentq(lambda t: 100.0 * (1 + a * t + b * t * t + c * (t - 100.0) * t**3) - r, -200.0, 0.0, xtol=1e-12)

    resistances = [18.53, 25.0, 40.0, 60.2558, 80.0, 99.99]
    expected = [reference(r) for r in resistances]
    np.testing.assert_allclose(rtd_temperature(resistances), expected, atol=1e-7)


def test_range_ends_are_inside():
    r_ends = rtd_resistance([-200.0, 850.0])
    np.testing.assert_allclose(rtd_temperature(r_ends), [-200.0, 850.0], atol=1e-9)


@pytest.mark.parametrize("t", [-200.01, -273.15, 850.01, 1000.0, np.nan, np.inf])
def test_resistance_outside_range_is_nan(t):
    assert np.isnan(rtd_resistance(t))


@pytest.mark.parametrize("r", [18.50, 10.0, 0.0, -5.0, 390.50, 500.0, np.inf, np.nan])
def test_temperature_outside_range_is_nan(r):
    # 18.50 Ohm is below R(-200 degC) = 18.52 Ohm; 390.50 Ohm above R(850 degC) = 390.48 Ohm.
    assert np.isnan(rtd_temperature(r))


def test_shapes_scalars_and_mixed_arrays():
    r = np.array([[60.2558, np.nan], [138.5055, 1e3]])
    t = rtd_temperature(r)
    assert t.shape == (2, 2) and t.dtype == np.float64
    assert t[0, 0] == pytest.approx(-100.0, abs=1e-3) and t[1, 0] == pytest.approx(100.0, abs=1e-3)
    assert np.isnan(t[0, 1]) and np.isnan(t[1, 1])
    assert np.ndim(rtd_temperature(100.0)) == 0 and rtd_temperature(100.0) == 0.0
    assert np.ndim(rtd_temperature(60.0)) == 0


def test_monotonic():
    r = np.linspace(18.6, 390.4, 5001)
    assert np.all(np.diff(rtd_temperature(r)) > 0)
