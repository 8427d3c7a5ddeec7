"""A small crafted day for the report tests.

The day (invented numbers, 2 hours at a 10 s scan) has, on a 12-bit two's complement ADC
over ±2.048 V (1 mV per code; common practice for a 2.048 V reference, no source):

* ``bench_volts`` [V], gain code 0 (×1): a sine of ±1.5 V, healthy, and one spike;
* ``vessel_pressure`` [kPa], gain code 1 (×10): healthy, except 20 minutes logged with gain
  code 2 (×100), where the codes sit at the upper rail (2047);
* ``beam_strain`` [microstrain], gain code 0: healthy;
* ``loop_level`` [percent], 4-20 mA over 200 ohm on its own 12-bit straight-binary ADC over
  0 … 4.096 V: healthy, except 10 minutes of a broken loop at code 0 (the lower rail);
* ``probe_volts`` [V], gain code 0 (×1): a small signal of ±0.1 V, which gain code 1 (×10)
  would still keep inside the span;
* ``double_volts`` [V]: derived, twice ``bench_volts``.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

MAP = """
[map]
name = "report-test-rig"
timezone = "Europe/Dublin"

[adc]
bits = 12
span = [-2.048, 2.048]
coding = "twos"

[gains]
0 = 1
1 = 10
2 = 100

[[channel]]
id = 1
name = "bench_volts"
unit = "V"
description = "Bench supply monitor"
range = [-2.0, 2.0]
expect = [-1.8, 1.95]
chain = [ { stage = "linear", slope = 1.0, intercept = 0.0 } ]

[[channel]]
id = 2
name = "vessel_pressure"
unit = "kPa"
range = [-5.0, 500.0]
expect = [0.0, 300.0]
chain = [ { stage = "linear", slope = 1000.0, intercept = 0.0 } ]

[[channel]]
id = 3
name = "beam_strain"
unit = "microstrain"
range = [-1500.0, 1500.0]
chain = [ { stage = "linear", slope = 1000.0, intercept = 0.0 } ]

[[channel]]
id = 4
name = "loop_level"
unit = "percent"
range = [0.0, 100.0]
chain = [ { stage = "current_loop", shunt = 200.0, low = 0.0, high = 100.0 } ]

[channel.adc]
bits = 12
span = [0.0, 4.096]
coding = "straight"

[channel.gains]
0 = 1

[[channel]]
id = 5
name = "probe_volts"
unit = "V"
range = [-2.0, 2.0]
chain = [ { stage = "linear", slope = 1.0, intercept = 0.0 } ]

[[derived]]
name = "double_volts"
unit = "V"
expression = "bench_volts * 2"
"""

CHANNELS = ["bench_volts", "vessel_pressure", "beam_strain", "loop_level", "probe_volts", "double_volts"]
SCANS = 720
SPIKE_SCAN = 333
SPIKE_CODE = 1990


def write_day(folder: Path) -> tuple[Path, Path]:
    rng = np.random.default_rng(20)
    start = np.datetime64("2026-06-10T08:00:00", "s")  # local summer time (UTC+1) in the map's zone
    lines = ["time,channel,code,gain"]
    for k in range(SCANS):
        stamp = start + np.timedelta64(10 * k, "s")
        phase = 2 * np.pi * k / 180
        volts = int(1500 * np.sin(phase)) + int(rng.integers(-3, 4))
        if k == SPIKE_SCAN:
            volts = SPIKE_CODE
        if 300 <= k < 420:  # 20 minutes with gain code 2 instead of 1: clipped at the upper rail
            pressure = (2047, 2)
        else:
            pressure = (int(400 + 40 * np.sin(phase)) + int(rng.integers(-2, 3)), 1)
        strain = int(900 * np.cos(phase)) + int(rng.integers(-3, 4))
        loop = 0 if 500 <= k < 560 else int(2400 + 400 * np.sin(phase))  # 12 mA = 2.4 V over 200 ohm
        probe = int(100 * np.sin(phase)) + int(rng.integers(-2, 3))
        lines += [f"{stamp},1,{volts},0", f"{stamp},2,{pressure[0]},{pressure[1]}", f"{stamp},3,{strain},0", f"{stamp},4,{loop},0",
                  f"{stamp},5,{probe},0"]
    (folder / "rig.toml").write_text(MAP)
    raw = folder / "rig-2026-06-10.csv"
    raw.write_text("\n".join(lines) + "\nthis line is not a record\n")
    return folder / "rig.toml", raw
