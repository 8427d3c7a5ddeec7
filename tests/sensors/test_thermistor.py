"""NTC thermistors: beta model and Steinhart-Hart equation.

References: the definition of the B value (common practice, no source), a set of
Steinhart-Hart coefficients widely quoted for 10 kOhm-at-25-degC NTC thermistors (from
memory), and scipy's root finder as an independent inverse.
"""

import math

import numpy as np
import pytest
from scipy.optimize import brentq

from countmill.sensors.thermistor import (
    beta_temperature,
    steinhart_hart_coefficients,
    steinhart_hart_resistance,
    steinhart_hart_temperature,
)

# Widely quoted Steinhart-Hart coefficients of a 10 kOhm (at 25 degC) NTC thermistor
# (from memory): they put 10 kOhm at 25.00 degC.
NTC10K = {"a": 1.129148e-3, "b": 2.34125e-4, "c": 8.76741e-8}


def _reference_resistance(t_celsius: float, a: float, b: float, c: float) -> float:
    """Independent inverse: scipy's bracketing root finder on 1/T = a + b ln R + c ln^3 R."""
    target = 1.0 / (t_celsius + 273.15)
    return math.exp(brentq(lambda x: a + b * x + c * x**3 - target, -10.0, 40.0, xtol=1e-14, rtol=1e-15))


def test_widely_quoted_10k_coefficients_give_25_degc_at_10_kohm():
    # from memory: these coefficients describe a 10 kOhm-at-25-degC part; +-0.01 degC
    assert steinhart_hart_temperature(10_000.0, **NTC10K) == pytest.approx(25.0, abs=0.01)


def test_ntc_falls_with_temperature():
    r = np.logspace(2, 6, 50)
    t = steinhart_hart_temperature(r, **NTC10K)
    assert np.all(np.diff(t) < 0)


def test_steinhart_hart_resistance_matches_scipy_root_finder():
    temps = [-40.0, -10.0, 0.0, 25.0, 60.0, 100.0, 150.0]
    expected = [_reference_resistance(t, **NTC10K) for t in temps]
    np.testing.assert_allclose(steinhart_hart_resistance(temps, **NTC10K), expected, rtol=1e-11)


def test_steinhart_hart_round_trip():
    temps = np.linspace(-55.0, 200.0, 1001)
    back = steinhart_hart_temperature(steinhart_hart_resistance(temps, **NTC10K), **NTC10K)
    np.testing.assert_allclose(back, temps, atol=1e-9)


def test_coefficients_from_three_points_reproduce_the_curve():
    # Three points on the curve, found by scipy's root finder (independent of the code under test).
    points = [(t, _reference_resistance(t, **NTC10K)) for t in (0.0, 25.0, 70.0)]
    a, b, c = steinhart_hart_coefficients(points)
    np.testing.assert_allclose([a, b, c], [NTC10K["a"], NTC10K["b"], NTC10K["c"]], rtol=1e-7)
    # the equation passes exactly through the three points
    np.testing.assert_allclose(
        steinhart_hart_temperature([r for _, r in points], a=a, b=b, c=c), [0.0, 25.0, 70.0], atol=1e-9
    )


def test_coefficients_order_of_points_does_not_matter():
    points = [(0.0, 32_650.0), (25.0, 10_000.0), (50.0, 3_603.0)]
    assert steinhart_hart_coefficients(points) == pytest.approx(steinhart_hart_coefficients(points[::-1]), rel=1e-9)


@pytest.mark.parametrize(
    "points, message",
    [
        ([(0.0, 30_000.0), (25.0, 10_000.0)], "exactly three"),
        ([(0.0, 30_000.0), (0.0, 10_000.0), (50.0, 4_000.0)], "different"),
        ([(0.0, 30_000.0), (25.0, 10_000.0), (50.0, 10_000.0)], "different"),
        ([(0.0, -1.0), (25.0, 10_000.0), (50.0, 4_000.0)], "positive"),
        ([(-300.0, 1.0), (25.0, 10_000.0), (50.0, 4_000.0)], "absolute zero"),
        ([(0.0, float("nan")), (25.0, 10_000.0), (50.0, 4_000.0)], "finite"),
    ],
)
def test_bad_points_raise(points, message):
    with pytest.raises(ValueError, match=message):
        steinhart_hart_coefficients(points)


def test_beta_model_gives_25_degc_at_r25():
    # by definition of R25 (common practice, no source)
    assert beta_temperature(10_000.0, r25=10_000.0, beta=3950.0) == pytest.approx(25.0, abs=1e-12)


def test_beta_model_against_the_definition_of_b25_85():
    # B25/85 = ln(R25 / R85) / (1/T25 - 1/T85), temperatures in kelvin (common practice, no source):
    # a part with R25 = 10 kOhm and B25/85 = 3977 K has R85 = R25 * exp(-B (1/T25 - 1/T85)).
    r25, b = 10_000.0, 3977.0
    r85 = r25 * math.exp(-b * (1 / 298.15 - 1 / 358.15))
    assert beta_temperature(r85, r25=r25, beta=b) == pytest.approx(85.0, abs=1e-9)


def test_beta_model_is_steinhart_hart_without_cubic_term():
    # a = 1/T25 - ln(R25)/B, b = 1/B, c = 0 (algebraic identity of the two equations)
    r25, b = 10_000.0, 3435.0
    r = np.logspace(2.5, 5.5, 25)
    sh = steinhart_hart_temperature(r, a=1 / 298.15 - math.log(r25) / b, b=1 / b, c=0.0)
    np.testing.assert_allclose(beta_temperature(r, r25=r25, beta=b), sh, atol=1e-9)
    # and the cubic inverse with c = 0
    np.testing.assert_allclose(steinhart_hart_resistance(sh, a=1 / 298.15 - math.log(r25) / b, b=1 / b, c=0.0), r, rtol=1e-11)


@pytest.mark.parametrize("bad", [np.nan, 0.0, -5.0, np.inf, -np.inf])
def test_unusable_resistances_give_nan(bad):
    assert np.isnan(beta_temperature(bad, r25=10_000.0, beta=3950.0))
    assert np.isnan(steinhart_hart_temperature(bad, **NTC10K))


def test_no_positive_kelvin_gives_nan():
    # 1/T = 1/T25 + ln(R/R25)/B <= 0 for R below R25 * exp(-B/T25): no temperature exists.
    tiny = 10_000.0 * math.exp(-3950.0 / 298.15) * 0.5
    assert np.isnan(beta_temperature(tiny, r25=10_000.0, beta=3950.0))


def test_resistance_below_absolute_zero_and_nan():
    out = steinhart_hart_resistance([-273.15, -300.0, np.nan], **NTC10K)
    assert np.all(np.isnan(out))


def test_shapes_and_scalars():
    r = np.full((2, 3), 10_000.0)
    assert beta_temperature(r, r25=10_000.0, beta=3950.0).shape == (2, 3)
    assert steinhart_hart_temperature(r, **NTC10K).shape == (2, 3)
    assert np.ndim(steinhart_hart_temperature(10_000.0, **NTC10K)) == 0
    assert np.ndim(steinhart_hart_resistance(25.0, **NTC10K)) == 0
