"""Wheatstone bridges: strain gauges and ratiometric bridge transducers (load cells)."""

from __future__ import annotations

import numpy as np

ARRANGEMENTS = ("quarter", "half", "full")

#: Largest |V/excitation| each arrangement can produce [V/V], with every arm between zero and
#: infinite resistance. Quarter: the active arm alone moves Vr from -1/2 (shorted) towards
#: +1/2 (open), and the equation is singular at +1/2, so both ends are excluded. Half: the two
#: active gauges form one side of the bridge, Vr = (dR/R)/2 with |dR/R| <= 1. Full: Vr = dR/R.
_RATIO_LIMIT = {"quarter": 0.5, "half": 0.5, "full": 1.0}


def bridge_strain(v, *, excitation: float, arrangement: str, gauge_factor: float = 2.0) -> np.ndarray:
    """Strain from the output voltage of a strain-gauge Wheatstone bridge.

    Parameters
    ----------
    v : array_like
        Bridge output voltage [V].
    excitation : float
        Bridge excitation voltage [V], > 0.
    arrangement : {'quarter', 'half', 'full'}
        ``'quarter'``: one active gauge. ``'half'``: two active gauges in adjacent arms with
        equal and opposite strain. ``'full'``: four active gauges (bending).
    gauge_factor : float
        Gauge factor GF = (ΔR/R) / strain [1].

    Returns
    -------
    ndarray of float64
        Strain [strain] (dimensionless, positive in tension), same shape as ``v``;
        NaN where V/excitation lies outside what the arrangement can produce
        (quarter: −1/2 < Vr < 1/2; half: |Vr| ≤ 1/2; full: |Vr| ≤ 1).

    Notes
    -----
    Vr = V / V_excitation.

    quarter: ε = 4·Vr / (GF · (1 − 2·Vr))  (exact for one active arm, not linearised)

    half: ε = 2·Vr / GF

    full: ε = Vr / GF

    References
    ----------
    Common practice: Wheatstone bridge equations for bonded resistance strain gauges
    (Ohm's law in the two voltage dividers of the bridge).
    """
    if arrangement not in ARRANGEMENTS:
        raise ValueError(f"arrangement must be 'quarter', 'half' or 'full', got {arrangement!r}")
    v = np.asarray(v, dtype=np.float64)
    vr = v / excitation
    with np.errstate(divide="ignore", invalid="ignore"):
        if arrangement == "quarter":
            strain = 4.0 * vr / (gauge_factor * (1.0 - 2.0 * vr))
            inside = np.abs(vr) < _RATIO_LIMIT["quarter"]
        else:
            strain = (2.0 if arrangement == "half" else 1.0) * vr / gauge_factor
            inside = np.abs(vr) <= _RATIO_LIMIT[arrangement]
    return np.asarray(np.where(inside, strain, np.nan), dtype=np.float64)


def ratiometric_value(v, *, excitation: float, rated_output: float, capacity: float, zero: float = 0.0) -> np.ndarray:
    """Measured quantity from a ratiometric bridge transducer (load cell, pressure sensor).

    Parameters
    ----------
    v : array_like
        Transducer output voltage [V].
    excitation : float
        Excitation voltage [V], > 0.
    rated_output : float
        Output at ``capacity``, per volt of excitation [V/V] (2 mV/V is 0.002).
    capacity : float
        Value of the measured quantity at rated output [out].
    zero : float
        Output at no load, per volt of excitation [V/V].

    Returns
    -------
    ndarray of float64
        Measured quantity [out], same shape as ``v``.

    Notes
    -----
    value = (V / V_excitation − zero) / rated_output · capacity

    References
    ----------
    Common practice: load-cell rated output in mV/V of excitation at rated capacity,
    linear between zero balance and rated output.
    """
    v = np.asarray(v, dtype=np.float64)
    return np.asarray((v / excitation - zero) / rated_output * capacity, dtype=np.float64)
