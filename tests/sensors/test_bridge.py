"""Strain-gauge bridges and ratiometric bridge transducers.

The reference bridge outputs are worked out here from the four arm resistances with
Ohm's law (two voltage dividers, output = active divider minus reference divider, the
active gauge on the ground side so that tension, a rising gauge resistance, gives a positive
output): common practice, no source.
"""

import numpy as np
import pytest

from countmill.sensors.bridge import bridge_strain, ratiometric_value

R = 120.0  # Ohm, a common foil gauge (common practice, no source)


def _divider(v_ex, r_top, r_bottom):
    return v_ex * r_bottom / (r_top + r_bottom)


def test_quarter_bridge_120_ohm_gauge_plus_0_150_ohm_at_10_v():
    # +0.150 Ohm on a 120 Ohm gauge in a quarter bridge at 10 V gives about 3.12 mV
    # (common practice, no source); with GF 2 that is dR/R / GF = 625 microstrain.
    v = _divider(10.0, R, R + 0.150) - _divider(10.0, R, R)
    assert v == pytest.approx(3.12e-3, abs=0.01e-3)
    assert bridge_strain(v, excitation=10.0, arrangement="quarter", gauge_factor=2.0) == pytest.approx(625e-6, rel=1e-9)


@pytest.mark.parametrize("delta_r", [-0.6, -0.15, 0.0, 0.15, 1.2, 12.0])
def test_quarter_bridge_is_exact_not_linearised(delta_r):
    v = _divider(5.0, R, R + delta_r) - _divider(5.0, R, R)
    expected = delta_r / R / 2.1
    assert bridge_strain(v, excitation=5.0, arrangement="quarter", gauge_factor=2.1) == pytest.approx(expected, rel=1e-9, abs=1e-15)


@pytest.mark.parametrize("delta_r", [-0.3, 0.15, 2.0])
def test_half_bridge_two_opposite_gauges(delta_r):
    # adjacent arms of one side: +dR (tension) to ground, -dR (compression) on top
    v = _divider(10.0, R - delta_r, R + delta_r) - _divider(10.0, R, R)
    assert bridge_strain(v, excitation=10.0, arrangement="half") == pytest.approx(delta_r / R / 2.0, rel=1e-9)


@pytest.mark.parametrize("delta_r", [-0.3, 0.15, 2.0])
def test_full_bridge_four_gauges(delta_r):
    # both sides active, opposite ways (bending)
    v = _divider(10.0, R - delta_r, R + delta_r) - _divider(10.0, R + delta_r, R - delta_r)
    assert bridge_strain(v, excitation=10.0, arrangement="full") == pytest.approx(delta_r / R / 2.0, rel=1e-9)


def test_sign_convention_tension_positive():
    v = _divider(10.0, R, R + 0.15) - _divider(10.0, R, R)
    assert v > 0
    for arrangement in ("quarter", "half", "full"):
        assert bridge_strain(v, excitation=10.0, arrangement=arrangement) > 0
        assert bridge_strain(-v, excitation=10.0, arrangement=arrangement) < 0


def test_ratios_no_bridge_can_give_are_nan():
    # quarter: the active arm from 0 to infinite resistance spans -1/2 < Vr < 1/2 (Ohm's law)
    q = bridge_strain([-5.0, 5.0, 6.0, 4.99], excitation=10.0, arrangement="quarter")
    assert np.isnan(q[0]) and np.isnan(q[1]) and np.isnan(q[2]) and np.isfinite(q[3])
    h = bridge_strain([5.0, 5.01, -5.01], excitation=10.0, arrangement="half")
    assert np.isfinite(h[0]) and np.isnan(h[1]) and np.isnan(h[2])
    f = bridge_strain([10.0, 10.01, -10.01], excitation=10.0, arrangement="full")
    assert np.isfinite(f[0]) and np.isnan(f[1]) and np.isnan(f[2])


def test_bridge_nan_shape_scalar_and_bad_arrangement():
    out = bridge_strain(np.array([[np.nan, 0.0]]), excitation=5.0, arrangement="full")
    assert out.shape == (1, 2) and np.isnan(out[0, 0]) and out[0, 1] == 0.0
    assert np.ndim(bridge_strain(0.001, excitation=5.0, arrangement="half")) == 0
    with pytest.raises(ValueError):
        bridge_strain(0.0, excitation=5.0, arrangement="eighth")


def test_load_cell_2_mv_per_v():
    # A 2 mV/V, 50 kg load cell at 10 V excitation gives 20 mV at 50 kg and 10 mV at 25 kg
    # (common practice, no source).
    out = ratiometric_value([0.0, 0.010, 0.020, np.nan], excitation=10.0, rated_output=0.002, capacity=50.0)
    np.testing.assert_allclose(out[:3], [0.0, 25.0, 50.0], rtol=1e-12)
    assert np.isnan(out[3])


def test_load_cell_zero_balance():
    # a zero balance of 0.1 mV/V shifts every reading by 1 mV at 10 V excitation
    out = ratiometric_value(0.011, excitation=10.0, rated_output=0.002, capacity=50.0, zero=0.0001)
    assert out == pytest.approx(25.0) and np.ndim(out) == 0
