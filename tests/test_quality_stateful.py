"""Quality tests that need history, calibration, revisions and time zones (contract §4, §6).

The value tests follow the intent of U.S. IOOS QARTOD, Manual for Real-Time Quality Control
of In-situ Temperature and Salinity Data, version 2.1 (2020): gross range, spike, rate of
change and flat line. The exact rules checked here are the contract's (§6), which are stated
as formulas; each crafted log below has its expected flags worked out by hand from them.

Most channels here use an 8-bit ADC over 0 … 256 V and a unit slope, so the value of a
record is its code exactly (LSB = 256 V / 2^8 = 1 V), and the arithmetic of the tests is
exact.
"""

from __future__ import annotations

import datetime as dt
import zoneinfo

import numpy as np
import pandas as pd
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

UTC = dt.timezone.utc
T0 = dt.datetime(2026, 1, 1, tzinfo=UTC)

#: value = code exactly (8-bit ADC, 1 V per code, unit slope); codes 1 … 254 avoid the rails
EXACT_ADC = {"bits": 8, "span": [0.0, 256.0], "coding": "straight"}


def level(id: int = 1, name: str = "level", **more) -> dict:
    entry = {"id": id, "name": name, "unit": "degC", "chain": [{"stage": "linear", "slope": 1.0}]}
    entry.update(more)
    return entry


def at(seconds: float) -> str:
    return (T0 + dt.timedelta(seconds=seconds)).isoformat().replace("+00:00", "Z")


def series_log(write_log, times, values, channel_id: int = 1, name: str = "raw.csv"):
    return write_log([(at(t), channel_id, v, 0) for t, v in zip(times, values)], name)


def flagged(out, reason: str, channel: str | None = None) -> list[bool]:
    rows = out.df.index if channel is None else out.channel_rows(channel).index
    return [reason in out.names(i) for i in rows]


# --------------------------------------------------------------------------- gross range


def test_gross_range_bad_and_expect_suspect(make_map, write_log, convert):
    # QARTOD gross range test (manual v2.1 above): outside the sensor range -> bad (4),
    # outside the operating range -> suspect (3).
    cmap = make_map([level(range=[10.0, 200.0], expect=[20.0, 100.0])], adc=EXACT_ADC, gains={0: 1})
    values = [5, 10, 15, 20, 100, 150, 200, 201]
    _, out = convert(series_log(write_log, range(0, 80, 10), values), cmap)
    assert out.df["quality"].tolist() == [4, 3, 3, 1, 1, 3, 3, 4]
    assert out.all_names() == [
        ["below_range", "outside_expected"], ["outside_expected"], ["outside_expected"], [], [],
        ["outside_expected"], ["outside_expected"], ["above_range", "outside_expected"],
    ]


# --------------------------------------------------------------------------- spike


def test_spike_flags_the_lone_peak_only(make_map, write_log, convert):
    # QARTOD spike test (manual v2.1), contract form: |x[n] - (x[n-1] + x[n+1]) / 2| > spike.
    # 14 among 10s: |14 - 10| = 4 > 3; its neighbours: |10 - (10 + 14)/2| = 2, not flagged.
    cmap = make_map([level(qc={"spike": 3.0})], adc=EXACT_ADC, gains={0: 1})
    _, out = convert(series_log(write_log, range(0, 60, 10), [10, 10, 10, 14, 10, 10]), cmap)
    assert flagged(out, "spike") == [False, False, False, True, False, False]
    assert out.df["quality"].tolist() == [1, 1, 1, 3, 1, 1]


def test_spike_threshold_is_strict(make_map, write_log, convert):
    # |13 - 10| = 3 is not > 3; |14 - 10| = 4 is; the others are 1.5, 0 and 2 away.
    cmap = make_map([level(qc={"spike": 3.0})], adc=EXACT_ADC, gains={0: 1})
    _, out = convert(series_log(write_log, range(0, 70, 10), [10, 13, 10, 10, 10, 14, 10]), cmap)
    assert flagged(out, "spike") == [False, False, False, False, False, True, False]


def test_spike_first_and_last_records_are_not_judged(make_map, write_log, convert):
    # The ends have one neighbour only; their neighbours are 10 away from (30 + 10) / 2.
    cmap = make_map([level(qc={"spike": 3.0})], adc=EXACT_ADC, gains={0: 1})
    _, out = convert(series_log(write_log, range(0, 50, 10), [30, 10, 10, 10, 30]), cmap)
    assert flagged(out, "spike") == [False, True, False, True, False]


def test_spike_neighbours_are_the_channels_own_records(make_map, write_log, convert):
    # Channel 2 records sit between channel 1's in the file; they are not neighbours.
    # spike 6: |20 - 10| = 10 is above, the neighbours' |10 - 15| = 5 is not.
    cmap = make_map([level(qc={"spike": 6.0}), level(2, "other")], adc=EXACT_ADC, gains={0: 1})
    lines = []
    for i, v in enumerate([10, 10, 20, 10, 10]):
        lines.append((at(10 * i), 1, v, 0))
        lines.append((at(10 * i + 1), 2, 200, 0))
    _, out = convert(write_log(lines), cmap)
    assert flagged(out, "spike", "level") == [False, False, True, False, False]
    assert not any(flagged(out, "spike", "other"))


def test_spike_skips_bad_values_as_neighbours(make_map, write_log, convert):
    # Implementation's choice (contract silent): the series is the channel's usable values;
    # a saturated (bad) record is not a neighbour. Code 255 is the rail of the 8-bit ADC.
    cmap = make_map([level(qc={"spike": 3.0})], adc=EXACT_ADC, gains={0: 1})
    _, out = convert(series_log(write_log, range(0, 60, 10), [10, 10, 255, 10, 10, 10]), cmap)
    assert out.names(2) == ["saturated_high"]
    assert not any(flagged(out, "spike"))


# --------------------------------------------------------------------------- rate of change


def test_rate_of_change_per_second(make_map, write_log, convert):
    # QARTOD rate-of-change test (manual v2.1), contract form: |x[n] - x[n-1]| / dt > rate.
    # rate 0.15/s: +1 in 10 s = 0.1 (no), +2 in 10 s = 0.2 (yes), -3 in 30 s = 0.1 (no),
    # +6 in 30 s = 0.2 (yes), +1.5 in 10 s is 0.15 exactly: not above.
    cmap = make_map([level(qc={"rate": 0.15})], adc=EXACT_ADC, gains={0: 1})
    times = [0, 10, 20, 50, 80, 90]
    values = [20, 21, 23, 20, 26, 27]
    _, out = convert(series_log(write_log, times, values), cmap)
    assert flagged(out, "rate_of_change") == [False, False, True, False, True, False]
    assert out.df["quality"].tolist() == [1, 1, 3, 1, 3, 1]


def test_rate_of_change_boundary_is_not_flagged(make_map, write_log, convert):
    cmap = make_map([level(qc={"rate": 0.5})], adc=EXACT_ADC, gains={0: 1})
    _, out = convert(series_log(write_log, [0, 10, 20], [20, 25, 31]), cmap)  # 0.5/s, then 0.6/s
    assert flagged(out, "rate_of_change") == [False, False, True]


def test_rate_is_not_judged_across_equal_or_earlier_times(make_map, write_log, convert):
    # Implementation's choice (contract silent on dt <= 0): a duplicate or earlier time gives
    # no rate of change; those records carry time_duplicate / time_out_of_order instead.
    # The steps here would be far above 1/s with any positive dt.
    cmap = make_map([level(qc={"rate": 1.0})], adc=EXACT_ADC, gains={0: 1})
    _, out = convert(series_log(write_log, [0, 10, 10, 5, 20], [20, 21, 40, 60, 61]), cmap)
    assert not any(flagged(out, "rate_of_change"))
    assert out.all_names() == [[], [], ["time_duplicate"], ["time_out_of_order"], []]


# --------------------------------------------------------------------------- flat line


def test_flat_line_needs_records_reaching_back_flat_seconds(make_map, write_log, convert):
    # QARTOD flat-line test (manual v2.1), contract form: flagged when the channel has records
    # reaching back at least flat.seconds and every value in that window (this record
    # included) lies within +/- tolerance of this record's value.
    cmap = make_map([level(qc={"flat": {"tolerance": 0.5, "seconds": 30}})], adc=EXACT_ADC, gains={0: 1})
    # t = 0 … 60 s, all equal: from t = 30 s on a record 30 s old exists
    _, out = convert(series_log(write_log, range(0, 70, 10), [5] * 7), cmap)
    assert flagged(out, "flat_line") == [False, False, False, True, True, True, True]
    assert out.df["quality"].tolist() == [1, 1, 1, 3, 3, 3, 3]


def test_flat_line_window_is_the_last_seconds(make_map, write_log, convert):
    # Contract §6, seconds = 25: at t = 20 nothing is 25 s old yet. At t = 30 the channel
    # reaches back to t = 0 and the window [5, 30] holds 10, 10, 10: flagged, although the
    # record at t = 0 (value 20, outside the window) is not within 0.5. At t = 40 too.
    cmap = make_map([level(qc={"flat": {"tolerance": 0.5, "seconds": 25}})], adc=EXACT_ADC, gains={0: 1})
    _, out = convert(series_log(write_log, [0, 10, 20, 30, 40], [20, 10, 10, 10, 10]), cmap)
    assert flagged(out, "flat_line") == [False, False, False, True, True]


def test_flat_line_tolerance_is_about_this_records_value(make_map, write_log, convert):
    # tolerance 1, seconds 20. At t = 20 the window [0, 20] holds 10, 12, 11: all within +/-1
    # of 11 (flagged, although max - min = 2). After the pause, at t = 1000 the window
    # [980, 1000] holds 15 alone (not flagged: one value is no line, countmill's reading) and
    # at t = 1010 it holds 15, 16 (flagged: the channel reaches back, and every value in the
    # window is within 1). At t = 1020 it holds
    # 15, 16, 14: 16 is 2 away from 14 (not flagged, although all are within +/-1 of 15).
    cmap = make_map([level(qc={"flat": {"tolerance": 1.0, "seconds": 20}})], adc=EXACT_ADC, gains={0: 1})
    times = [0, 10, 20, 1000, 1010, 1020]
    values = [10, 12, 11, 15, 16, 14]
    _, out = convert(series_log(write_log, times, values), cmap)
    assert flagged(out, "flat_line") == [False, False, True, False, True, False]


def test_flat_line_with_irregular_times(make_map, write_log, convert):
    # First record at t = 5: at t = 30 nothing is 30 s old yet; at t = 35 the record at t = 5 is.
    cmap = make_map([level(qc={"flat": {"tolerance": 0.0, "seconds": 30}})], adc=EXACT_ADC, gains={0: 1})
    _, out = convert(series_log(write_log, [5, 25, 30, 35], [7, 7, 7, 7]), cmap)
    assert flagged(out, "flat_line") == [False, False, False, True]


# --------------------------------------------------------------------------- the same rules, literally


def contract_flags(times, values, spike, rate, tol, seconds):
    """Spike, rate and flat line written straight from the contract's §6 sentences."""
    n = len(values)
    out = []
    for i in range(n):
        names = set()
        if 0 < i < n - 1 and abs(values[i] - (values[i - 1] + values[i + 1]) / 2) > spike:
            names.add("spike")
        if i > 0 and abs(values[i] - values[i - 1]) / (times[i] - times[i - 1]) > rate:
            names.add("rate_of_change")
        # "records reaching back at least flat.seconds" and "every value in that window
        # (this record included)": the window is [t - seconds, t]
        reaches = any(times[j] <= times[i] - seconds for j in range(i))
        window = [k for k in range(i + 1) if times[i] - seconds <= times[k] <= times[i]]
        # countmill's reading: a window with this record alone is no line (README)
        if reaches and len(window) > 1 and all(abs(values[k] - values[i]) <= tol for k in window):
            names.add("flat_line")
        out.append(names)
    return out


@settings(max_examples=60, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(
    steps=st.lists(st.integers(1, 20), min_size=2, max_size=25),
    values=st.lists(st.integers(40, 60), min_size=25, max_size=25),
    spike=st.sampled_from([1.5, 3.0, 6.0]),
    rate=st.sampled_from([0.25, 1.0, 3.0]),
    tol=st.sampled_from([0.0, 1.0, 2.0]),
    seconds=st.sampled_from([5, 15, 40]),
)
def test_value_tests_match_the_contract_sentences(make_map, write_log, convert, steps, values, spike, rate, tol, seconds):
    times = [int(t) for t in np.cumsum(steps)]
    values = values[: len(times)]
    cmap = make_map([level(qc={"spike": spike, "rate": rate, "flat": {"tolerance": tol, "seconds": seconds}})],
                    adc=EXACT_ADC, gains={0: 1})
    _, out = convert(series_log(write_log, times, values), cmap)
    expected = contract_flags(times, values, spike, rate, tol, seconds)
    got = [set(names) for names in out.all_names()]
    assert got == expected


# --------------------------------------------------------------------------- time order and gaps


def test_time_checks_against_the_channels_previous_record_in_file_order(make_map, write_log, convert):
    # channel 1 times: 0, 10, 10 (duplicate), 5 (earlier: out of order), 20 (after 5: fine),
    # 60 (40 s after 20 > max_gap 30: gap), 90 (exactly 30 s: not more than max_gap).
    # Channel 2 records in between, with times all over the place, do not count.
    cmap = make_map([level(), level(2, "other")], adc=EXACT_ADC, gains={0: 1}, qc={"max_gap": 30})
    times = [0, 10, 10, 5, 20, 60, 90]
    lines = []
    for i, t in enumerate(times):
        lines.append((at(t), 1, 50, 0))
        lines.append((at(1000 - 100 * i), 2, 50, 0))
    _, out = convert(write_log(lines), cmap)
    names = [out.names(i) for i in out.channel_rows("level").index]
    assert names == [[], [], ["time_duplicate"], ["time_out_of_order"], [], ["gap_before"], []]
    assert out.channel_rows("level")["quality"].tolist() == [1, 1, 3, 3, 1, 3, 1]
    other = [out.names(i) for i in out.channel_rows("other").index]
    assert other == [[]] + [["time_out_of_order"]] * 6


def test_map_level_qc_defaults_are_overridden_per_channel(make_map, write_log, convert):
    # [qc] spike = 50 and max_gap = 30 for every channel; channel 1 overrides spike with 6
    # and keeps the default max_gap; channel 2 takes both defaults. The peak of 20 among
    # 10s is 10 above its neighbours' mean; the neighbours are 5 away from theirs.
    cmap = make_map([level(qc={"spike": 6.0}), level(2, "other")], adc=EXACT_ADC, gains={0: 1},
                    qc={"spike": 50.0, "max_gap": 30})
    lines = []
    for i, (t, v) in enumerate(zip([0, 10, 20, 30, 80], [10, 10, 20, 10, 10])):
        lines += [(at(t), 1, v, 0), (at(t), 2, v, 0)]
    _, out = convert(write_log(lines), cmap)
    assert flagged(out, "spike", "level") == [False, False, True, False, False]
    assert flagged(out, "spike", "other") == [False] * 5
    assert flagged(out, "gap_before", "level") == [False, False, False, False, True]
    assert flagged(out, "gap_before", "other") == [False, False, False, False, True]


def test_spike_is_not_judged_across_a_gap(make_map, write_log, convert):
    # countmill's reading (README): a neighbour more than max_gap away says nothing about a
    # spike. The 20 at t = 20 has its next value 50 s later (max_gap 30): not judged; the same
    # series without a max_gap flags it.
    series = ([0, 10, 20, 70, 80], [10, 10, 20, 10, 10])
    with_gap = make_map([level(qc={"spike": 6.0, "max_gap": 30})], adc=EXACT_ADC, gains={0: 1})
    _, out = convert(series_log(write_log, *series), with_gap)
    assert flagged(out, "spike") == [False] * 5
    without = make_map([level(qc={"spike": 6.0})], adc=EXACT_ADC, gains={0: 1}, file_name="plain.toml")
    _, out = convert(series_log(write_log, *series), without)
    assert flagged(out, "spike") == [False, False, True, False, False]


# --------------------------------------------------------------------------- calibration


@pytest.mark.parametrize(
    "points, degree",
    [
        ([[20.0, 20.3], [98.0, 98.4]], 1),
        ([[10.0, 10.4], [40.0, 39.1], [70.0, 71.0], [100.0, 99.6]], 1),
        ([[0.0, 0.5], [50.0, 51.0], [100.0, 99.0], [150.0, 152.5], [200.0, 199.0]], 2),
    ],
)
def test_calibration_is_the_least_squares_fit_of_numpy_polyfit(make_map, write_log, convert, points, degree):
    # Reference: numpy.polyfit (least squares, highest power first) over [indicated, reference].
    cmap = make_map([level(calibration={"points": points, "degree": degree})], adc=EXACT_ADC, gains={0: 1})
    codes = [1, 20, 55, 98, 150, 254]
    _, out = convert(series_log(write_log, range(0, 60, 10), codes), cmap)
    indicated, reference = np.array(points).T
    expected = np.polyval(np.polyfit(indicated, reference, degree), codes)
    np.testing.assert_allclose(out.df["value"], expected, rtol=1e-10, atol=1e-9)


def test_ill_conditioned_calibration_fit_is_a_map_error(make_map, run_cli):
    # a cubic through four indicated values that differ by parts in 1e10: numerically singular
    points = [[500.0 + k * 5e-8, float(k)] for k in range(4)]
    cmap = make_map([level(calibration={"points": points, "degree": 3})], adc=EXACT_ADC)
    result = run_cli("check", cmap)
    assert result.exit_code == 2
    assert "calibration.points" in result.output and "channel 1 'level'" in result.output


def test_calibration_due_date_is_the_last_valid_day_in_the_map_zone(make_map, write_log, convert):
    # due = 2026-06-30 (a date): valid through that local day; overdue from local midnight,
    # which in Europe/Berlin summer time (UTC+2, from zoneinfo) is 2026-06-30T22:00Z.
    berlin = zoneinfo.ZoneInfo("Europe/Berlin")
    midnight = dt.datetime(2026, 7, 1, tzinfo=berlin).astimezone(UTC)
    cmap = make_map([level(calibration={"points": [[0.0, 0.0], [100.0, 100.0]], "due": dt.date(2026, 6, 30)})],
                    adc=EXACT_ADC, gains={0: 1}, timezone="Europe/Berlin")
    instants = [midnight - dt.timedelta(hours=12), midnight - dt.timedelta(microseconds=1), midnight, midnight + dt.timedelta(days=30)]
    lines = [(t.isoformat(), 1, 50, 0) for t in instants]
    _, out = convert(write_log(lines), cmap)
    assert flagged(out, "calibration_overdue") == [False, False, True, True]
    assert out.df["quality"].tolist() == [1, 1, 3, 3]
    np.testing.assert_allclose(out.df["value"], 50.0)  # still a value: suspect, not missing


def test_calibration_due_datetime_is_an_instant_in_the_map_zone(make_map, write_log, convert):
    # Implementation's choice for a due date-time (contract speaks of a day): valid up to and
    # including that local instant. 2026-12-01T12:00 in New York (UTC-5, zoneinfo) = 17:00Z.
    due = dt.datetime(2026, 12, 1, 12, 0)
    instant = due.replace(tzinfo=zoneinfo.ZoneInfo("America/New_York")).astimezone(UTC)
    cmap = make_map([level(calibration={"points": [[0.0, 0.0], [100.0, 100.0]], "due": due})],
                    adc=EXACT_ADC, gains={0: 1}, timezone="America/New_York")
    instants = [instant - dt.timedelta(seconds=1), instant, instant + dt.timedelta(seconds=1)]
    _, out = convert(write_log([(t.isoformat(), 1, 50, 0) for t in instants]), cmap)
    assert flagged(out, "calibration_overdue") == [False, False, True]


# --------------------------------------------------------------------------- revisions


def test_each_record_uses_the_revision_in_force_at_its_time(make_map, write_log, convert):
    # Revisions from 2026-03-01T00:00 and 2026-03-01T12:00 local Berlin time (UTC+1 in March,
    # from zoneinfo): 2026-02-28T23:00Z and 2026-03-01T11:00Z. A revision inherits nothing:
    # the second has no range, the first has range [0, 60].
    berlin = zoneinfo.ZoneInfo("Europe/Berlin")
    start1 = dt.datetime(2026, 3, 1, 0, 0, tzinfo=berlin).astimezone(UTC)
    start2 = dt.datetime(2026, 3, 1, 12, 0, tzinfo=berlin).astimezone(UTC)
    assert (start1.hour, start2.hour) == (23, 11)
    cmap = make_map([
        level(**{"from": dt.datetime(2026, 3, 1, 12, 0)}, chain=[{"stage": "linear", "slope": 2.0}]),
        level(**{"from": dt.datetime(2026, 3, 1, 0, 0)}, range=[0.0, 60.0]),
    ], adc=EXACT_ADC, gains={0: 1}, timezone="Europe/Berlin")
    s = dt.timedelta(seconds=1)
    instants = [start1 - s, start1, start2 - s, start2, start2 + s, start2 - 2 * s]
    _, out = convert(write_log([(t.isoformat(), 1, 40, 0) for t in instants]), cmap)
    df = out.df
    # before the first 'from': unmapped (channel null, code kept, quality 9)
    assert pd.isna(df["channel"][0]) and df["code"][0] == 40 and df["quality"][0] == 9
    assert out.names(0) == ["unmapped_channel"]
    # the out-of-order last record lies before the second start: the first revision again
    np.testing.assert_allclose(df["value"][1:], [40, 40, 80, 80, 40])
    assert "time_out_of_order" in out.names(5)
    # the first revision's range does not carry over: 80 is fine in the second
    assert df["quality"].tolist()[1:5] == [1, 1, 1, 1]


def test_revision_from_with_an_explicit_offset(make_map, write_log, convert):
    cmap = make_map([
        level(chain=[{"stage": "linear", "slope": 1.0}]),
        level(**{"from": dt.datetime(2026, 5, 1, 6, 0, tzinfo=UTC)}, chain=[{"stage": "linear", "slope": 3.0}]),
    ], adc=EXACT_ADC, gains={0: 1}, timezone="America/New_York")
    lines = [("2026-05-01T05:59:59Z", 1, 10, 0), ("2026-05-01T06:00:00Z", 1, 10, 0), ("2026-05-01T02:00:00", 1, 10, 0)]
    _, out = convert(write_log(lines), cmap)
    # the naive 02:00 in New York (EDT, UTC-4) is 06:00Z: the second revision
    np.testing.assert_allclose(out.df["value"], [10, 30, 30])


# --------------------------------------------------------------------------- time zones


def wall_times(day: dt.date, start: str, count: int, step_min: int = 15, back_at: str | None = None, back_by_h: int = 1):
    """What a logger on local time prints every step_min minutes; at ``back_at`` the clock
    steps back by ``back_by_h`` hours (fall-back). Returns (printed text, fold) pairs."""
    t = dt.datetime.combine(day, dt.time.fromisoformat(start))
    out, fold = [], 0
    for _ in range(count):
        if back_at is not None and fold == 0 and t.time() == dt.time.fromisoformat(back_at):
            t -= dt.timedelta(hours=back_by_h)
            fold = 1
        out.append((t.isoformat(), fold))
        t += dt.timedelta(minutes=step_min)
    return out


def zoneinfo_utc(text: str, fold: int, zone: zoneinfo.ZoneInfo) -> tuple[dt.datetime, bool]:
    """Reference instant and whether the wall time is ambiguous or missing, from zoneinfo."""
    local = dt.datetime.fromisoformat(text)
    first = local.replace(tzinfo=zone, fold=0)
    second = local.replace(tzinfo=zone, fold=1)
    odd = first.utcoffset() != second.utcoffset()
    # PEP 495: in a fold, fold=0 is the earlier instant and fold=1 the later; in a gap,
    # fold=0 reads the wall time with the offset in force before the transition.
    chosen = local.replace(tzinfo=zone, fold=fold)
    return chosen.astimezone(UTC), odd


TRANSITIONS = {
    # zone, local day, first printed wall time, fall-back step (wall time reached, hours)
    "Berlin spring forward 2026-03-29": ("Europe/Berlin", dt.date(2026, 3, 29), "01:15", None),
    "Berlin fall back 2026-10-25": ("Europe/Berlin", dt.date(2026, 10, 25), "01:30", "03:00"),
    "New York spring forward 2026-03-08": ("America/New_York", dt.date(2026, 3, 8), "01:15", None),
    "New York fall back 2026-11-01": ("America/New_York", dt.date(2026, 11, 1), "00:30", "02:00"),
}


@pytest.mark.parametrize("case", list(TRANSITIONS))
def test_naive_times_are_read_in_the_map_zone_like_zoneinfo(make_map, write_log, convert, case):
    zone_name, day, start, back_at = TRANSITIONS[case]
    zone = zoneinfo.ZoneInfo(zone_name)
    printed = wall_times(day, start, 14, back_at=back_at)
    if back_at is None:
        # a logger that missed the spring-forward step prints wall times that do not exist
        printed = [(text, 0) for text, _ in printed]
    cmap = make_map([level()], adc=EXACT_ADC, gains={0: 1}, timezone=zone_name)
    _, out = convert(write_log([(text, 1, 50, 0) for text, _ in printed]), cmap)
    expected = [zoneinfo_utc(text, fold, zone) for text, fold in printed]
    got = [t.to_pydatetime() for t in out.df["time"]]
    assert got == [instant for instant, _ in expected]
    assert flagged(out, "time_ambiguous") == [odd for _, odd in expected]
    assert any(odd for _, odd in expected)  # the case really crosses the transition
    assert str(out.df["time"].dt.tz) == "UTC"


def test_fall_back_hour_first_pass_earlier_second_pass_later(make_map, write_log, convert):
    # Berlin, 2026-10-25: 02:30 local happens twice, at 00:30Z (CEST) and 01:30Z (CET).
    cmap = make_map([level()], adc=EXACT_ADC, gains={0: 1}, timezone="Europe/Berlin")
    printed = ["2026-10-25T02:10:00", "2026-10-25T02:30:00", "2026-10-25T02:50:00",
               "2026-10-25T02:10:00", "2026-10-25T02:30:00", "2026-10-25T03:10:00"]
    _, out = convert(write_log([(p, 1, 50, 0) for p in printed]), cmap)
    assert [t.strftime("%H:%M") for t in out.df["time"]] == ["00:10", "00:30", "00:50", "01:10", "01:30", "02:10"]
    assert flagged(out, "time_ambiguous") == [True, True, True, True, True, False]
    assert not any(flagged(out, "time_out_of_order"))


def test_spring_forward_gap_uses_the_offset_before_the_transition(make_map, write_log, convert):
    # New York, 2026-03-08: 02:30 does not exist; read with EST (UTC-5): 07:30Z.
    cmap = make_map([level()], adc=EXACT_ADC, gains={0: 1}, timezone="America/New_York")
    _, out = convert(write_log([("2026-03-08T01:59:00", 1, 50, 0), ("2026-03-08T02:30:00", 1, 50, 0),
                                ("2026-03-08T03:30:00", 1, 50, 0)]), cmap)
    assert [t.strftime("%H:%M") for t in out.df["time"]] == ["06:59", "07:30", "07:30"]
    assert flagged(out, "time_ambiguous") == [False, True, False]


def test_times_with_an_offset_are_not_ambiguous(make_map, write_log, convert):
    cmap = make_map([level()], adc=EXACT_ADC, gains={0: 1}, timezone="Europe/Berlin")
    lines = [("2026-10-25T02:30:00+02:00", 1, 50, 0), ("2026-10-25T02:30:00+01:00", 1, 50, 0), ("2026-10-25T00:45:00Z", 1, 50, 0)]
    _, out = convert(write_log(lines), cmap)
    assert [t.strftime("%H:%M") for t in out.df["time"]] == ["00:30", "01:30", "00:45"]
    assert not any(flagged(out, "time_ambiguous"))


@pytest.mark.parametrize("kind, scale", [("unix_s", 1), ("unix_ms", 1000)])
def test_epoch_times_need_no_zone(make_map, write_log, convert, kind, scale):
    # Epoch instants are UTC by definition; the map's zone (New York, crossing its fall-back
    # transition here) plays no part and nothing is ambiguous. Fractions are allowed.
    instants = [dt.datetime(2026, 11, 1, 5, 30, tzinfo=UTC) + dt.timedelta(minutes=30 * k, milliseconds=250) for k in range(4)]
    stamps = [f"{t.timestamp() * scale:.3f}" for t in instants]
    cmap = make_map([level()], adc=EXACT_ADC, gains={0: 1}, timezone="America/New_York", input={"time": kind})
    result, out = convert(write_log([(s, 1, 50, 0) for s in stamps]), cmap)
    assert result.exit_code == 0
    assert [t.to_pydatetime() for t in out.df["time"]] == instants
    assert not any(flagged(out, "time_ambiguous"))
