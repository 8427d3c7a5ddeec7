#!/usr/bin/env python3
"""Generate invented raw logger days for the countmill demo and benchmarks.

The scenario is an invented small craft brewery with one multiplexing data logger
("brewhouse-logger-a"). For every scan the logger samples each channel of
``channel_maps/brewhouse.toml`` once, channel by channel a few milliseconds apart, and
writes one line per sample::

    2026-11-03T07:15:00.020,4,6953,1

(local time of the map's timezone, no offset; channel; raw ADC code; PGA gain code).

How the codes are made: a brewing-day model gives each channel's physical value over the
day (mash-in in the morning, boil at midday, chilling in the afternoon, steady fermenters,
glycol, cold room, ...). Each value is then pushed *backwards* through the channel's chain
as written in the channel map (read with ``tomllib``, so excitations, resistors, sensor
coefficients and ADC settings come from one place), using forward physics written here:
IEC 60751 Callendar-Van Dusen for RTDs, beta and Steinhart-Hart for thermistors, the
NIST ITS-90 reference polynomials for type K and type T thermocouples (emf of the hot
junction minus emf of the terminal block), divider, amplifier, bridge, load-cell and loop
equations. Small noise is added, and the volts are quantised by the channel's ADC after
its PGA gain. All of it is invented demo data: it is not a measurement, and nothing in the
test suite uses it as a reference value.

Faults planted (unless ``--no-faults``), in local logger time of every generated day
(windows include their start and exclude their end; a channel's sample is taken 5 ms times
its place in the scan after the scan starts, e.g. channel 16 at hh:mm:s0.080); channel ids
are those of ``channel_maps/brewhouse.toml``:

 1. 10:20:00-10:35:00  ch 16 co2_line_pressure: the loop drops out, 0 mA (codes 0 or 1).
 2. 11:00:00-12:00:00  ch 4  mash_tun_temp: gain code 2 logged instead of 1; with ten
                       times the gain the codes sit at the ADC's upper rail (32767).
 3. 09:40:00-10:00:00  ch 10 fv3_temp: thermistor unplugged; the divider sits at its
                       2.5 V reference (code 16384): open circuit.
 4. 12:34:50           ch 17 malt_store_humidity: one line whose code field holds garbage
                       bytes (not UTF-8, not a number), at 12:34:50.085 (in a file that
                       ends before then: the middle scan); and the file's last line is cut
                       two characters into its code field, with no line ending, as after
                       a power cut.
 5. 12:20:00-12:30:00  ch 0  terminal_block: no lines at all for ten minutes (the cold
                       junction of channels 5 and 6 goes missing).
 6. from 14:00:00      ch 8  fv1_temp: the probe was replaced by a sensor of another type;
                       the codes follow the map's second revision of channel 8. This one
                       follows the map, so it also happens with ``--no-faults``.
 7. 12:00:00           ch 1  cold_room_temp: its calibration falls due (nothing planted in
                       the data; the map's ``due`` says so).
 8. 16:00:00-16:30:00  ch 12 glycol_return_temp: flat line, the code stuck at the value of
                       the 16:00:00 sample.
 9. 12:45:00           ch 3  pump_amps: the whirlpool pump starts and its first sample
                       (12:45:00.015) reads a 14.2 A start transient: a one-sample spike.
10. 17:00:00           all:  the logger resyncs its clock and steps back 30 s: the scan
                       taken at 17:00:00 is logged as 16:59:30, and logging goes on from there.

Use as a script (``python demo_logs/make_day.py --help``) or import it by path and call
:func:`make_day`, which returns the path of the file written.
"""

from __future__ import annotations

import argparse
import datetime as dt
import gzip
import sys
import time as _time
import tomllib
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
DEFAULT_MAP = HERE.parent / "channel_maps" / "brewhouse.toml"

# PGA gain code the logger is configured with for each channel (by channel name).
# Millivolt signals (thermocouples, strain bridge) get gain 1000, the load cell 100,
# the RTDs on current excitation and the small shunt 10, everything else 1.
GAIN_CODES = {
    "terminal_block": 0,
    "cold_room_temp": 1,
    "supply_volts": 0,
    "pump_amps": 1,
    "mash_tun_temp": 1,
    "kettle_temp": 3,
    "chiller_outlet_temp": 3,
    "hlt_temp": 1,
    "fv1_temp": 0,
    "fv2_temp": 0,
    "fv3_temp": 0,
    "glycol_supply_temp": 1,
    "glycol_return_temp": 1,
    "mezzanine_beam_strain": 3,
    "silo_load": 2,
    "hlt_level": 0,
    "co2_line_pressure": 0,
    "malt_store_humidity": 0,
    "bright_tank_volume": 0,
}

# Fault schedule, in seconds after local midnight (see the module docstring).
H = 3600.0
FAULT_LOOP_DROPOUT = ("co2_line_pressure", 10 * H + 20 * 60, 10 * H + 35 * 60)
FAULT_GAIN_STEP = ("mash_tun_temp", 11 * H, 12 * H)
FAULT_OPEN_THERMISTOR = ("fv3_temp", 9 * H + 40 * 60, 10 * H)
FAULT_CORRUPT_LINE = ("malt_store_humidity", 12 * H + 34 * 60 + 50)
FAULT_MISSING_CJ = ("terminal_block", 12 * H + 20 * 60, 12 * H + 30 * 60)
FAULT_FLAT_LINE = ("glycol_return_temp", 16 * H, 16 * H + 30 * 60)
FAULT_PUMP_SPIKE = ("pump_amps", 12 * H + 45 * 60, 14.2)
FAULT_CLOCK_STEP = (17 * H, -30.0)
GARBAGE_CODE = b"3\xc7\xff\xfeQ?"  # not UTF-8 and not an integer

LOGGER_HEADER = (
    "# logger: brewhouse-logger-a (invented demo logger, serial BLA-0042)\n"
    "# firmware: 3.2.7  scan: {scan:g} s  channels: {nch}\n"
    "# invented demo data from demo_logs/make_day.py, seed {seed}: not a measurement\n"
)

# ---------------------------------------------------------------------------------------
# Forward sensor physics: physical quantity -> what the sensor presents to the circuit.
# ---------------------------------------------------------------------------------------

# IEC 60751 Callendar-Van Dusen coefficients for platinum RTDs.
IEC_A, IEC_B, IEC_C = 3.9083e-3, -5.775e-7, -4.183e-12


def rtd_ohms(t, r0=100.0, a=IEC_A, b=IEC_B, c=IEC_C):
    """RTD resistance [ohm] at t [degC], Callendar-Van Dusen (C term below 0 degC)."""
    t = np.asarray(t, dtype=float)
    r = r0 * (1.0 + a * t + b * t * t)
    return np.where(t < 0.0, r + r0 * c * (t - 100.0) * t**3, r)


def sh_coefficients_from_points(points):
    """Steinhart-Hart a, b, c through three [degC, ohm] points."""
    t = np.array([p[0] for p in points], dtype=float) + 273.15
    ln_r = np.log([p[1] for p in points])
    a_mat = np.column_stack([np.ones(3), ln_r, ln_r**3])
    return np.linalg.solve(a_mat, 1.0 / t)


def thermistor_ohms(t, params):
    """NTC resistance [ohm] at t [degC], for a map's thermistor stage parameters."""
    tk = np.asarray(t, dtype=float) + 273.15
    if "beta" in params:
        return params["r25"] * np.exp(params["beta"] * (1.0 / tk - 1.0 / 298.15))
    if "points" in params:
        a, b, c = sh_coefficients_from_points(params["points"])
    else:
        a, b, c = params["a"], params["b"], params["c"]
    # Solve c x^3 + b x + (a - 1/T) = 0 for x = ln R (one real root when b, c > 0).
    if c == 0.0:
        return np.exp((1.0 / tk - a) / b)
    p = b / c
    q = (a - 1.0 / tk) / c
    s = np.sqrt(q * q / 4.0 + p**3 / 27.0)
    x = np.cbrt(-q / 2.0 + s) + np.cbrt(-q / 2.0 - s)
    return np.exp(x)


# NIST ITS-90 reference functions, emf [mV] of t [degC] with the reference junction at 0 degC.
_K_POS = [-0.176004136860e-01, 0.389212049750e-01, 0.185587700320e-04, -0.994575928740e-07,
          0.318409457190e-09, -0.560728448890e-12, 0.560750590590e-15, -0.320207200030e-18,
          0.971511471520e-22, -0.121047212750e-25]
_K_EXP = (0.118597600000e00, -0.118343200000e-03, 0.126968600000e03)
_K_NEG = [0.0, 0.394501280250e-01, 0.236223735980e-04, -0.328589067840e-06,
          -0.499048287770e-08, -0.675090591730e-10, -0.574103274280e-12,
          -0.310888728940e-14, -0.104516093650e-16, -0.198892668780e-19,
          -0.163226974860e-22]
_T_POS = [0.0, 0.387481063640e-01, 0.332922278800e-04, 0.206182434040e-06,
          -0.218822568460e-08, 0.109968809280e-10, -0.308157587720e-13,
          0.454791352900e-16, -0.275129016730e-19]


def _poly(coeffs, t):
    return np.polynomial.polynomial.polyval(t, coeffs)


def thermocouple_mv(t, tc_type):
    """Thermocouple emf [mV] at t [degC], reference junction at 0 degC (types K and T).

    Type K: -270 to 1372 degC; type T: 0 to 400 degC (NaN outside).
    """
    t = np.asarray(t, dtype=float)
    if tc_type == "K":
        a0, a1, a2 = _K_EXP
        pos = _poly(_K_POS, t) + a0 * np.exp(a1 * (t - a2) ** 2)
        return np.where(t >= 0.0, pos, _poly(_K_NEG, t))
    if tc_type == "T":  # 0 to 400 degC only: the demo's type T never goes below freezing
        return np.where((t >= 0.0) & (t <= 400.0), _poly(_T_POS, t), np.nan)
    raise ValueError(f"the demo generator only models thermocouple types K and T, not {tc_type!r}")


# ---------------------------------------------------------------------------------------
# A chain, run backwards: engineering value -> volts at the amplifier input.
# ---------------------------------------------------------------------------------------

def _invert_monotonic(f, y, x0, dx=1e-6, steps=30):
    """Solve f(x) = y by Newton's method from x0 (vectorised)."""
    x = np.array(x0, dtype=float)
    for _ in range(steps):
        fx = f(x)
        d = (f(x + dx) - fx) / dx
        x = x - (fx - y) / d
    return x


def stage_backwards(stage, y, cold_junction_degc=None):
    """Given a stage's output y, return the input that produces it."""
    kind = stage["stage"]
    if kind == "linear":
        return (y - stage.get("intercept", 0.0)) / stage["slope"]
    if kind == "polynomial":
        c = stage["coefficients"]
        return _invert_monotonic(lambda x: _poly(c, x), y, (y - c[0]) / c[1])
    if kind == "table":
        xs = np.array([p[0] for p in stage["points"]], dtype=float)
        ys = np.array([p[1] for p in stage["points"]], dtype=float)
        if ys[0] > ys[-1]:
            xs, ys = xs[::-1], ys[::-1]
        return np.interp(y, ys, xs)
    if kind == "divider":
        e, rf = stage["excitation"], stage["r_fixed"]
        with np.errstate(invalid="ignore", divide="ignore"):
            if stage["sensor"] == "low":
                v = e * y / (y + rf)
                return np.where(np.isinf(y), e, v)
            v = e * rf / (y + rf)
            return np.where(np.isinf(y), 0.0, v)
    if kind == "current_excitation":
        return stage["amps"] * (y + stage.get("lead_ohms", 0.0))
    if kind == "inverting_amp":
        r_sensor = y + stage.get("series", 0.0)
        if stage["sensor"] == "rf":
            return -stage["vin"] * r_sensor / stage["ri"]
        return -stage["vin"] * stage["rf"] / r_sensor
    if kind == "thermistor":
        return thermistor_ohms(y, stage)
    if kind == "rtd":
        return rtd_ohms(y, stage.get("r0", 100.0), stage.get("a", IEC_A),
                        stage.get("b", IEC_B), stage.get("c", IEC_C))
    if kind == "thermocouple":
        cj = cold_junction_degc
        if not isinstance(stage["cold_junction"], str):
            cj = float(stage["cold_junction"])
        emf = thermocouple_mv(y, stage["type"]) - thermocouple_mv(cj, stage["type"])
        return emf / 1000.0
    if kind == "bridge":
        gf = stage.get("gauge_factor", 2.0)
        arr = stage["arrangement"]
        if arr == "quarter":  # strain = 4 Vr / (GF (1 - 2 Vr))
            vr = gf * y / (4.0 + 2.0 * gf * y)
        elif arr == "half":
            vr = gf * y / 2.0
        else:
            vr = gf * y
        return vr * stage["excitation"]
    if kind == "ratiometric":
        vv = stage.get("zero", 0.0) + y / stage["capacity"] * stage["rated_output"]
        return vv * stage["excitation"]
    if kind == "current_loop":
        lo, hi = stage["low"], stage["high"]
        amps = 0.004 + 0.016 * (y - lo) / (hi - lo)
        return amps * stage["shunt"]
    raise ValueError(f"unknown stage {kind!r}")


def chain_backwards(entry, value, cold_junction_degc=None):
    """Channel value (in the channel's unit, calibration included) -> amplifier input volts."""
    y = np.asarray(value, dtype=float)
    cal = entry.get("calibration")
    if cal:
        ind = np.array([p[0] for p in cal["points"]], dtype=float)
        ref = np.array([p[1] for p in cal["points"]], dtype=float)
        fit = np.polynomial.polynomial.polyfit(ind, ref, cal.get("degree", 1))
        y = _invert_monotonic(lambda x: _poly(fit, x), y, y)
    chain = entry["chain"]
    if chain[-1]["stage"] == "bridge":
        y = y * {"microstrain": 1e-6, "strain": 1.0}[entry["unit"]]
    for stage in reversed(chain):
        y = stage_backwards(stage, y, cold_junction_degc)
    return y


# ---------------------------------------------------------------------------------------
# The ADC: amplifier-input volts and a gain code -> codes.
# ---------------------------------------------------------------------------------------

def quantise(v_in, gain, adc, noise_lsb=None):
    """Volts at the amplifier input -> integer codes, clipped at the rails."""
    bits, (s0, s1), coding = adc["bits"], adc["span"], adc["coding"]
    lsb = (s1 - s0) / 2**bits
    x = v_in * gain
    if coding == "straight":
        steps, lo, hi = (x - s0) / lsb, 0, 2**bits - 1
    else:
        steps, lo, hi = (x - (s0 + s1) / 2.0) / lsb, -(2 ** (bits - 1)), 2 ** (bits - 1) - 1
    if noise_lsb is not None:
        steps = steps + noise_lsb
    return np.clip(np.rint(steps), lo, hi).astype(np.int64)


# ---------------------------------------------------------------------------------------
# The brewing day: physical values as functions of seconds after local midnight.
# ---------------------------------------------------------------------------------------

def _frames(t, points):
    """Piecewise-linear keyframes [(hour, value), ...] evaluated at t [s]."""
    hrs = np.array([p[0] for p in points], dtype=float) * H
    val = np.array([p[1] for p in points], dtype=float)
    return np.interp(t, hrs, val)


def _tri(t, period, phase=0.0):
    """Triangle wave between -1 and 1."""
    u = (t / period + phase) % 1.0
    return 4.0 * np.abs(u - 0.5) - 1.0


def _on(t, intervals):
    m = np.zeros(np.shape(t), dtype=bool)
    for a, b in intervals:
        m |= (t >= a * H) & (t < b * H)
    return m


class Day:
    """Smooth physical values of one invented brewing day; noise is added by the caller."""

    PUMP_RUNS = [(7 + 20 / 60, 10.0), (12.75, 13 + 5 / 60), (13 + 20 / 60, 14 + 10 / 60),
                 (15.0, 15.75)]

    def __init__(self, rng):
        self.rng = rng
        # slow random drift: one knot every 20 minutes, shared by the scans of the day
        self.knots = np.arange(-1.0, 26.0, 1.0 / 3.0) * H
        self._drift = {}

    def drift(self, key, t, sigma):
        if key not in self._drift:
            self._drift[key] = self.rng.normal(0.0, 1.0, self.knots.size)
        return sigma * np.interp(t, self.knots, self._drift[key])

    def pump_on(self, t):
        return _on(t, self.PUMP_RUNS)

    def value(self, name, t):
        model = getattr(self, name, None)
        if model is None:
            raise KeyError(f"the brewing-day model has no channel named {name!r}")
        return model(t)

    # cabinet and services
    def terminal_block(self, t):
        return _frames(t, [(0, 15.8), (6, 15.2), (7.5, 17.0), (10.5, 21.5), (12.5, 23.8),
                           (14.5, 22.0), (18, 18.5), (24, 16.0)]) + self.drift("tb", t, 0.15)

    def cold_room_temp(self, t):
        v = 3.0 + 0.5 * _tri(t, 25 * 60, 0.3) + self.drift("cr", t, 0.05)
        for start in (8 + 5 / 60, 11 + 40 / 60, 15 + 10 / 60):  # door openings
            dtd = t - start * H
            rise = np.clip(dtd / 60.0, 0.0, 1.0)
            v = v + 1.2 * np.where(dtd > 0, rise * np.exp(-np.clip(dtd - 60.0, 0, None) / 300.0), 0.0)
        return v

    def supply_volts(self, t):
        return 24.15 - 0.35 * self.pump_on(t) + self.drift("sv", t, 0.03)

    def pump_amps(self, t):
        run = self.pump_on(t)
        return run * (4.1 + 0.08 * np.sin(t / 97.0) + self.drift("pa", t, 0.05))

    # hot side
    def mash_tun_temp(self, t):
        return _frames(t, [(0, 14.2), (7.25, 14.5), (7 + 20 / 60, 66.5), (8.25, 65.2),
                           (8 + 35 / 60, 76.0), (10.0, 72.0), (11.0, 45.0), (11.25, 25.0),
                           (13.0, 19.0), (15.0, 18.5), (15 + 5 / 60, 65.0), (15.5, 62.0),
                           (16.0, 30.0), (18.0, 19.0), (24, 15.0)]) + self.drift("mt", t, 0.1)

    def kettle_temp(self, t):
        base = _frames(t, [(0, 15.0), (8 + 40 / 60, 15.5), (8 + 46 / 60, 68.0), (10.0, 72.0),
                           (10 + 50 / 60, 99.6), (10 + 55 / 60, 100.1), (12 + 20 / 60, 100.1),
                           (13 + 20 / 60, 93.0), (14 + 10 / 60, 88.0), (14.5, 45.0),
                           (15.0, 25.0), (15 + 3 / 60, 70.0), (15 + 40 / 60, 68.0),
                           (16.5, 30.0), (18.0, 20.0), (24, 15.5)])
        boil = _on(t, [(10 + 55 / 60, 12 + 20 / 60)])
        return base + boil * 0.08 * np.sin(t / 13.0) + self.drift("kt", t, 0.05)

    def chiller_outlet_temp(self, t):
        return _frames(t, [(0, 15.5), (13 + 20 / 60, 16.0), (13 + 20.5 / 60, 45.0),
                           (13 + 23 / 60, 18.3), (14 + 10 / 60, 18.0), (14 + 10.5 / 60, 12.0),
                           (14 + 20 / 60, 12.5), (14.5, 16.5), (15.0, 16.5),
                           (15 + 2 / 60, 68.0), (15 + 40 / 60, 66.0), (16.0, 25.0),
                           (18.0, 17.0), (24, 15.5)]) + self.drift("co", t, 0.05)

    def hlt_temp(self, t):
        base = _frames(t, [(0, 80.0), (7.0, 80.0), (8 + 10 / 60, 62.0), (9.2, 79.5),
                           (10.0, 79.0), (11.5, 55.0), (13.0, 80.0), (15.0, 80.0),
                           (15.75, 74.0), (16.6, 80.0), (24, 80.0)])
        return base + 0.6 * _tri(t, 35 * 60) + self.drift("ht", t, 0.05)

    def hlt_level(self, t):
        return _frames(t, [(0, 88.0), (7.0, 88.0), (7.25, 52.0), (8 + 10 / 60, 86.0),
                           (8 + 35 / 60, 86.0), (10.0, 34.0), (11.5, 90.0), (15.0, 90.0),
                           (15.5, 70.0), (16.2, 90.0), (24, 90.0)]) + self.drift("hl", t, 0.2)

    # cellar
    def fv1_temp(self, t):
        return 19.0 + 0.25 * _tri(t, 47 * 60, 0.1) + self.drift("f1", t, 0.03)

    def fv2_temp(self, t):
        return 19.6 + 0.2 * _tri(t, 53 * 60, 0.6) + self.drift("f2", t, 0.03)

    def fv3_temp(self, t):
        return 18.4 + 0.3 * _tri(t, 61 * 60, 0.8) + self.drift("f3", t, 0.03)

    def glycol_supply_temp(self, t):
        load = _frames(t, [(0, 0), (13 + 20 / 60, 0), (13.5, 1), (14 + 10 / 60, 1), (14.5, 0), (24, 0)])
        return -2.0 + 0.6 * _tri(t, 18 * 60) + 0.8 * load + self.drift("gs", t, 0.05)

    def glycol_return_temp(self, t):
        load = _frames(t, [(0, 0), (13 + 20 / 60, 0), (13.5, 1), (14 + 10 / 60, 1), (14.5, 0), (24, 0)])
        return self.glycol_supply_temp(t) + 2.8 + 2.5 * load + self.drift("gr", t, 0.05)

    def bright_tank_volume(self, t):
        return _frames(t, [(0, 640.0), (13.0, 640.0), (15.0, 110.0), (24, 110.0)])

    # structure and stores
    def mezzanine_beam_strain(self, t):
        step = np.clip((t - (9 + 5 / 60) * H) / 120.0, 0.0, 1.0)  # pallet set down at 09:05
        thermal = 0.3 * (self.terminal_block(t) - 16.0)
        return 42.0 + 115.0 * step + thermal + self.drift("ms", t, 0.5)

    def silo_load(self, t):
        return _frames(t, [(0, 2380.0), (6.5, 2380.0), (7 + 10 / 60, 2090.0), (24, 2090.0)])

    def malt_store_humidity(self, t):
        return 56.0 + 4.0 * np.sin(2 * np.pi * (t / H - 9.0) / 24.0) + self.drift("rh", t, 1.0)

    def co2_line_pressure(self, t):
        kegging = _on(t, [(13.0, 15.0)])
        return 2.05 + 0.02 * np.sin(t / 41.0) - 0.12 * kegging + self.drift("co2", t, 0.01)


# White noise of each channel, in its unit (sensor and pick-up noise before the ADC).
NOISE = {
    "terminal_block": 0.02, "cold_room_temp": 0.03, "supply_volts": 0.01, "pump_amps": 0.01,
    "mash_tun_temp": 0.03, "kettle_temp": 0.05, "chiller_outlet_temp": 0.05, "hlt_temp": 0.03,
    "fv1_temp": 0.01, "fv2_temp": 0.01, "fv3_temp": 0.01, "glycol_supply_temp": 0.02,
    "glycol_return_temp": 0.02, "mezzanine_beam_strain": 0.3, "silo_load": 1.5,
    "hlt_level": 0.1, "co2_line_pressure": 0.004, "malt_store_humidity": 0.2,
    "bright_tank_volume": 0.5,
}
ADC_NOISE_LSB = 0.4


# ---------------------------------------------------------------------------------------
# The channel map and the text of the log.
# ---------------------------------------------------------------------------------------

def load_map(path=DEFAULT_MAP):
    """Read the channel map; return (map dict, {id: [entries in `from` order]})."""
    with open(path, "rb") as fh:
        cmap = tomllib.load(fh)
    by_id = {}
    for entry in cmap["channel"]:
        by_id.setdefault(entry["id"], []).append(entry)
    for entries in by_id.values():
        entries.sort(key=lambda e: e.get("from", dt.datetime.min))
    return cmap, dict(sorted(by_id.items()))


def _int_field(values):
    """Right-aligned ASCII digits of an int64 array: (chars (n, w) uint8, keep mask)."""
    v = np.asarray(values, dtype=np.int64)
    neg = v < 0
    a = np.abs(v)
    width = max(1, len(str(int(a.max())) if a.size else "0")) + int(neg.any())
    chars = np.empty((v.size, width), dtype=np.uint8)
    ndig = np.ones(v.size, dtype=np.int64)
    rest = a.copy()
    for j in range(width - 1, -1, -1):
        chars[:, j] = 48 + rest % 10
        rest //= 10
    for k in range(1, width):
        ndig += a >= 10**k
    start = width - ndig - neg
    rows = np.flatnonzero(neg)
    chars[rows, start[rows]] = ord("-")
    keep = np.arange(width)[None, :] >= start[:, None]
    return chars, keep


def _time_field(date, ms_of_day):
    """'YYYY-MM-DDTHH:MM:SS.mmm' as (n, 23) uint8, for ms after local midnight of date."""
    ms = np.asarray(ms_of_day, dtype=np.int64)
    n = ms.size
    out = np.empty((n, 23), dtype=np.uint8)
    out[:, :11] = np.frombuffer(date.strftime("%Y-%m-%dT").encode(), dtype=np.uint8)
    hh, rem = np.divmod(ms, 3_600_000)
    mm, rem = np.divmod(rem, 60_000)
    ss, mss = np.divmod(rem, 1000)
    for col, val, w in ((11, hh, 2), (14, mm, 2), (17, ss, 2), (20, mss, 3)):
        for j in range(w):
            out[:, col + w - 1 - j] = 48 + (val // 10**j) % 10
    out[:, 13] = out[:, 16] = ord(":")
    out[:, 19] = ord(".")
    return out


def encode_lines(date, ms_of_day, channel, code, gain):
    """Build 'time,channel,code,gain\\n' lines in bulk; return (bytes, line lengths)."""
    tf = _time_field(date, ms_of_day)
    parts, keeps = [tf], [np.ones(tf.shape, dtype=bool)]
    comma = np.full((tf.shape[0], 1), ord(","), dtype=np.uint8)
    for vals in (channel, code, gain):
        chars, keep = _int_field(vals)
        parts += [comma, chars]
        keeps += [np.ones(comma.shape, dtype=bool), keep]
    parts.append(np.full((tf.shape[0], 1), ord("\n"), dtype=np.uint8))
    keeps.append(np.ones((tf.shape[0], 1), dtype=bool))
    mat = np.concatenate(parts, axis=1)
    keep = np.concatenate(keeps, axis=1)
    return mat[keep].tobytes(), keep.sum(axis=1)


# ---------------------------------------------------------------------------------------
# One day, simulated in blocks of scans so that memory stays flat for big files.
# ---------------------------------------------------------------------------------------

BLOCK_SCANS = 50_000  # fixed: the random streams, hence the file, depend on it


def _within(t_ms, window):
    return (t_ms >= window[1] * 1000) & (t_ms < window[2] * 1000)


def simulate_blocks(date, *, seed=20261103, scan=10.0, faults=True, hours=24.0,
                    max_lines=None, map_path=DEFAULT_MAP, day_index=0):
    """Simulate one day's records, block by block, in file order.

    Yields dicts of arrays: ``ms`` (logged time, ms after local midnight), ``channel``,
    ``code``, ``gain``, ``true_s`` (true sample time [s]), ``truth`` (the physical value
    the code was made from; NaN where a fault replaced it), plus ``corrupt`` (index in
    the block of the line to garble, or None), ``last`` (the file's final block) and
    ``names`` ({id: name}).
    """
    if isinstance(date, str):
        date = dt.date.fromisoformat(date)
    cmap, by_id = load_map(map_path)
    day = Day(np.random.default_rng([seed, day_index, 1]))
    ids = list(by_id)
    names = {cid: by_id[cid][0]["name"] for cid in ids}
    col_of = {n: i for i, n in enumerate(names.values())}
    nch = len(ids)
    scan_ms = int(round(scan * 1000))
    if scan_ms < 1:
        raise ValueError("the scan interval must be at least 0.001 s")
    n_scans = int(hours * H * 1000) // scan_ms
    if max_lines is not None:
        n_scans = min(n_scans, -(-int(max_lines) // nch) + 1)
    offsets = (np.arange(nch) * min(5.0, scan_ms / nch)).astype(np.int64)  # mux settling
    day_start = dt.datetime.combine(date, dt.time())

    # the garbled line: first sample of its channel at or after the documented time,
    # or the middle of the file when the file ends before then
    c_col = col_of[FAULT_CORRUPT_LINE[0]]
    c_scan = -(-(int(FAULT_CORRUPT_LINE[1] * 1000) - offsets[c_col]) // scan_ms)
    if c_scan >= n_scans:
        c_scan = n_scans // 2
    stuck = {}
    written = 0

    for b0 in range(0, n_scans, BLOCK_SCANS):
        b1 = min(n_scans, b0 + BLOCK_SCANS)
        n = b1 - b0
        rng = np.random.default_rng([seed, day_index, 2, b0 // BLOCK_SCANS])
        scan_t = np.arange(b0, b1, dtype=np.int64) * scan_ms
        shift = np.zeros(n, dtype=np.int64)
        if faults:  # the clock step: every sample after it is logged 30 s early
            shift[scan_t >= FAULT_CLOCK_STEP[0] * 1000] = int(FAULT_CLOCK_STEP[1] * 1000)
        codes = np.empty((n, nch), dtype=np.int64)
        gains = np.empty((n, nch), dtype=np.int64)
        truth = np.empty((n, nch))
        true_ms = scan_t[:, None] + offsets[None, :]
        present = np.ones((n, nch), dtype=bool)
        cj_smooth = None

        for col, cid in enumerate(ids):
            entries, name = by_id[cid], names[cid]
            ms = true_ms[:, col]
            t = ms / 1000.0
            smooth = day.value(name, t)
            if name == "terminal_block":
                cj_smooth = smooth
            value = smooth + rng.normal(0.0, NOISE.get(name, 0.0), n)
            gcode = np.full(n, GAIN_CODES[name], dtype=np.int64)
            pinned = np.zeros(n, dtype=bool)  # inputs held hard at a rail: no noise

            if faults and name == FAULT_PUMP_SPIKE[0]:
                t_ms = int(FAULT_PUMP_SPIKE[1] * 1000)
                value[(ms >= t_ms) & (ms - scan_ms < t_ms)] = FAULT_PUMP_SPIKE[2]

            # which revision of the channel holds at each logged time
            rev = np.zeros(n, dtype=np.int64)
            for i, e in enumerate(entries[1:], start=1):
                if "from" in e:
                    rev[ms + shift >= (e["from"] - day_start) / dt.timedelta(milliseconds=1)] = i
            volts = np.empty(n)
            for i, e in enumerate(entries):
                m = rev == i
                if m.any():
                    cj = None
                    if any(s["stage"] == "thermocouple" for s in e["chain"]):
                        cj = cj_smooth[m] if cj_smooth is not None else day.terminal_block(t[m])
                    volts[m] = chain_backwards(e, value[m], cj)
            if not np.isfinite(volts).all():
                raise ValueError(f"{name}: the day model leaves the range the generator models")

            if faults and name == FAULT_LOOP_DROPOUT[0]:
                m = _within(ms, FAULT_LOOP_DROPOUT)
                volts[m] = 0.0  # no current through the shunt
                value[m] = np.nan
            if faults and name == FAULT_OPEN_THERMISTOR[0]:
                m = _within(ms, FAULT_OPEN_THERMISTOR)
                div = next(s for s in entries[0]["chain"] if s["stage"] == "divider")
                volts[m] = div["excitation"] if div["sensor"] == "low" else 0.0
                pinned |= m
                value[m] = np.nan
            if faults and name == FAULT_GAIN_STEP[0]:
                m = _within(ms, FAULT_GAIN_STEP)
                gcode[m] += 1
                value[m] = np.nan

            adc = entries[0].get("adc", cmap["adc"])
            table = entries[0].get("gains", cmap["gains"])
            gain = np.array([float(table[str(g)]) for g in range(int(gcode.max()) + 1)])[gcode]
            noise = rng.normal(0.0, ADC_NOISE_LSB, n)
            noise[pinned] = 0.0
            code = quantise(volts, gain, adc, noise)

            if faults and name == FAULT_FLAT_LINE[0]:
                m = _within(ms, FAULT_FLAT_LINE)
                if m.any():
                    code[m] = stuck.setdefault(name, code[np.argmax(m)])
                    value[m] = np.nan
            if faults and name == FAULT_MISSING_CJ[0]:
                present[:, col] = ~_within(ms, FAULT_MISSING_CJ)
            codes[:, col], gains[:, col], truth[:, col] = code, gcode, value

        corrupt_mask = np.zeros((n, nch), dtype=bool)
        if faults and b0 <= c_scan < b1:
            corrupt_mask[c_scan - b0, c_col] = True
        keep = present.ravel()
        rec = {
            "ms": (true_ms + shift[:, None]).ravel()[keep],
            "channel": np.broadcast_to(np.array(ids, dtype=np.int64), (n, nch)).ravel()[keep],
            "code": codes.ravel()[keep],
            "gain": gains.ravel()[keep],
            "true_s": true_ms.ravel()[keep] / 1000.0,
            "truth": truth.ravel()[keep],
        }
        last = b1 == n_scans
        if max_lines is not None and written + rec["ms"].size >= max_lines:
            rec = {k: v[: int(max_lines) - written] for k, v in rec.items()}
            last = True
        hit = np.flatnonzero(corrupt_mask.ravel()[keep][: rec["ms"].size])
        rec.update(names=names, last=last, corrupt=int(hit[0]) if hit.size else None)
        written += rec["ms"].size
        yield rec
        if last:
            return


def simulate_day(date, **options):
    """All of :func:`simulate_blocks` in one dict (``corrupt`` indexes the whole day)."""
    blocks = list(simulate_blocks(date, **options))
    out = {k: np.concatenate([b[k] for b in blocks])
           for k in ("ms", "channel", "code", "gain", "true_s", "truth")}
    out["names"] = blocks[0]["names"]
    out["corrupt"] = None
    offset = 0
    for b in blocks:
        if b["corrupt"] is not None:
            out["corrupt"] = offset + b["corrupt"]
        offset += b["ms"].size
    return out


def _garble_and_cut(text, lens, corrupt, cut_last):
    """Apply the text faults to one encoded chunk: a garbled code field, a cut last line."""
    ends = np.cumsum(lens)
    if corrupt is not None:
        a, b = ends[corrupt] - lens[corrupt], ends[corrupt]
        f = text[a:b].split(b",")
        line = b",".join([f[0], f[1], GARBAGE_CODE, f[3]])
        text = text[:a] + line + text[b:]
        ends[corrupt:] += len(line) - lens[corrupt]
    if cut_last and ends.size:
        start = int(ends[-2]) if ends.size > 1 else 0
        line = text[start:]
        cut = line.index(b",", line.index(b",") + 1) + 3  # two characters into the code
        text = text[:start] + line[:cut]
    return text


def make_day(out_dir="demo_logs", date="2026-11-03", *, seed=20261103, scan=10.0, faults=True,
             compress=False, hours=24.0, max_lines=None, map_path=DEFAULT_MAP, day_index=0):
    """Write one invented raw logger day; return its path.

    Parameters
    ----------
    out_dir : folder to write into (created if needed)
    date : the local date of the day, ``"YYYY-MM-DD"`` or a ``datetime.date``
    seed : seed of the random generator (the file is fully determined by the options)
    scan : scan interval [s]; every channel is sampled once per scan
    faults : plant the documented faults (see the module docstring)
    compress : write ``.csv.gz`` instead of ``.csv``
    hours : length of the day to simulate [h] from local midnight
    max_lines : stop after this many data lines (for benchmark files)
    map_path : the channel map the codes follow
    day_index : position of the day in a run of days (feeds the random streams)
    """
    if isinstance(date, str):
        date = dt.date.fromisoformat(date)
    out_dir = Path(out_dir)
    out_dir.mkdir(parents=True, exist_ok=True)
    path = out_dir / f"brewhouse-{date.isoformat()}.csv{'.gz' if compress else ''}"
    tmp = path.with_name(path.name + ".part")
    blocks = simulate_blocks(date, seed=seed, scan=scan, faults=faults, hours=hours,
                             max_lines=max_lines, map_path=map_path, day_index=day_index)
    with open(tmp, "wb") as raw:
        fh = (gzip.GzipFile(filename="", mode="wb", fileobj=raw, mtime=0, compresslevel=6)
              if compress else raw)
        try:
            nch = len(load_map(map_path)[1])
            fh.write((LOGGER_HEADER.format(scan=scan, nch=nch, seed=seed)
                      + "time,channel,code,gain\n").encode())
            for rec in blocks:
                text, lens = encode_lines(date, rec["ms"], rec["channel"], rec["code"], rec["gain"])
                fh.write(_garble_and_cut(text, lens, rec["corrupt"], faults and rec["last"]))
        finally:
            if compress:
                fh.close()
    tmp.replace(path)
    return path


def main(argv=None):
    p = argparse.ArgumentParser(
        description="Write invented raw days of the brewhouse logger (demo and benchmark data).",
        epilog="example: python demo_logs/make_day.py --out /tmp/inbox --days 3 --gzip",
    )
    p.add_argument("--out", default="demo_logs", help="output folder (default: demo_logs)")
    p.add_argument("--date", default="2026-11-03", help="first day, YYYY-MM-DD (default 2026-11-03)")
    p.add_argument("--days", type=int, default=1, help="consecutive days, one file each")
    p.add_argument("--scan", type=float, default=10.0, help="scan interval in seconds (default 10)")
    p.add_argument("--hours", type=float, default=24.0, help="hours of each day from midnight (default 24)")
    p.add_argument("--lines", type=int, default=None, help="stop each file after this many data lines")
    p.add_argument("--gzip", action="store_true", help="write .csv.gz")
    p.add_argument("--seed", type=int, default=20261103, help="random seed (default 20261103)")
    p.add_argument("--no-faults", action="store_true", help="plant no faults (clean files)")
    p.add_argument("--map", default=str(DEFAULT_MAP), help="channel map to follow")
    args = p.parse_args(argv)
    first = dt.date.fromisoformat(args.date)
    for d in range(args.days):
        t0 = _time.perf_counter()
        path = make_day(args.out, first + dt.timedelta(days=d), seed=args.seed, scan=args.scan,
                        faults=not args.no_faults, compress=args.gzip, hours=args.hours,
                        max_lines=args.lines, map_path=args.map, day_index=d)
        print(f"{path}  {path.stat().st_size / 1e6:.1f} MB  {_time.perf_counter() - t0:.1f} s")
    return 0


if __name__ == "__main__":
    sys.exit(main())
