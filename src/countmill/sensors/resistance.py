"""Resistance of a sensor from a measured voltage: divider, current excitation, inverting amplifier.

These functions give the raw resistance the circuit equation yields. At or beyond a rail the
equation gives an infinite, zero or negative resistance; it is returned as it comes (no NaN,
no clamp) so that the conversion stage can tell an open sensor from a shorted one.
"""

from __future__ import annotations

import numpy as np

SENSOR_SIDES = ("low", "high")
AMPLIFIER_POSITIONS = ("rf", "ri")


def divider_resistance(v, *, excitation: float, r_fixed: float, sensor: str = "low") -> np.ndarray:
    """Sensor resistance in a two-resistor voltage divider, from the tap voltage.

    Parameters
    ----------
    v : array_like
        Voltage at the tap between sensor and fixed resistor, to ground [V].
    excitation : float
        Voltage across the whole divider [V], > 0.
    r_fixed : float
        The fixed resistor [ohm], > 0.
    sensor : {'low', 'high'}
        ``'low'``: sensor from the tap to ground, fixed resistor to the excitation.
        ``'high'``: sensor from the excitation to the tap, fixed resistor to ground.

    Returns
    -------
    ndarray of float64
        Sensor resistance [ohm], same shape as ``v``. Infinite, zero or negative where the
        tap is at or beyond a rail (low side: inf at v = excitation, 0 at v = 0; high side:
        inf at v = 0, 0 at v = excitation).

    Notes
    -----
    low:  V = Vex · Rs / (Rs + Rf)  ⇒  Rs = Rf · V / (Vex − V)

    high: V = Vex · Rf / (Rs + Rf)  ⇒  Rs = Rf · (Vex − V) / V

    References
    ----------
    Ohm's law; voltage divider equation.
    """
    if sensor not in SENSOR_SIDES:
        raise ValueError(f"sensor must be 'low' or 'high', got {sensor!r}")
    v = np.asarray(v, dtype=np.float64)
    with np.errstate(divide="ignore", invalid="ignore"):
        if sensor == "low":
            r = r_fixed * v / (excitation - v)
        else:
            r = r_fixed * (excitation - v) / v
    return np.asarray(r, dtype=np.float64)


def current_excitation_resistance(v, *, amps: float, lead_ohms: float = 0.0) -> np.ndarray:
    """Sensor resistance from the voltage across it while a known current flows.

    Parameters
    ----------
    v : array_like
        Voltage across sensor and leads [V].
    amps : float
        Excitation current [A], ≠ 0.
    lead_ohms : float
        Resistance of the leads in the measured loop, subtracted [ohm].

    Returns
    -------
    ndarray of float64
        Sensor resistance [ohm], same shape as ``v``; zero or negative where the voltage
        is at or below the lead drop.

    Notes
    -----
    Rs = V / I − R_leads

    References
    ----------
    Ohm's law (two-wire resistance measurement with constant-current excitation).
    """
    v = np.asarray(v, dtype=np.float64)
    return np.asarray(v / amps - lead_ohms, dtype=np.float64)


def inverting_amp_resistance(vout, *, vin: float, fixed: float, sensor: str, series: float = 0.0) -> np.ndarray:
    """Sensor resistance in an inverting op-amp stage, from its output voltage.

    Parameters
    ----------
    vout : array_like
        Amplifier output voltage [V].
    vin : float
        Voltage driving the input resistor, sign included [V], ≠ 0.
    fixed : float
        The fixed resistor [ohm]: Ri when ``sensor='rf'``, Rf when ``sensor='ri'``.
    sensor : {'rf', 'ri'}
        ``'rf'``: the sensor is (in) the feedback resistor.
        ``'ri'``: the sensor is (in) the input resistor.
    series : float
        Resistance in series with the sensor in its arm, subtracted [ohm].

    Returns
    -------
    ndarray of float64
        Sensor resistance [ohm], same shape as ``vout``; may be infinite, zero or negative
        where the output is at zero or has the sign of ``vin``.

    Notes
    -----
    Ideal inverting amplifier: Vout = −Vin · Rf / Ri.

    rf: Rs = −Vout · Ri / Vin − R_series

    ri: Rs = −Vin · Rf / Vout − R_series

    References
    ----------
    Common practice: ideal op-amp inverting amplifier (virtual ground at the inverting input).
    """
    if sensor not in AMPLIFIER_POSITIONS:
        raise ValueError(f"sensor must be 'rf' or 'ri', got {sensor!r}")
    vout = np.asarray(vout, dtype=np.float64)
    with np.errstate(divide="ignore", invalid="ignore"):
        if sensor == "rf":
            r = -vout * fixed / vin - series
        else:
            r = -vin * fixed / vout - series
    return np.asarray(r, dtype=np.float64)
