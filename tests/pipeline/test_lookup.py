"""The cross-channel lookup against its definition (contract §4), record by record.

A record takes the input channel's latest usable value from an earlier line whose time is
at or before its own and no older than ``max_age``. The reference below applies that
sentence literally to one chunk; :class:`LatestValue` must agree whatever the layout of the
two channels in the chunk (a terminal-block sensor read once per scan, several readers per
input, bursts, clock steps back).
"""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from countmill.flags import Quality
from countmill.pipeline.lookup import LatestValue

MAX_AGE_US = 5_000_000


def _by_definition(in_pos, in_t, in_v, pos, t, max_age_us):
    out = np.full(len(pos), np.nan)
    for i, (p, when) in enumerate(zip(pos, t)):
        for j in range(len(in_pos) - 1, -1, -1):  # latest earlier line first
            if in_pos[j] < p and when - max_age_us <= in_t[j] <= when:
                out[i] = in_v[j]
                break
    return out


def _lookup(in_pos, in_t, in_v, pos, t, max_age_us=MAX_AGE_US):
    latest = LatestValue()
    quality = np.full(len(in_pos), Quality.GOOD, dtype=np.int8)
    latest.add(np.asarray(in_pos, dtype=np.int64), np.asarray(in_t, dtype=np.int64), np.asarray(in_v, dtype=float), quality)
    values, _quality = latest.lookup(np.asarray(pos, dtype=np.int64), np.asarray(t, dtype=np.int64), max_age_us)
    return values


def _split(kinds, times):
    """Positions, times and values of the input (kind 0) and of the readers (kind 1)."""
    kinds, times = np.asarray(kinds), np.asarray(times, dtype=np.int64)
    in_pos, pos = np.flatnonzero(kinds == 0), np.flatnonzero(kinds == 1)
    return in_pos, times[in_pos], in_pos * 10.0 + 0.5, pos, times[pos]


@pytest.mark.parametrize(
    "pattern",
    [
        "01" * 50,  # once per scan, input first: consecutive values
        "10" * 50,  # once per scan, reader first: the first reader has none in this chunk
        "011" * 30,  # two readers per input
        "0" + "1" * 20,  # one input, many readers
        "001" * 30,  # two inputs per reader
        "01" * 20 + "0011" + "01" * 20,  # a scan out of step in the middle
        "1" * 5 + "0",  # no value before any reader
    ],
)
def test_scan_layouts_follow_the_definition(pattern):
    kinds = [int(c) for c in pattern]
    times = np.arange(len(kinds)) * 1_000_000  # one second apart: max_age admits 5 back
    in_pos, in_t, in_v, pos, t = _split(kinds, times)
    got = _lookup(in_pos, in_t, in_v, pos, t)
    np.testing.assert_array_equal(got, _by_definition(in_pos, in_t, in_v, pos, t, MAX_AGE_US))


def test_consecutive_values_are_copies_not_views_of_the_state():
    in_pos, in_t, in_v, pos, t = _split([0, 1] * 10, np.arange(20) * 1000)
    latest = LatestValue()
    latest.add(in_pos, in_t, in_v.copy(), np.full(len(in_pos), Quality.GOOD, dtype=np.int8))
    values, _quality = latest.lookup(pos, t, MAX_AGE_US)
    values[:] = -1.0
    again, _quality = latest.lookup(pos, t, MAX_AGE_US)
    np.testing.assert_array_equal(again, in_v)


@settings(max_examples=300, deadline=None)
@given(
    kinds=st.lists(st.sampled_from([0, 1]), min_size=1, max_size=60),
    steps=st.lists(st.integers(-3, 4), min_size=60, max_size=60),
    max_age_s=st.integers(0, 6),
)
def test_any_layout_and_clock_follows_the_definition(kinds, steps, max_age_s):
    # times climb by 0..4 s, or step back up to 3 s (a clock set back)
    times = np.cumsum(np.asarray(steps[: len(kinds)]) * 1_000_000)
    in_pos, in_t, in_v, pos, t = _split(kinds, times)
    got = _lookup(in_pos, in_t, in_v, pos, t, max_age_s * 1_000_000)
    np.testing.assert_array_equal(got, _by_definition(in_pos, in_t, in_v, pos, t, max_age_s * 1_000_000))
