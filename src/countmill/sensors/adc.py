"""Analog-to-digital converter and programmable-gain amplifier: codes to volts.

An ADC with ``bits`` bits divides its input span into 2^bits steps of one LSB each.
Straight (offset) binary logs the codes 0 … 2^bits − 1 from the bottom of the span;
two's complement logs signed codes −2^(bits−1) … 2^(bits−1) − 1 about the middle of the span.
"""

from __future__ import annotations

from typing import Mapping

import numpy as np

CODINGS = ("straight", "twos")


def _check_bits_coding(bits: int, coding: str) -> None:
    if isinstance(bits, bool) or not isinstance(bits, (int, np.integer)) or not 1 <= bits <= 53:
        raise ValueError(f"bits must be an integer from 1 to 53, got {bits!r}")
    if coding not in CODINGS:
        raise ValueError(f"coding must be 'straight' or 'twos', got {coding!r}")


def valid_code_range(bits: int, coding: str) -> tuple[int, int]:
    """Lowest and highest code an ADC can log; these two codes are its rails.

    Parameters
    ----------
    bits : int
        Resolution of the converter [1].
    coding : {'straight', 'twos'}
        ``'straight'``: straight (offset) binary, unsigned codes.
        ``'twos'``: two's complement, signed codes.

    Returns
    -------
    lowest, highest : int
        The lowest and highest valid code [code].

    Notes
    -----
    straight: 0 … 2^bits − 1; twos: −2^(bits−1) … 2^(bits−1) − 1.

    References
    ----------
    Common practice for binary ADC output coding (straight binary, offset binary and
    two's complement codes).
    """
    _check_bits_coding(bits, coding)
    if coding == "straight":
        return 0, 2**bits - 1
    return -(2 ** (bits - 1)), 2 ** (bits - 1) - 1


def code_to_volts(code, *, bits: int, span, coding: str = "straight") -> np.ndarray:
    """Volts at the ADC input for each logged code.

    Parameters
    ----------
    code : array_like
        ADC output codes [code]. NaN, non-integer codes and codes outside
        :func:`valid_code_range` give NaN.
    bits : int
        Resolution of the converter [1].
    span : (float, float)
        Volts at code 0 and at code 2^bits of a straight-binary converter, i.e. the bottom
        and top of the input span [V]. ``span[1]`` may be below ``span[0]``.
    coding : {'straight', 'twos'}
        Output coding, see :func:`valid_code_range`.

    Returns
    -------
    ndarray of float64
        Volts at the ADC input [V], same shape as ``code``.

    Notes
    -----
    LSB = (span1 − span0) / 2^bits.

    straight: V = span0 + code · LSB

    twos: V = (span0 + span1) / 2 + code · LSB

    References
    ----------
    Common practice for the transfer function of an ideal ADC (one LSB per code,
    code 0 at the bottom of the span for straight binary, at mid-span for two's complement).
    """
    lowest, highest = valid_code_range(bits, coding)
    span0, span1 = (float(s) for s in span)
    if not (np.isfinite(span0) and np.isfinite(span1)) or span0 == span1:
        raise ValueError(f"span must be two different finite voltages, got {span!r}")
    lsb = (span1 - span0) / 2.0**bits
    origin = span0 if coding == "straight" else (span0 + span1) / 2.0
    code = np.asarray(code)
    if code.dtype.kind in "iu" and code.size and lowest <= code.min() and code.max() <= highest:
        return origin + code.astype(np.float64) * lsb  # integer codes, all valid: no mask
    code = np.asarray(code, dtype=np.float64)
    volts = origin + code * lsb
    valid = (code >= lowest) & (code <= highest) & (code == np.floor(code))
    return np.where(valid, volts, np.nan)


def _gain_code(key) -> int:
    """A gain code as an int; TOML table keys arrive as strings such as ``"3"``."""
    if isinstance(key, bool):
        raise ValueError(f"gain code {key!r} is not an integer")
    try:
        code = int(key.strip()) if isinstance(key, str) else int(key)
    except (TypeError, ValueError):
        raise ValueError(f"gain code {key!r} is not an integer") from None
    if not isinstance(key, str) and code != key:
        raise ValueError(f"gain code {key!r} is not an integer")
    return code


def gain_lookup(gains: Mapping[int, float]) -> tuple[int, np.ndarray]:
    """Dense lookup array of a PGA's gains: ``table[code - first]`` is the gain, NaN if unknown.

    Parameters
    ----------
    gains : mapping of int to float
        Gain code [code] → voltage gain [V/V]. Gains must be finite and positive; codes may
        also be given as integer strings (``"3"``), as TOML table keys are.

    Returns
    -------
    first : int
        The smallest gain code [code].
    table : ndarray of float64
        Gain per code from ``first`` on [V/V]; NaN for codes missing from ``gains``.

    Notes
    -----
    table[k] = gains[first + k], or NaN.

    References
    ----------
    Common practice: a programmable-gain amplifier selects one of a few fixed gains
    by a small integer code.
    """
    if not gains:
        raise ValueError("gains is empty: at least one gain code is needed")
    by_code: dict[int, float] = {}
    for key, gain in gains.items():
        code = _gain_code(key)
        if isinstance(gain, bool) or not isinstance(gain, (int, float, np.integer, np.floating)):
            raise ValueError(f"gain for code {key!r} must be a number, got {gain!r}")
        if not (np.isfinite(gain) and gain > 0):
            raise ValueError(f"gain for code {key!r} must be finite and positive, got {gain!r}")
        if code in by_code:
            raise ValueError(f"gain code {code} is given twice")
        by_code[code] = float(gain)
    first, last = min(by_code), max(by_code)
    if last - first > 65535:
        raise ValueError(f"gain codes {first} … {last} span more than 65536 codes")
    table = np.full(last - first + 1, np.nan)
    for code, gain in by_code.items():
        table[code - first] = gain
    return first, table


def amplifier_input_volts(volts, gain_code, gains: Mapping[int, float]) -> np.ndarray:
    """Volts at the amplifier input: volts at the ADC divided by the selected PGA gain.

    Parameters
    ----------
    volts : array_like
        Volts at the ADC input [V].
    gain_code : array_like
        PGA gain code per sample [code], broadcast against ``volts``.
    gains : mapping of int to float
        Gain code [code] → voltage gain [V/V].

    Returns
    -------
    ndarray of float64
        Volts at the amplifier input [V]; NaN where the gain code is unknown or NaN.

    Notes
    -----
    V_in = V_adc / G[gain_code]. Looked up through :func:`gain_lookup`, without a loop
    per sample.

    References
    ----------
    Common practice: an amplifier of voltage gain G gives G times its input voltage.
    """
    first, table = gain_lookup(gains)
    volts = np.asarray(volts, dtype=np.float64)
    code = np.asarray(gain_code)
    if code.dtype.kind in "iu" and code.size and code.shape == volts.shape:  # one gain, or all known
        low, high = int(code.min()) - first, int(code.max()) - first
        if 0 <= low and high < table.size:
            if low == high and not np.isnan(table[low]):
                return np.asarray(volts / table[low], dtype=np.float64)
            gain = table[code - first]
            if not np.isnan(gain).any():
                return np.asarray(volts / gain, dtype=np.float64)
    code = np.asarray(gain_code, dtype=np.float64)
    index = code - first
    known = (index >= 0) & (index < table.size) & (index == np.floor(index))
    safe = np.where(known, index, 0).astype(np.intp)
    gain = np.where(known, table[safe], np.nan)
    return np.asarray(volts / gain, dtype=np.float64)
