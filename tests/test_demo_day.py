"""The demo day: every planted fault is found under the right reason at the right time, and
no clean channel carries a false flag (issue 4's done-when). The faults are planted by
``demo_logs/make_day.py`` (schedule in ``demo_logs/README.md``); times here are UTC, which
is the demo zone's (Europe/Dublin) offset in November.
"""

from __future__ import annotations

from pathlib import Path

import pytest

from countmill.convert import convert_file

ROOT = Path(__file__).resolve().parents[1]
DEMO = ROOT / "demo_logs" / "brewhouse-2026-11-03.csv"
MAP = ROOT / "channel_maps" / "brewhouse.toml"
STEP_BACK = "2026-11-03T16:59:30"  # the logger resync: the clock steps back 30 s at 17:00

# (channel, reason) -> (first, last) time to the second, UTC
PLANTED = {
    ("co2_line_pressure", "loop_fault"): ("2026-11-03T10:20:00", "2026-11-03T10:34:50"),
    ("co2_line_pressure", "below_range"): ("2026-11-03T10:20:00", "2026-11-03T10:34:50"),
    ("co2_line_pressure", "outside_expected"): ("2026-11-03T10:20:00", "2026-11-03T10:34:50"),
    ("co2_line_pressure", "saturated_low"): ("2026-11-03T10:20:10", "2026-11-03T10:34:50"),
    ("mash_tun_temp", "saturated_high"): ("2026-11-03T11:00:00", "2026-11-03T11:59:50"),
    ("mash_tun_temp", "below_range"): ("2026-11-03T11:00:00", "2026-11-03T11:59:50"),
    ("mash_tun_temp", "outside_expected"): ("2026-11-03T11:00:00", "2026-11-03T11:59:50"),
    ("fv3_temp", "open_circuit"): ("2026-11-03T09:40:00", "2026-11-03T09:59:50"),
    ("terminal_block", "gap_before"): ("2026-11-03T12:30:00", "2026-11-03T12:30:00"),
    ("kettle_temp", "input_missing"): ("2026-11-03T12:20:50", "2026-11-03T12:29:50"),
    ("chiller_outlet_temp", "input_missing"): ("2026-11-03T12:20:50", "2026-11-03T12:29:50"),
    ("cold_room_temp", "calibration_overdue"): ("2026-11-03T12:00:00", "2026-11-03T23:59:20"),
    ("glycol_return_temp", "flat_line"): ("2026-11-03T16:10:00", "2026-11-03T16:29:50"),
    ("pump_amps", "spike"): ("2026-11-03T12:45:00", "2026-11-03T12:45:00"),
    ("pump_amps", "outside_expected"): ("2026-11-03T12:45:00", "2026-11-03T12:45:00"),
    # the pump-current spike makes the next pump-power row suspect through its input
    ("pump_power", "input_suspect"): ("2026-11-03T12:45:10", "2026-11-03T12:45:10"),
    # the very first scan: pump_power's trigger comes before any pump current
    ("pump_power", "input_missing"): ("2026-11-03T00:00:00", "2026-11-03T00:00:00"),
}


@pytest.fixture(scope="module")
def demo_result(tmp_path_factory):
    out = tmp_path_factory.mktemp("demo") / "day.parquet"
    return convert_file(DEMO, MAP, out)


def test_every_planted_fault_and_nothing_else(demo_result):
    found = {}
    for event in demo_result.flag_events:
        key = (event["channel"], event["flag"])
        if event["flag"] == "time_out_of_order":
            assert event["first"][:19] == event["last"][:19] == STEP_BACK, event
            continue
        found[key] = (event["first"][:19], event["last"][:19])
    assert found == PLANTED


def test_the_clock_step_back_is_seen_once_by_every_channel(demo_result):
    channels = {e["channel"] for e in demo_result.flag_events if e["flag"] == "time_out_of_order"}
    assert len(channels) == 20  # 19 measured channels and the derived pump power
    assert all(e["count"] == 1 for e in demo_result.flag_events if e["flag"] == "time_out_of_order")


def test_damaged_lines_are_the_only_rejects(demo_result):
    assert demo_result.rejects == 2
    assert demo_result.records + demo_result.rejects == demo_result.data_lines


def test_the_swapped_fermenter_sensor_reads_on_across_the_swap(demo_result):
    # fv1's thermistor is replaced at 14:00 local (a second revision in the map); with the
    # right revision applied on each side, the fermenter temperature does not jump.
    import pandas as pd
    import pyarrow.parquet as pq

    df = pq.read_table(demo_result.output, columns=["time", "channel", "value"]).to_pandas()
    fv1 = df[df.channel == "fv1_temp"].set_index("time")["value"]
    swap = pd.Timestamp("2026-11-03T14:00:00Z")
    before = fv1[(fv1.index >= swap - pd.Timedelta("5min")) & (fv1.index < swap)]
    after = fv1[(fv1.index >= swap) & (fv1.index < swap + pd.Timedelta("5min"))]
    assert abs(after.mean() - before.mean()) < 0.3
