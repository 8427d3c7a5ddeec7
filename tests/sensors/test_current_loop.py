"""4-20 mA loops and the NAMUR NE 43 signal levels.

NAMUR NE 43 (2003-02-03): measurement information 3.8 mA <= I <= 20.5 mA; failure
information at 3.6 mA and 21.0 mA (values from memory, as also reprinted in trade articles
on NE 43). countmill's contract puts the boundaries so: below 3.6 mA or above 21.0 mA is a
loop fault; 3.6 up to 3.8 mA and above 20.5 up to 21.0 mA are marginal.
"""

import numpy as np
import pytest

from countmill.sensors.current_loop import loop_current, loop_value, ne43_levels


def test_250_ohm_shunt_turns_4_20_ma_into_1_5_v():
    # common practice, no source
    np.testing.assert_allclose(loop_current([1.0, 3.0, 5.0], shunt=250.0), [4e-3, 12e-3, 20e-3], rtol=1e-12)
    assert np.ndim(loop_current(1.0, shunt=250.0)) == 0
    assert np.isnan(loop_current(np.nan, shunt=250.0))


def test_loop_value_scales_4_and_20_ma():
    out = loop_value([4e-3, 12e-3, 20e-3], low=0.0, high=10.0)
    np.testing.assert_allclose(out, [0.0, 5.0, 10.0], atol=1e-12)
    # a reversed span is allowed (a level falling as the current rises)
    np.testing.assert_allclose(loop_value([4e-3, 20e-3], low=100.0, high=-50.0), [100.0, -50.0], atol=1e-12)


def test_loop_value_is_not_clamped_outside_4_20_ma():
    out = loop_value([0.0, 3e-3, 22e-3, np.nan], low=0.0, high=16.0)
    np.testing.assert_allclose(out[:3], [-4.0, -1.0, 18.0], atol=1e-12)
    assert np.isnan(out[3])


@pytest.mark.parametrize(
    "milliamps, fault, marginal",
    [
        (0.0, True, False),  # broken loop
        (3.5, True, False),
        (3.5999, True, False),
        (3.6, False, True),  # contract: faults are *below* 3.6 mA
        (3.6001, False, True),
        (3.7, False, True),
        (3.7999, False, True),
        (3.8, False, False),  # NE 43 measurement range starts at 3.8 mA inclusive
        (4.0, False, False),
        (12.0, False, False),
        (20.0, False, False),
        (20.5, False, False),  # measurement range ends at 20.5 mA inclusive
        (20.5001, False, True),
        (20.9999, False, True),
        (21.0, False, True),  # contract: faults are *above* 21.0 mA
        (21.0001, True, False),
        (22.0, True, False),
        (-1.0, True, False),  # reversed loop
    ],
)
def test_ne43_levels(milliamps, fault, marginal):
    got_fault, got_marginal = ne43_levels(milliamps * 1e-3)
    assert bool(got_fault) is fault
    assert bool(got_marginal) is marginal


def test_ne43_levels_through_a_250_ohm_shunt():
    # 0.9 V / 250 Ohm = 3.6 mA and 5.25 V / 250 Ohm = 21 mA sit exactly on the failure levels
    # (marginal, not yet a fault); 0.95 V = 3.8 mA and 5.125 V = 20.5 mA on the measurement
    # limits (Ohm's law); 0.5 V = 2 mA is a fault.
    fault, marginal = ne43_levels(loop_current([0.9, 0.95, 5.125, 5.25, 0.5, np.nan], shunt=250.0))
    np.testing.assert_array_equal(fault, [False, False, False, False, True, False])
    np.testing.assert_array_equal(marginal, [True, False, False, True, False, False])


def test_ne43_shapes():
    fault, marginal = ne43_levels(np.full((2, 3), 12e-3))
    assert fault.shape == marginal.shape == (2, 3)
    assert fault.dtype == bool and not fault.any() and not marginal.any()
