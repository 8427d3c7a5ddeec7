"""The flat-line state keeps the same steps by its short cut as from every value's suffix.

:meth:`FlatWindow._keep` looks only at the tail of a call's values that can still be part
of a flat window; :meth:`FlatWindow._keep_all_steps` makes the suffix extremes of every
value (the way the state is defined, see the class docstring). Fed the same calls, the two
must hold the same state and flag the same values. (The flags themselves are checked
against hand-worked logs in ``tests/test_quality_stateful.py``.)
"""

from __future__ import annotations

import numpy as np
from hypothesis import given, settings
from hypothesis import strategies as st

from countmill.pipeline.stateful import FlatWindow


class _AllSteps(FlatWindow):
    def _keep(self, mono, values, tolerance, span_us):
        return self._keep_all_steps(mono, values, tolerance, span_us)


def _state(w: FlatWindow):
    return (w.first_time_us, w.last_time_us, w.dropped_until, w.starts.tolist(), w.high.tolist(), w.low.tolist())


@settings(max_examples=300, deadline=None)
@given(
    calls=st.lists(
        st.lists(st.tuples(st.integers(-2, 5), st.sampled_from([0.0, 1.0, 1.5, 2.0, 9.0])), min_size=1, max_size=25),
        min_size=1,
        max_size=6,
    ),
    tolerance=st.sampled_from([0.0, 0.25, 0.5, 1.0, 10.0]),
    span_s=st.integers(0, 12),
)
def test_short_cut_keeps_the_same_state_as_every_suffix(calls, tolerance, span_s):
    fast, reference = FlatWindow(), _AllSteps()
    clock = 0
    for call in calls:
        steps, values = zip(*call)
        times = clock + np.cumsum(np.asarray(steps, dtype=np.int64) * 1_000_000)  # may step back
        clock = int(times[-1])
        values = np.asarray(values)
        got = fast.test(times, values, tolerance, span_s * 1_000_000)
        want = reference.test(times, values, tolerance, span_s * 1_000_000)
        np.testing.assert_array_equal(got, want)
        assert _state(fast) == _state(reference)


def test_infinite_values_take_the_general_way():
    # a window [t - 2 s, t] holding the infinite value is not flat; the later ones are
    times = np.arange(6, dtype=np.int64) * 1_000_000
    values = np.array([1.0, np.inf, 1.0, 1.0, 1.0, 1.0])
    fast, reference = FlatWindow(), _AllSteps()
    flags = fast.test(times, values, 0.0, 2_000_000)
    assert flags.tolist() == [False, False, False, False, True, True]
    np.testing.assert_array_equal(flags, reference.test(times, values, 0.0, 2_000_000))
    assert _state(fast) == _state(reference)
