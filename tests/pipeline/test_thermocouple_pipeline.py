"""Thermocouples end to end: raw codes → cold-junction-compensated °C, through the CLI.

The expected temperatures come from the independent PyPI package ``thermocouple-its90``
(NIST ITS-90 reference functions): T = inverse(emf_measured + E(T_cj)).
"""

from __future__ import annotations

import json

import numpy as np
import pyarrow.parquet as pq
import pytest
import thermocouple_its90
from click.testing import CliRunner

from countmill.cli import cli
from countmill.flags import Flag

MAP = """
[map]
name = "tc-check"
timezone = "UTC"

[adc]
bits = 16
span = [-5.0, 5.0]
coding = "twos"

[gains]
0 = 1
2 = 100

[[channel]]
id = 0
name = "terminal_block"
unit = "{cj_unit}"
chain = [{{ stage = "linear", slope = {cj_slope}, intercept = {cj_intercept} }}]

[[channel]]
id = 1
name = "kettle"
unit = "degC"
chain = [{{ stage = "thermocouple", type = "K", cold_junction = "terminal_block" }}]

[[channel]]
id = 2
name = "fixed_ref"
unit = "degC"
chain = [{{ stage = "thermocouple", type = "J", cold_junction = 0.0 }}]
"""

LSB = 10.0 / 65536  # [V] 16-bit over ±5 V (contract §4 ADC transfer)


def _code(volts_at_adc: float) -> int:
    return int(round(volts_at_adc / LSB))


def _write(tmp_path, lines, cj_unit="degC", cj_slope=100.0, cj_intercept=0.0):
    map_path = tmp_path / "map.toml"
    map_path.write_text(MAP.format(cj_unit=cj_unit, cj_slope=cj_slope, cj_intercept=cj_intercept))
    raw = tmp_path / "day.csv"
    raw.write_text("time,channel,code,gain\n" + "\n".join(lines) + "\n")
    return map_path, raw


def _convert(tmp_path, map_path, raw, *extra):
    out = tmp_path / "out.parquet"
    result = CliRunner().invoke(cli, ["convert", str(raw), "--map", str(map_path), "-o", str(out), "-q", *extra])
    assert result.exit_code == 0, result.output
    return pq.read_table(out).to_pandas()


def test_kettle_reads_its90_temperature_with_cold_junction(tmp_path):
    k = thermocouple_its90.get("K")
    cj_code = _code(0.2500)  # 25.00 degC at 10 mV/degC
    t_cj = cj_code * LSB * 100.0
    lines = [f"2026-11-03T08:00:00,0,{cj_code},0"]
    expected = []
    for i, t_true in enumerate([20.0, 65.0, 100.0, 250.0]):
        emf_mv = k.emf(t_true) - k.emf(t_cj)  # what the thermocouple gives against 25 degC
        code = _code(emf_mv / 1000.0 * 100.0)  # gain 100: the ADC sees 100 times the emf
        volts = code * LSB / 100.0
        expected.append(k.temperature(volts * 1000.0 + k.emf(t_cj)))
        lines.append(f"2026-11-03T08:00:{i + 1:02d},1,{code},2")
    map_path, raw = _write(tmp_path, lines)
    df = _convert(tmp_path, map_path, raw)
    kettle = df[df.channel == "kettle"]
    np.testing.assert_allclose(kettle.value, expected, atol=1e-6)  # vs thermocouple-its90
    assert (kettle.quality == 1).all()


def test_cold_junction_in_fahrenheit_is_converted(tmp_path):
    # The terminal-block channel reports degF; the thermocouple stage still gets degC.
    k = thermocouple_its90.get("K")
    cj_code = _code(0.2500)
    t_cj_c = cj_code * LSB * 100.0
    lines = [f"2026-11-03T08:00:00,0,{cj_code},0", f"2026-11-03T08:00:01,1,{_code(0.2)},2"]
    map_path, raw = _write(tmp_path, lines, cj_unit="degF", cj_slope=180.0, cj_intercept=32.0)
    df = _convert(tmp_path, map_path, raw)
    value = df[df.channel == "kettle"].value.iloc[0]
    volts = _code(0.2) * LSB / 100.0
    assert value == pytest.approx(k.temperature(volts * 1000.0 + k.emf(t_cj_c)), abs=1e-6)


def test_cold_junction_missing_too_old_or_later(tmp_path):
    code = _code(0.2)
    lines = [
        f"2026-11-03T08:00:00,1,{code},2",  # no cold junction yet -> input_missing
        f"2026-11-03T08:00:05,0,{_code(0.25)},0",
        f"2026-11-03T08:00:30,1,{code},2",  # 25 s old: used
        f"2026-11-03T08:01:06,1,{code},2",  # 61 s old (> max_age 60 s): input_missing
        f"2026-11-03T08:02:00,1,{code},2",  # the next cold junction is on a later line: not used
        f"2026-11-03T08:01:59,0,{_code(0.25)},0",  # (earlier time, but a later line)
        f"2026-11-03T08:02:01,1,{code},2",  # now it is on an earlier line: used
    ]
    map_path, raw = _write(tmp_path, lines)
    for chunk in ("1", "2", "1000"):
        df = _convert(tmp_path, map_path, raw, "--chunk-rows", chunk)
        kettle = df[df.channel == "kettle"]
        missing = (kettle["flags"] & int(Flag.INPUT_MISSING)) != 0
        assert missing.tolist() == [True, False, True, True, False]
        assert kettle.quality.tolist() == [9, 1, 9, 9, 1]
        assert kettle.value.isna().tolist() == missing.tolist()


def test_fixed_cold_junction_and_outside_model(tmp_path):
    j = thermocouple_its90.get("J")
    code = _code(0.5269)  # 5.269 mV at gain 100: type J 100 degC against 0 degC (NIST Monograph 175)
    lines = [f"2026-11-03T08:00:00,2,{code},2", "2026-11-03T08:00:01,2,32000,0"]  # 4.88 V at gain 1: far above type J's 69.553 mV
    map_path, raw = _write(tmp_path, lines)
    df = _convert(tmp_path, map_path, raw)
    fixed = df[df.channel == "fixed_ref"]
    assert fixed.value.iloc[0] == pytest.approx(j.temperature(code * LSB / 100.0 * 1000.0), abs=1e-6)
    assert fixed.value.iloc[0] == pytest.approx(100.0, abs=0.01)
    assert np.isnan(fixed.value.iloc[1])
    assert fixed["flags"].iloc[1] & int(Flag.OUTSIDE_MODEL)


def test_describe_shows_cold_junction_dependency(tmp_path):
    map_path, _ = _write(tmp_path, [])
    result = CliRunner().invoke(cli, ["describe", str(map_path)])
    assert result.exit_code == 0
    assert "reads channel 'terminal_block'" in result.output


def test_provenance_names_the_cold_junction(tmp_path):
    map_path, raw = _write(tmp_path, [f"2026-11-03T08:00:00,0,{_code(0.25)},0"])
    _convert(tmp_path, map_path, raw)
    meta = json.loads(pq.read_schema(tmp_path / "out.parquet").metadata[b"countmill"])
    assert meta["channels"]["kettle"]["chain"][0]["cold_junction"] == "terminal_block"
