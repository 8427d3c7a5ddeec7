"""ADC codes to volts and the PGA gain lookup.

Outside references: the ranges of n-bit unsigned and two's complement integers, the relation
between offset binary and two's complement (the most significant bit inverted), and LSB sizes
of common converter spans; all common practice, no source.
"""

import math

import numpy as np
import pytest
from hypothesis import given
from hypothesis import strategies as st

from countmill.sensors.adc import amplifier_input_volts, code_to_volts, gain_lookup, valid_code_range


@pytest.mark.parametrize(
    "bits, coding, expected",
    [
        # n-bit unsigned integers run 0 … 2^n − 1 (common practice, no source)
        (8, "straight", (0, 255)),
        (12, "straight", (0, 4095)),
        (24, "straight", (0, 16_777_215)),
        # n-bit two's complement runs −2^(n−1) … 2^(n−1) − 1 (common practice, no source)
        (8, "twos", (-128, 127)),
        (16, "twos", (-32768, 32767)),
        (24, "twos", (-8_388_608, 8_388_607)),
    ],
)
def test_valid_code_range(bits, coding, expected):
    assert valid_code_range(bits, coding) == expected


@pytest.mark.parametrize("bits, coding", [(0, "straight"), (12.5, "straight"), (True, "twos"), (12, "offset"), (12, "")])
def test_bad_bits_or_coding_raise(bits, coding):
    with pytest.raises(ValueError):
        valid_code_range(bits, coding)
    with pytest.raises(ValueError):
        code_to_volts(0, bits=bits, span=(0.0, 1.0), coding=coding)


def test_8_bit_over_2v56_is_10_mv_per_code_one_code_per_degree():
    # An 8-bit ADC over 0-2.56 V resolves 10 mV per code, so a 10 mV/degC sensor
    # reads one code per degC (common practice, no source).
    codes = np.arange(256)
    volts = code_to_volts(codes, bits=8, span=(0.0, 2.56), coding="straight")
    np.testing.assert_allclose(np.diff(volts), 0.010, rtol=1e-12)
    degrees = volts / 0.010
    np.testing.assert_allclose(degrees, codes, atol=1e-9)
    assert code_to_volts(25, bits=8, span=(0.0, 2.56), coding="straight") == pytest.approx(0.25)


def test_12_bit_over_4v096_is_1_mv_per_code():
    # A 4.096 V reference on a 12-bit converter gives 1 mV per LSB (common practice, no source).
    assert code_to_volts(1234, bits=12, span=(0.0, 4.096), coding="straight") == pytest.approx(1.234)
    assert code_to_volts(4095, bits=12, span=(0.0, 4.096), coding="straight") == pytest.approx(4.095)


def test_twos_complement_bipolar_16_bit():
    # A 16-bit converter over +-10 V: LSB = 20 V / 65536 = 305.18 uV; full-scale negative code
    # -32768 reads -10 V, code 0 mid-span, +32767 reads 10 V - 1 LSB (common practice, no source).
    lsb = 20.0 / 65536
    assert lsb == pytest.approx(305.18e-6, abs=0.005e-6)
    volts = code_to_volts([-32768, -1, 0, 1, 32767], bits=16, span=(-10.0, 10.0), coding="twos")
    np.testing.assert_allclose(volts, [-10.0, -lsb, 0.0, lsb, 10.0 - lsb], rtol=0, atol=1e-12)


@given(st.integers(min_value=1, max_value=24), st.data())
def test_twos_complement_is_offset_binary_with_msb_inverted(bits, data):
    # Two's complement code c and offset-binary code c + 2^(n-1) denote the same level
    # (the MSB inverted; common practice, no source).
    low, high = valid_code_range(bits, "twos")
    code = data.draw(st.integers(min_value=low, max_value=high))
    span = (-5.0, 5.0)
    as_twos = code_to_volts(code, bits=bits, span=span, coding="twos")
    as_offset = code_to_volts(code + 2 ** (bits - 1), bits=bits, span=span, coding="straight")
    assert as_twos == pytest.approx(float(as_offset), abs=1e-12)


@pytest.mark.parametrize(
    "code, coding",
    [(4096, "straight"), (-1, "straight"), (10**9, "straight"), (2048, "twos"), (-2049, "twos"), (1.5, "straight")],
)
def test_invalid_codes_give_nan(code, coding):
    assert math.isnan(code_to_volts(code, bits=12, span=(0.0, 4.096), coding=coding))


def test_nan_shape_and_scalar():
    codes = np.array([[0, np.nan], [4095, 4096]])
    volts = code_to_volts(codes, bits=12, span=(0.0, 4.096), coding="straight")
    assert volts.shape == (2, 2) and volts.dtype == np.float64
    assert np.isnan(volts[0, 1]) and np.isnan(volts[1, 1])
    scalar = code_to_volts(0, bits=12, span=(0.0, 4.096), coding="straight")
    assert np.ndim(scalar) == 0 and scalar == 0.0
    # integer arrays as a log reader gives them
    ints = code_to_volts(np.array([0, 2048], dtype=np.int32), bits=12, span=(0.0, 4.096))
    np.testing.assert_allclose(ints, [0.0, 2.048])


def test_reversed_span_and_bad_span():
    # span[0] is the voltage at code 0 whichever way the span runs (contract section 4).
    assert code_to_volts(1024, bits=12, span=(4.096, 0.0), coding="straight") == pytest.approx(3.072)
    with pytest.raises(ValueError):
        code_to_volts(0, bits=12, span=(1.0, 1.0), coding="straight")
    with pytest.raises(ValueError):
        code_to_volts(0, bits=12, span=(0.0, float("nan")), coding="straight")


GAINS = {0: 1.0, 1: 10.0, 2: 100.0, 3: 1000.0}


def test_gain_lookup_matches_a_plain_dictionary_lookup():
    # Reference: a per-sample Python dictionary lookup, written independently here.
    rng = np.random.default_rng(7)
    codes = rng.integers(-2, 6, size=500)
    volts = rng.uniform(-2.0, 2.0, size=500)
    expected = np.array([v / GAINS[c] if c in GAINS else np.nan for v, c in zip(volts, codes)])
    np.testing.assert_allclose(amplifier_input_volts(volts, codes, GAINS), expected, rtol=1e-15)


def test_gain_of_1000_turns_1_v_into_1_mv():
    # 1 V at the ADC behind a gain of 1000 is 1 mV at the amplifier input (common practice, no source).
    assert amplifier_input_volts(1.0, 3, GAINS) == pytest.approx(1e-3)


def test_unknown_nan_and_fractional_gain_codes_give_nan():
    out = amplifier_input_volts([1.0, 1.0, 1.0, 1.0, np.nan], [4, -1, np.nan, 1.5, 0], GAINS)
    assert np.all(np.isnan(out))


def test_sparse_and_negative_gain_codes():
    gains = {-3: 0.5, 7: 2.0}
    out = amplifier_input_volts([1.0, 1.0, 1.0], [-3, 7, 0], gains)
    np.testing.assert_allclose(out[:2], [2.0, 0.5])
    assert np.isnan(out[2])
    first, table = gain_lookup(gains)
    assert first == -3 and table.size == 11


def test_gain_codes_as_toml_string_keys():
    # TOML table keys are strings (TOML v1.0.0, "Keys"): [gains] 0 = 1 arrives as {"0": 1}.
    out = amplifier_input_volts([1.0, 1.0, 1.0], [0, 1, 2], {"0": 1, "1": 10})
    np.testing.assert_allclose(out[:2], [1.0, 0.1])
    assert np.isnan(out[2])


@pytest.mark.parametrize(
    "gains",
    [{}, {0: 0.0}, {0: -1.0}, {0: float("inf")}, {0.5: 1.0}, {"x": 1.0}, {True: 1.0}, {0: "10"}, {0: 1.0, "0": 2.0}],
)
def test_bad_gain_tables_raise(gains):
    with pytest.raises(ValueError):
        amplifier_input_volts([1.0], [0], gains)
