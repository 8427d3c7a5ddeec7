"""Cross-channel inputs: derived channels and cold junctions (contract §4, §5).

A derived channel is computed at each record of the first channel its expression names, from
the other channels' latest good or suspect value on an earlier line, at or before the
record's time and no older than ``max_age`` (60 s by default). Logs are crafted so that the
expected value or ``input_missing`` of every derived row is known by construction.

An 8-bit ADC over 0 … 256 V with unit slopes makes a record's value equal to its code.
"""

from __future__ import annotations

import datetime as dt

import numpy as np
import pandas as pd
import pytest

UTC = dt.timezone.utc
T0 = dt.datetime(2026, 4, 1, 8, 0, tzinfo=UTC)
EXACT_ADC = {"bits": 8, "span": [0.0, 256.0], "coding": "straight"}

VOLTS = {"id": 1, "name": "pump_volts", "unit": "V", "chain": [{"stage": "linear", "slope": 1.0}]}
AMPS = {"id": 2, "name": "pump_amps", "unit": "A", "chain": [{"stage": "linear", "slope": 1.0, "unit": "A"}]}
POWER = {"name": "pump_power", "unit": "kW", "expression": "pump_volts * pump_amps / 1000"}


def at(seconds: float) -> str:
    return (T0 + dt.timedelta(seconds=seconds)).isoformat()


@pytest.fixture
def power_map(make_map):
    def build(**power_changes):
        return make_map([VOLTS, AMPS], [{**POWER, **power_changes}], adc=EXACT_ADC, gains={0: 1})

    return build


def power_rows(out) -> pd.DataFrame:
    return out.channel_rows("pump_power")


def test_power_from_volts_and_amps(power_map, write_log, convert):
    # 200 V x 10 A = 2000 W = 2 kW; 230 V x 12 A = 2.76 kW
    lines = [(at(0), 2, 10, 0), (at(1), 1, 200, 0), (at(2), 2, 12, 0), (at(3), 1, 230, 0)]
    result, out = convert(write_log(lines), power_map())
    assert result.exit_code == 0
    np.testing.assert_allclose(power_rows(out)["value"], [2.0, 2.76])
    assert power_rows(out)["unit"].tolist() == ["kW", "kW"]


def test_derived_row_follows_its_trigger_with_its_line(power_map, write_log, convert):
    lines = [(at(0), 2, 10, 0), (at(1), 1, 200, 0), (at(2), 2, 11, 0), (at(3), 1, 210, 0)]
    _, out = convert(write_log(lines, header=True), power_map())
    df = out.df
    assert df["channel"].tolist() == ["pump_amps", "pump_volts", "pump_power", "pump_amps", "pump_volts", "pump_power"]
    assert df["line"].tolist() == [2, 3, 3, 4, 5, 5]
    derived = df[df["channel"] == "pump_power"]
    assert derived["time"].tolist() == df[df["channel"] == "pump_volts"]["time"].tolist()
    assert out.table.column("channel_id").null_count == 2
    assert out.table.column("code").null_count == 2
    assert out.table.column("gain_code").null_count == 2
    assert derived["volts"].isna().all()


def test_derived_without_range_is_not_evaluated(power_map, write_log, convert):
    # contract §5: not_evaluated (2) only where no test at all applies, e.g. a derived
    # channel without range
    _, out = convert(write_log([(at(0), 2, 10, 0), (at(1), 1, 200, 0)]), power_map())
    row = power_rows(out).iloc[0]
    assert row["quality"] == 2 and row["flags"] == 0


def test_derived_with_range_is_tested(power_map, write_log, convert):
    lines = [(at(0), 2, 10, 0), (at(1), 1, 200, 0), (at(2), 2, 20, 0), (at(3), 1, 200, 0)]
    _, out = convert(write_log(lines), power_map(range=[0.0, 3.0]))
    assert power_rows(out)["quality"].tolist() == [1, 4]  # 2 kW fine, 4 kW above range
    assert out.names(power_rows(out).index[1]) == ["above_range"]


def test_input_not_seen_yet_is_missing(power_map, write_log, convert):
    _, out = convert(write_log([(at(0), 1, 200, 0), (at(1), 2, 10, 0), (at(2), 1, 200, 0)]), power_map())
    rows = power_rows(out)
    assert np.isnan(rows["value"].iloc[0]) and rows["quality"].iloc[0] == 9
    assert out.names(rows.index[0]) == ["input_missing"]
    assert rows["value"].iloc[1] == pytest.approx(2.0)


def test_input_older_than_max_age_is_missing(power_map, write_log, convert):
    # default max_age 60 s: an input 60 s old is still usable ("no older than"), 61 s is not
    lines = [(at(0), 2, 10, 0), (at(60), 1, 200, 0), (at(61), 1, 200, 0)]
    _, out = convert(write_log(lines), power_map())
    rows = power_rows(out)
    assert rows["value"].iloc[0] == pytest.approx(2.0)
    assert np.isnan(rows["value"].iloc[1])
    assert out.names(rows.index[1]) == ["input_missing"]


def test_max_age_of_the_derived_channel(power_map, write_log, convert):
    lines = [(at(0), 2, 10, 0), (at(5), 1, 200, 0), (at(6), 1, 200, 0)]
    _, out = convert(write_log(lines), power_map(max_age=5))
    assert [np.isnan(v) for v in power_rows(out)["value"]] == [False, True]


def test_input_only_on_a_later_line_is_missing(power_map, write_log, convert):
    # the amps record has an earlier time but comes on a later line: not usable
    lines = [(at(10), 1, 200, 0), (at(5), 2, 10, 0)]
    _, out = convert(write_log(lines), power_map())
    rows = power_rows(out)
    assert np.isnan(rows["value"].iloc[0])
    assert out.names(rows.index[0]) == ["input_missing"]


def test_input_from_an_earlier_line_with_a_later_time_is_missing(power_map, write_log, convert):
    # an input time after the record's time is not "at or before the record's time"
    lines = [(at(20), 2, 10, 0), (at(10), 1, 200, 0)]
    _, out = convert(write_log(lines), power_map())
    assert np.isnan(power_rows(out)["value"].iloc[0])


def test_input_is_the_latest_earlier_line_whose_time_fits(power_map, write_log, convert):
    # Contract §4, read as written: the candidates are earlier lines "whose time is at or before
    # the record's time and no older than max_age"; the last of them is taken. The input's last
    # earlier record (t = 20 s) is after the record's time (t = 10 s), so the older one
    # (t = 0, 10 A) is used.
    lines = [(at(0), 2, 10, 0), (at(20), 2, 12, 0), (at(10), 1, 200, 0)]
    _, out = convert(write_log(lines), power_map())
    assert power_rows(out)["value"].iloc[0] == pytest.approx(2.0)


def test_no_earlier_line_fits_gives_missing(power_map, write_log, convert):
    # both earlier amps records are after the record's time: input_missing
    lines = [(at(15), 2, 10, 0), (at(20), 2, 12, 0), (at(10), 1, 200, 0)]
    _, out = convert(write_log(lines), power_map())
    row = power_rows(out).iloc[0]
    assert np.isnan(row["value"]) and row["quality"] == 9


def test_bad_input_is_skipped_for_the_latest_good_one(power_map, write_log, convert):
    # code 255 is the 8-bit ADC's upper rail: saturated_high (bad), not a usable input; the
    # derived value uses the good 10 A before it
    lines = [(at(0), 2, 10, 0), (at(1), 2, 255, 0), (at(2), 1, 200, 0)]
    _, out = convert(write_log(lines), power_map())
    assert power_rows(out)["value"].iloc[0] == pytest.approx(2.0)


def test_unusable_trigger_gives_missing(power_map, write_log, convert):
    # gain code 5 is not in the table: the trigger itself has no value
    lines = [(at(0), 2, 10, 0), (at(1), 1, 200, 5)]
    _, out = convert(write_log(lines), power_map())
    row = power_rows(out).iloc[0]
    assert np.isnan(row["value"]) and row["quality"] == 9
    assert "input_missing" in out.names(power_rows(out).index[0])


def test_suspect_input_is_used_and_marks_the_result(make_map, write_log, convert):
    # Implementation's extension (contract silent): a value computed from a suspect input is
    # suspect too, with the extra reason input_suspect published in the flag metadata.
    amps = {**AMPS, "expect": [0.0, 5.0]}
    cmap = make_map([VOLTS, amps], [POWER], adc=EXACT_ADC, gains={0: 1})
    _, out = convert(write_log([(at(0), 2, 10, 0), (at(1), 1, 200, 0)]), cmap)
    row = power_rows(out).iloc[0]
    assert row["value"] == pytest.approx(2.0)
    assert row["quality"] == 3
    assert "input_suspect" in out.names(power_rows(out).index[0])


def test_two_derived_channels_on_one_trigger_follow_in_map_order(make_map, write_log, convert):
    derived = [POWER, {"name": "pump_ohms", "unit": "ohm", "expression": "pump_volts / pump_amps"}]
    cmap = make_map([VOLTS, AMPS], derived, adc=EXACT_ADC, gains={0: 1})
    _, out = convert(write_log([(at(0), 2, 10, 0), (at(1), 1, 200, 0)]), cmap)
    assert out.df["channel"].tolist() == ["pump_amps", "pump_volts", "pump_power", "pump_ohms"]
    np.testing.assert_allclose(out.df["value"][2:], [2.0, 20.0])


def test_unit_dimension_is_checked_with_pint(make_map, run_cli):
    # V x A is a power: kW and hp pass; kWh (energy) and kg do not
    for unit, code in [("kW", 0), ("hp", 0), ("kWh", 2), ("kg", 2)]:
        cmap = make_map([VOLTS, AMPS], [{**POWER, "unit": unit}], adc=EXACT_ADC)
        result = run_cli("check", cmap)
        assert result.exit_code == code, (unit, result.output)
        if code:
            assert "derived 'pump_power'" in result.output and "key 'unit'" in result.output


def test_cold_junction_from_another_channel(make_map, write_log, convert):
    # Thermocouple law (common practice, no source): with zero emf at the terminals the hot
    # junction is at the cold-junction temperature, whatever the type's reference function.
    # Channel 0 is a 10 mV/degC sensor (value = code * 10 mV * 100 degC/V = code degC);
    # channel 4 is a type K thermocouple on a two's complement ADC, code 0 = 0 V.
    cmap = make_map([
        {"id": 0, "name": "terminal", "unit": "degC", "chain": [{"stage": "linear", "slope": 100.0}],
         "adc": {"bits": 8, "span": [0.0, 2.56], "coding": "straight"}},
        {"id": 4, "name": "kettle", "unit": "degC",
         "chain": [{"stage": "thermocouple", "type": "K", "cold_junction": "terminal"}],
         "adc": {"bits": 16, "span": [-0.1, 0.1], "coding": "twos"}},
    ], gains={0: 1})
    lines = [(at(0), 4, 0, 0), (at(1), 0, 25, 0), (at(2), 4, 0, 0), (at(70), 4, 0, 0)]
    _, out = convert(write_log(lines), cmap)
    kettle = out.channel_rows("kettle")
    assert np.isnan(kettle["value"].iloc[0]) and out.names(kettle.index[0]) == ["input_missing"]
    assert kettle["value"].iloc[1] == pytest.approx(25.0, abs=1e-6)
    assert np.isnan(kettle["value"].iloc[2]) and kettle["quality"].iloc[2] == 9  # 69 s old


def test_derived_channel_takes_the_map_level_qc_defaults(make_map, write_log, convert):
    # Contract §6: tests come "per channel, from the map (range, expect, qc) and map-level [qc]
    # defaults" -- a derived channel is a channel too. max_gap = 5 s: the derived row after a
    # 20 s pause is gap_before (suspect); with a test applied, quality is 1, not 2.
    cmap = make_map([VOLTS, AMPS], [POWER], adc=EXACT_ADC, gains={0: 1}, qc={"max_gap": 5.0})
    lines = [(at(0), 2, 10, 0), (at(1), 1, 200, 0), (at(2), 2, 10, 0), (at(3), 1, 200, 0),
             (at(22), 2, 10, 0), (at(23), 1, 200, 0)]
    _, out = convert(write_log(lines), cmap)
    rows = power_rows(out)
    assert rows["quality"].tolist() == [1, 1, 3]
    assert "gap_before" in out.names(rows.index[2])
