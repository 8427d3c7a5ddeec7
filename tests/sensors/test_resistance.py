"""Sensor resistance from divider, current excitation and inverting amplifier circuits.

Each reference voltage below is worked out in the test from Ohm's law for the circuit
(current through the series resistors, voltage = current times resistance) or from the
ideal inverting amplifier (virtual ground: the input current flows through the feedback
resistor); common practice, no source.
"""

import numpy as np
import pytest

from countmill.sensors.resistance import (
    current_excitation_resistance,
    divider_resistance,
    inverting_amp_resistance,
)

SENSORS = np.array([10.0, 100.0, 1_000.0, 4_700.0, 10_000.0, 33_000.0, 1e6])


def test_equal_resistors_halve_the_excitation():
    # 10 kOhm over 10 kOhm at 5 V gives 2.5 V at the tap (common practice, no source).
    assert divider_resistance(2.5, excitation=5.0, r_fixed=10_000.0, sensor="low") == pytest.approx(10_000.0)
    assert divider_resistance(2.5, excitation=5.0, r_fixed=10_000.0, sensor="high") == pytest.approx(10_000.0)


def test_low_side_divider_from_ohms_law():
    excitation, r_fixed = 3.3, 10_000.0
    current = excitation / (SENSORS + r_fixed)  # Ohm's law, series circuit
    v_tap = current * SENSORS  # sensor between tap and ground
    np.testing.assert_allclose(
        divider_resistance(v_tap, excitation=excitation, r_fixed=r_fixed, sensor="low"), SENSORS, rtol=1e-9
    )


def test_high_side_divider_from_ohms_law():
    excitation, r_fixed = 2.5, 4_700.0
    current = excitation / (SENSORS + r_fixed)
    v_tap = current * r_fixed  # fixed resistor between tap and ground
    np.testing.assert_allclose(
        divider_resistance(v_tap, excitation=excitation, r_fixed=r_fixed, sensor="high"), SENSORS, rtol=1e-9
    )


def test_divider_rails_give_raw_inf_zero_and_negative():
    low = divider_resistance([5.0, 0.0, 5.1, -0.1], excitation=5.0, r_fixed=1_000.0, sensor="low")
    assert low[0] == np.inf and low[1] == 0.0 and low[2] < 0 and low[3] < 0
    high = divider_resistance([0.0, 5.0, -0.1, 5.1], excitation=5.0, r_fixed=1_000.0, sensor="high")
    assert np.isinf(high[0]) and high[1] == 0.0 and high[2] < 0 and high[3] < 0


def test_divider_nan_scalar_shape_and_bad_side():
    out = divider_resistance(np.array([[np.nan, 1.0]]), excitation=2.0, r_fixed=100.0, sensor="low")
    assert out.shape == (1, 2) and np.isnan(out[0, 0]) and out[0, 1] == pytest.approx(100.0)
    assert np.ndim(divider_resistance(1.0, excitation=2.0, r_fixed=100.0)) == 0
    with pytest.raises(ValueError):
        divider_resistance(1.0, excitation=2.0, r_fixed=100.0, sensor="middle")


def test_current_excitation_pt100_at_1_ma():
    # A Pt100 at 0 degC driven by 1 mA drops 100 mV (common practice, no source); with 2 x 1 Ohm
    # of leads in the loop the voltmeter sees 102 mV.
    assert current_excitation_resistance(0.100, amps=1e-3) == pytest.approx(100.0)
    assert current_excitation_resistance(0.102, amps=1e-3, lead_ohms=2.0) == pytest.approx(100.0)
    out = current_excitation_resistance([np.nan, 0.0, 0.001], amps=1e-3, lead_ohms=2.0)
    assert np.isnan(out[0]) and out[1] == -2.0 and out[2] == pytest.approx(-1.0)


def test_inverting_amp_sensor_in_feedback():
    # Vout = -Vin * Rf / Ri: -1 V through 10 kOhm into a 25 kOhm feedback sensor gives +2.5 V.
    rf = np.array([1_000.0, 25_000.0, 100_000.0])
    vin, ri = -1.0, 10_000.0
    vout = -vin * rf / ri
    np.testing.assert_allclose(inverting_amp_resistance(vout, vin=vin, fixed=ri, sensor="rf"), rf, rtol=1e-12)
    # 100 Ohm of wiring in series with the sensor is taken off.
    vout_series = -vin * (rf + 100.0) / ri
    np.testing.assert_allclose(
        inverting_amp_resistance(vout_series, vin=vin, fixed=ri, sensor="rf", series=100.0), rf, rtol=1e-12
    )


def test_inverting_amp_sensor_as_input_resistor():
    # +1 V into a 2 kOhm input sensor with 10 kOhm feedback gives -5 V.
    assert inverting_amp_resistance(-5.0, vin=1.0, fixed=10_000.0, sensor="ri") == pytest.approx(2_000.0)
    assert inverting_amp_resistance(-5.0, vin=1.0, fixed=10_000.0, sensor="ri", series=100.0) == pytest.approx(1_900.0)
    out = inverting_amp_resistance([0.0, 0.5, np.nan], vin=1.0, fixed=10_000.0, sensor="ri")
    assert np.isinf(out[0]) and out[1] < 0 and np.isnan(out[2])
    with pytest.raises(ValueError):
        inverting_amp_resistance(1.0, vin=1.0, fixed=1.0, sensor="feedback")
