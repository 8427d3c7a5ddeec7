"""Channel-map errors (contract §2, §4): exit code 2, one line naming file, channel and key.

Each case writes a map that is wrong in exactly one way and runs ``countmill check`` (and,
where a side effect could matter, ``countmill convert``) through click's CliRunner. The
message must be a single line that names the map file, the channel by id and name (or the
derived channel by name) and the key at fault.
"""

from __future__ import annotations

import datetime as dt
from pathlib import Path

import pytest

HEAD = '[map]\nname = "errors"\ntimezone = "UTC"\n[adc]\nbits = 12\nspan = [0.0, 4.096]\n'

GOOD_CHAIN = [{"stage": "linear", "slope": 1.0}]


def temp(**changes) -> dict:
    """Channel 3 'temp' (degC), a 10 mV/degC sensor, changed as asked."""
    entry = {"id": 3, "name": "temp", "unit": "degC", "chain": [{"stage": "linear", "slope": 100.0}]}
    entry.update(changes)
    return entry


def single_message(result) -> str:
    text = result.output.strip()
    assert "\n" not in text, text
    assert "Traceback" not in text
    return text


def assert_names(message: str, map_path: Path, *parts: str) -> None:
    assert str(map_path) in message, message
    for part in parts:
        assert part in message, (part, message)


CHANNEL_CASES = {
    # case: (channel entries, parts the message must contain besides the file)
    "unknown stage": ([temp(chain=[{"stage": "lineer", "slope": 1.0}])], ["key 'chain[1].stage'", "lineer"]),
    "misspelt parameter": ([temp(chain=[{"stage": "linear", "slop": 1.0}])], ["key 'chain[1].slop'"]),
    "misspelt second stage parameter": (
        [temp(chain=[{"stage": "current_excitation", "amps": 0.001}, {"stage": "rtd", "r_0": 100.0}])],
        ["key 'chain[2].r_0'"],
    ),
    "misspelt channel key": ([temp(rnage=[0, 100])], ["key 'rnage'"]),
    "misspelt qc key": ([temp(qc={"spkie": 1.0})], ["key 'qc.spkie'"]),
    "wrong unit string": ([temp(unit="degreez")], ["key 'unit'", "degreez"]),
    "stage input unit mismatch (rtd right after the ADC)": ([temp(chain=[{"stage": "rtd"}])], ["key 'chain[1]'", "rtd", "ohm"]),
    "thermistor fed volts": ([temp(chain=[{"stage": "thermistor", "r25": 10000.0, "beta": 3950.0}])], ["key 'chain[1]'", "ohm"]),
    "channel unit of another dimension": (
        [temp(unit="kPa", chain=[{"stage": "current_excitation", "amps": 0.001}, {"stage": "rtd"}])],
        ["key 'unit'", "kPa", "degC"],
    ),
    "two revisions without from": ([temp(), temp()], ["key 'from'"]),
    "two revisions with the same from": (
        [temp(**{"from": dt.datetime(2026, 3, 1, 12)}), temp(**{"from": dt.datetime(2026, 3, 1, 12)})],
        ["key 'from'", "same"],
    ),
    "calibration with fewer points than degree + 1": (
        [temp(calibration={"points": [[1.0, 1.1], [2.0, 2.1]], "degree": 2})],
        ["key 'calibration.points'", "3"],
    ),
    "calibration with one point": ([temp(calibration={"points": [[1.0, 1.1]]})], ["key 'calibration.points'"]),
    "calibration with all-equal indicated values": (
        [temp(calibration={"points": [[20.0, 20.1], [20.0, 20.4], [20.0, 19.9]], "degree": 1})],
        ["key 'calibration.points'"],
    ),
    "range low above high": ([temp(range=[100.0, 0.0])], ["key 'range'"]),
    "unknown cold-junction channel": (
        [temp(chain=[{"stage": "thermocouple", "type": "K", "cold_junction": "nowhere"}])],
        ["key 'chain'", "nowhere"],
    ),
    "thermocouple reads itself": (
        [temp(chain=[{"stage": "thermocouple", "type": "K", "cold_junction": "temp"}])],
        ["key 'chain[1]'"],
    ),
    "table x not increasing": ([temp(chain=[{"stage": "table", "points": [[0.0, 0.0], [2.0, 1.0], [1.0, 2.0]]}])], ["key 'chain[1]"]),
    "gain not positive": ([temp(gains={0: 0.0})], ["key 'gains'"]),
}


@pytest.mark.parametrize("case", list(CHANNEL_CASES))
def test_channel_errors_name_file_channel_and_key(make_map, run_cli, case):
    channels, parts = CHANNEL_CASES[case]
    path = make_map(channels)
    result = run_cli("check", path)
    assert result.exit_code == 2, result.output
    assert_names(single_message(result), path, "channel 3 'temp'", *parts)


def test_calibration_degree_needs_degree_plus_one_points_exactly_enough_is_fine(make_map, run_cli):
    ok = make_map([temp(calibration={"points": [[0.0, 0.1], [1.0, 1.0], [2.0, 2.2]], "degree": 2})])
    assert run_cli("check", ok).exit_code == 0


def test_ill_conditioned_calibration_is_a_map_error(make_map, run_cli):
    # Indicated values that agree to 1e-9 of their size cannot fix a quadratic: the
    # Vandermonde matrix is numerically singular (its condition number is far above 1e12).
    points = [[1000.0, 1.0], [1000.0 + 1e-7, 2.0], [1000.0 + 2e-7, 3.0]]
    path = make_map([temp(calibration={"points": points, "degree": 2})])
    result = run_cli("check", path)
    assert result.exit_code == 2
    assert_names(single_message(result), path, "channel 3 'temp'", "key 'calibration.points'")


def test_cold_junction_cycle_names_the_channels(make_map, run_cli):
    channels = [
        {"id": 1, "name": "probe_a", "unit": "degC", "chain": [{"stage": "thermocouple", "type": "K", "cold_junction": "probe_b"}]},
        {"id": 2, "name": "probe_b", "unit": "degC", "chain": [{"stage": "thermocouple", "type": "T", "cold_junction": "probe_a"}]},
    ]
    path = make_map(channels)
    result = run_cli("check", path)
    assert result.exit_code == 2
    message = single_message(result)
    assert_names(message, path, "cycle", "channel 1 'probe_a'", "channel 2 'probe_b'", "cold_junction")


def test_unknown_time_zone(make_map, run_cli):
    path = make_map([temp()], timezone="Europe/Berlim")
    result = run_cli("check", path)
    assert result.exit_code == 2
    assert_names(single_message(result), path, "key 'map.timezone'", "Europe/Berlim")


def test_invalid_toml(write_map, run_cli):
    path = write_map(HEAD + '[[channel]]\nid = 3\nname = "temp\n')
    result = run_cli("check", path)
    assert result.exit_code == 2
    assert_names(single_message(result), path, "TOML", "line 9")


def test_missing_map_file(run_cli, tmp_path):
    result = run_cli("check", tmp_path / "nowhere.toml")
    assert result.exit_code == 2
    assert_names(single_message(result), tmp_path / "nowhere.toml")


def test_missing_required_section(write_map, run_cli):
    path = write_map('[map]\nname = "x"\n[[channel]]\nid = 1\nname = "a"\nunit = "V"\nchain = [{ stage = "linear", slope = 1.0 }]\n')
    result = run_cli("check", path)
    assert result.exit_code == 2
    assert_names(single_message(result), path, "key 'adc'")


# --------------------------------------------------------------------------- derived channels

INJECTIONS = [
    "__import__('os')",
    "__import__('os').system('touch SENTINEL')",
    "open('SENTINEL', 'w')",
    "temp.real",
    "temp.__class__",
    "(lambda: temp)()",
    "lambda: temp",
    "[t for t in (temp,)]",
    "{t: 1 for t in (temp,)}",
    "temp[0]",
    "'temp'",
    "temp * 'x'",
    "temp ** 10**10",
    "temp ** 1e10",
    "temp ** (10 ** 10)",
    "2 ** 2 ** 2 ** 2 ** 2 ** temp",
    "eval('temp')",
    "getattr(temp, 'real')",
    "temp if temp else 0",
    "temp > 0",
    "(temp := 1)",
    "temp; import os",
]


@pytest.mark.parametrize("expression", INJECTIONS)
def test_expression_injection_is_refused_without_side_effect(make_map, write_log, run_cli, tmp_path, monkeypatch, expression):
    monkeypatch.chdir(tmp_path)  # any file the expression might create would land here
    path = make_map([temp()], [{"name": "doubled", "unit": "degC", "expression": expression}])
    raw = write_log([("2026-01-01T00:00:00", 3, 100, 0)])
    result = run_cli("convert", raw, "--map", path, "-o", tmp_path / "out.parquet")
    assert result.exit_code == 2, result.output
    assert_names(single_message(result), path, "derived 'doubled'", "key 'expression'")
    assert sorted(p.name for p in tmp_path.iterdir()) == ["map.toml", "raw.csv"]  # nothing written, no SENTINEL


def test_allowed_expression_language_loads(make_map, run_cli):
    expression = "abs(temp) + sqrt(temp ** 2) - max(temp, temp * 2) + min(temp, -temp) + temp * exp(log(2.0)) / 2"
    path = make_map([temp()], [{"name": "mixed", "unit": "degC", "expression": expression}])
    result = run_cli("check", path)
    assert result.exit_code == 0, result.output


@pytest.mark.parametrize(
    "expression, unit",
    [
        ("temp * temp", "degC"),  # temperature squared is not a temperature
        ("supply * current / 1000", "kWh"),  # power is not energy
        ("supply / current", "W"),  # ohms are not watts
    ],
)
def test_derived_unit_of_the_wrong_dimension(make_map, run_cli, expression, unit):
    channels = [
        temp(),
        {"id": 1, "name": "supply", "unit": "V", "chain": GOOD_CHAIN},
        {"id": 2, "name": "current", "unit": "A", "chain": [{"stage": "linear", "slope": 1.0, "unit": "A"}]},
    ]
    path = make_map(channels, [{"name": "calc", "unit": unit, "expression": expression}])
    result = run_cli("check", path)
    assert result.exit_code == 2
    assert_names(single_message(result), path, "derived 'calc'", "key 'unit'")


def test_derived_sum_of_different_dimensions(make_map, run_cli):
    channels = [temp(), {"id": 1, "name": "supply", "unit": "V", "chain": GOOD_CHAIN}]
    path = make_map(channels, [{"name": "calc", "unit": "V", "expression": "supply + temp"}])
    result = run_cli("check", path)
    assert result.exit_code == 2
    assert_names(single_message(result), path, "derived 'calc'", "key 'expression'")


def test_derived_naming_an_unknown_channel(make_map, run_cli):
    path = make_map([temp()], [{"name": "calc", "unit": "degC", "expression": "tmep * 2"}])
    result = run_cli("check", path)
    assert result.exit_code == 2
    assert_names(single_message(result), path, "derived 'calc'", "key 'expression'", "tmep")


def test_derived_name_taken_by_a_channel(make_map, run_cli):
    path = make_map([temp()], [{"name": "temp", "unit": "degC", "expression": "temp * 2"}])
    result = run_cli("check", path)
    assert result.exit_code == 2
    assert_names(single_message(result), path, "derived 'temp'", "key 'name'")


def test_map_error_in_convert_writes_nothing(make_map, write_log, run_cli, tmp_path):
    path = make_map([temp(unit="degreez")])
    raw = write_log([("2026-01-01T00:00:00", 3, 100, 0), "not a line"])
    for out in ("out.parquet", "out.csv"):
        result = run_cli("convert", raw, "--map", path, "-o", tmp_path / out)
        assert result.exit_code == 2
    assert sorted(p.name for p in tmp_path.iterdir()) == ["map.toml", "raw.csv"]


# --- expressions that are allowed --------------------------------------------------------


@pytest.mark.parametrize(
    "expression, unit",
    [
        ("max(pump_volts, 0)", "V"),  # a clamp at zero: the number takes the volts' dimension
        ("min(pump_volts / pump_amps, 2)", "ohm"),
        ("pump_volts * 2**(1+1)", "V"),  # a constant exponent may be an expression of numbers
        ("pump_volts * 2**3**2", "V"),
        ("2 ** (pump_volts / pump_volts)", "1"),  # a variable power of a dimensionless base
    ],
)
def test_allowed_expressions_load(tmp_path, expression, unit):
    from countmill.chanmap import parse_map

    text = f"""
[map]
name = "x"
[adc]
bits = 12
span = [0.0, 4.096]
[[channel]]
id = 1
name = "pump_volts"
unit = "V"
chain = [{{ stage = "linear", slope = 1.0, intercept = 0.0 }}]
[[channel]]
id = 2
name = "pump_amps"
unit = "A"
chain = [{{ stage = "linear", slope = 1.0, intercept = 0.0 }}]
[[derived]]
name = "d"
unit = "{unit}"
expression = "{expression}"
"""
    cmap = parse_map(text.encode(), "x.toml")
    assert cmap.derived[0].expression.text == expression
