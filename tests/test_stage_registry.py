"""The stage registry: an audit of every entry, and the flags of the built-in stages.

The audit (bracketed units, References section, forbidden extra keys, NaN passthrough) holds
every stage to the code style of the project; the flag checks follow the channel-map contract
(section 4: sensor faults, outside_model, NAMUR NE 43 loop levels) and the circuit reasoning
written beside each case.
"""

import inspect
import math
import re

import numpy as np
import pytest
from pydantic import ValidationError

from countmill.flags import Flag
from countmill.stages.registry import StageContext, StageParams, StageResult, all_stages
from countmill.units import parse_unit

CONTRACT_STAGES = {
    "linear", "polynomial", "table", "divider", "current_excitation", "inverting_amp",
    "thermistor", "rtd", "bridge", "ratiometric", "current_loop", "thermocouple",
}  # fmt: skip

#: A valid parameter set and a few sensible inputs for each stage of the contract.
EXAMPLES = {
    "linear": ({"slope": 2.0, "intercept": 1.0}, [0.0, 1.0, 2.0]),
    "polynomial": ({"coefficients": [1.0, 0.5]}, [0.0, 1.0, 2.0]),
    "table": ({"points": [[0.0, 0.0], [1.0, 10.0], [2.0, 15.0]]}, [0.0, 0.5, 2.0]),
    "divider": ({"excitation": 2.5, "r_fixed": 10_000.0, "sensor": "low"}, [0.5, 1.25, 2.0]),
    "current_excitation": ({"amps": 1e-3, "lead_ohms": 0.2}, [0.1, 0.12, 0.14]),
    "inverting_amp": ({"vin": -1.0, "sensor": "rf", "ri": 10_000.0}, [0.5, 1.0, 2.0]),
    "thermistor": ({"r25": 10_000.0, "beta": 3950.0}, [5_000.0, 10_000.0, 20_000.0]),
    "rtd": ({}, [80.0, 100.0, 138.5]),
    "bridge": ({"excitation": 10.0, "arrangement": "quarter"}, [0.0, 1e-3, -1e-3]),
    "ratiometric": ({"excitation": 10.0, "rated_output": 0.002, "capacity": 50.0}, [0.0, 0.01, 0.02]),
    "current_loop": ({"shunt": 250.0, "low": 0.0, "high": 100.0}, [1.0, 3.0, 5.0]),
    "thermocouple": ({"type": "K", "cold_junction": 25.0}, [0.0, 1e-3, 4e-3]),
}

STAGES = all_stages()
CTX = StageContext()
UNIT_IN_BRACKETS = re.compile(r"\[[^\]]+\]")


def _params(name, **overrides):
    params, _ = EXAMPLES[name]
    return STAGES[name].params.model_validate({"stage": name, **params, **overrides})


def _apply(name, x, **overrides):
    x = np.asarray(x, dtype=np.float64)
    return STAGES[name].apply(x, _params(name, **overrides), CTX)


def _flags(result: StageResult, n: int) -> np.ndarray:
    return np.zeros(n, dtype=np.int64) if result.flags is None else result.flags


def _sections(doc: str) -> dict[str, str]:
    """numpydoc sections of a docstring: heading -> body."""
    parts = re.split(r"^\s*([A-Z][A-Za-z ]+)\n\s*-{3,}\s*$", doc, flags=re.M)
    return {parts[i].strip(): parts[i + 1] for i in range(1, len(parts) - 1, 2)}


def _entries(body: str) -> dict[str, str]:
    """numpydoc entries of a section: the unindented ``name : type`` line -> it and its text."""
    entries: dict[str, str] = {}
    current = None
    for line in body.splitlines():
        if line.strip() and not line.startswith(" "):
            current = line.strip()
            entries[current] = current
        elif current is not None:
            entries[current] += "\n" + line
    return entries


def _categorical(entry: str) -> bool:
    """A ``name : {'a', 'b'}`` / ``str`` / ``bool`` entry names a choice and has no unit."""
    kind = entry.split(":", 1)[1].strip() if ":" in entry else ""
    return kind.startswith("{") or kind.split(",")[0] in ("str", "bool")


def test_every_contract_stage_but_thermocouple_is_registered():
    assert CONTRACT_STAGES - {"thermocouple"} <= set(STAGES)
    assert set(STAGES) <= CONTRACT_STAGES, "a stage the contract does not name"


def _audit(function) -> list[str]:
    """What a physics function's docstring lacks: [unit] per entry, Notes, References."""
    sections = _sections(inspect.getdoc(function) or "")
    problems = []
    for heading in ("Parameters", "Returns"):
        entries = _entries(sections.get(heading, ""))
        if not entries:
            problems.append(f"no {heading} section")
        for entry, text in entries.items():
            if not _categorical(entry) and not UNIT_IN_BRACKETS.search(text):
                problems.append(f"no [unit] for {entry!r} in {heading}")
    for heading in ("Notes", "References"):
        if not sections.get(heading, "").strip():
            problems.append(f"no {heading} section")
    return problems


def test_audit_catches_a_bare_docstring():
    def bare(x, *, mode):
        """Something.

        Parameters
        ----------
        x : array_like
            Input voltage.
        mode : {'a', 'b'}
            A choice (needs no unit).

        Returns
        -------
        ndarray
            Output [V].
        """

    assert _audit(bare) == [
        "no [unit] for 'x : array_like' in Parameters",
        "no Notes section",
        "no References section",
    ]


@pytest.mark.parametrize("name", sorted(STAGES))
def test_physics_docstrings_have_units_and_references(name):
    stage = STAGES[name]
    assert stage.physics, f"{name}: no physics functions listed"
    for function in stage.physics:
        assert _audit(function) == [], f"{name}: {function.__module__}.{function.__qualname__}"


@pytest.mark.parametrize("name", sorted(STAGES))
def test_params_model_forbids_extra_keys(name):
    model = STAGES[name].params
    assert issubclass(model, StageParams)
    assert model.model_config.get("extra") == "forbid"
    if name in EXAMPLES:
        with pytest.raises(ValidationError, match="not_a_key|Extra inputs"):
            _params(name, not_a_key=1)


@pytest.mark.parametrize("name", sorted(STAGES))
def test_units_are_pint_units(name):
    stage = STAGES[name]
    for unit in (stage.input_unit, stage.output_unit):
        if unit is not None:
            parse_unit(unit)


@pytest.mark.parametrize("name", sorted(set(STAGES) & set(EXAMPLES)))
def test_apply_shape_and_nan_passthrough(name):
    _, inputs = EXAMPLES[name]
    x = np.array(inputs + [np.nan], dtype=np.float64)
    result = _apply(name, x)
    assert isinstance(result, StageResult)
    assert result.values.shape == x.shape and result.values.dtype == np.float64
    assert np.all(np.isfinite(result.values[:-1])), f"{name}: example inputs gave {result.values}"
    assert np.isnan(result.values[-1])
    if result.flags is not None:
        assert result.flags.shape == x.shape and result.flags.dtype == np.int64
        assert result.flags[-1] == 0, "NaN in must not raise a flag"
    # a 2-D block keeps its shape
    block = _apply(name, np.tile(x, (2, 1)))
    assert block.values.shape == (2, x.size)


@pytest.mark.parametrize("name", sorted(set(STAGES) & set(EXAMPLES)))
def test_describe_is_one_sentence(name):
    text = STAGES[name].describe(_params(name))
    assert isinstance(text, str) and text.strip() and "\n" not in text


# ------------------------------------------------------------------ flags of the built-ins

OPEN, SHORT, OUTSIDE = int(Flag.OPEN_CIRCUIT), int(Flag.SHORT_CIRCUIT), int(Flag.OUTSIDE_MODEL)


def _check(result, n, expected_flags, nan_at):
    flags = _flags(result, n)
    np.testing.assert_array_equal(flags, expected_flags)
    np.testing.assert_array_equal(np.isnan(result.values), nan_at)


def test_divider_low_side_faults():
    # Sensor to ground: at or above the excitation no current flows through it (open); at or
    # below ground the tap is shorted to ground (short). Ohm's law; voltage divider equation.
    x = [2.5, 2.6, 0.0, -0.01, 1.25, np.nan]
    r = _apply("divider", x)
    _check(r, 6, [OPEN, OPEN, SHORT, SHORT, 0, 0], [True] * 4 + [False, True])
    assert r.values[4] == pytest.approx(10_000.0)


def test_divider_high_side_faults():
    # Sensor to the excitation: the tap at ground means an open sensor, at the excitation a short.
    x = [0.0, -0.01, 2.5, 2.6, 1.25]
    r = _apply("divider", x, sensor="high")
    _check(r, 5, [OPEN, OPEN, SHORT, SHORT, 0], [True] * 4 + [False])


def test_current_excitation_faults():
    # V at or below the lead drop (0.2 mV at 1 mA through 0.2 Ohm): sensor shorted.
    r = _apply("current_excitation", [0.0, 0.0002, 0.1002, np.nan])
    _check(r, 4, [SHORT, SHORT, 0, 0], [True, True, False, True])
    assert r.values[2] == pytest.approx(100.0)


def test_inverting_amp_feedback_sensor_faults():
    # vin = -1 V: a healthy stage gives a positive output. Zero or negative output means the
    # feedback conducts with no drop: shorted sensor. With 50 Ohm in series, 5 mV (50 Ohm) too.
    r = _apply("inverting_amp", [0.0, -0.5, 0.005, 1.0], series=50.0)
    _check(r, 4, [SHORT, SHORT, SHORT, 0], [True, True, True, False])
    assert r.values[3] == pytest.approx(9_950.0)


def test_inverting_amp_input_sensor_faults():
    # Sensor as the input resistor, vin = +1 V, Rf = 10 kOhm: no output (or output with the sign
    # of vin) means no input current, an open sensor; Ri at or below the series 100 Ohm a short.
    x = [0.0, 0.2, -100.0, -200.0, -5.0, np.nan]
    r = _apply("inverting_amp", x, vin=1.0, sensor="ri", ri=None, rf=10_000.0, series=100.0)
    _check(r, 6, [OPEN, OPEN, SHORT, SHORT, 0, 0], [True] * 4 + [False, True])
    assert r.values[4] == pytest.approx(1_900.0)


@pytest.mark.parametrize("name", ["thermistor", "rtd"])
def test_temperature_stages_on_faulted_resistance(name):
    r = _apply(name, [np.inf, 0.0, -3.0, np.nan])
    _check(r, 4, [OPEN, SHORT, SHORT, 0], [True] * 4)


def test_rtd_outside_iec60751_range():
    # IEC 60751 defines the equation over -200 ... 850 degC: 18.52 ... 390.48 Ohm for a Pt100.
    r = _apply("rtd", [18.0, 400.0, 138.5055])
    _check(r, 3, [OUTSIDE, OUTSIDE, 0], [True, True, False])
    assert r.values[2] == pytest.approx(100.0, abs=1e-3)


def test_table_outside_points():
    r = _apply("table", [-0.1, 2.1, 1.5, np.nan])
    _check(r, 4, [OUTSIDE, OUTSIDE, 0, 0], [True, True, False, True])
    assert r.values[2] == pytest.approx(12.5)


def test_bridge_ratio_no_bridge_gives():
    r = _apply("bridge", [5.0, 0.001])
    _check(r, 2, [OUTSIDE, 0], [True, False])


def test_current_loop_keeps_value_and_flags_ne43():
    # 250 Ohm: 0.5 V = 2 mA (fault), 0.925 V = 3.7 mA (marginal), 3 V = 12 mA, 5.2 V = 20.8 mA
    # (marginal), 5.5 V = 22 mA (fault): NAMUR NE 43 levels; values are kept.
    r = _apply("current_loop", [0.5, 0.925, 3.0, 5.2, 5.5, np.nan])
    fault, marginal = int(Flag.LOOP_FAULT), int(Flag.LOOP_MARGINAL)
    _check(r, 6, [fault, marginal, 0, marginal, fault, 0], [False] * 5 + [True])
    np.testing.assert_allclose(r.values[:5], [-12.5, -1.875, 50.0, 105.0, 112.5])


# ------------------------------------------------------------------ parameter validation


@pytest.mark.parametrize(
    "name, params, message",
    [
        ("table", {"points": [[0, 0], [0, 1]]}, "strictly increasing"),
        ("table", {"points": [[0, 0]]}, "at least 2"),
        ("thermistor", {}, "exactly one of"),
        ("thermistor", {"r25": 1e4, "beta": 3950, "a": 1e-3, "b": 2e-4, "c": 1e-7}, "exactly one of"),
        ("thermistor", {"r25": 1e4}, "beta missing"),
        ("thermistor", {"a": 1e-3, "b": 2e-4}, "c missing"),
        ("thermistor", {"points": [[0, 3e4], [25, 1e4]]}, "exactly three"),
        ("thermistor", {"r25": -1.0, "beta": 3950}, "greater than 0"),
        ("divider", {"excitation": 2.5, "r_fixed": 1e4, "sensor": "middle"}, "'low' or 'high'"),
        ("divider", {"excitation": 0.0, "r_fixed": 1e4, "sensor": "low"}, "greater than 0"),
        ("divider", {"excitation": 2.5, "r_fixed": -1.0, "sensor": "low"}, "greater than 0"),
        ("inverting_amp", {"vin": 0.0, "sensor": "rf", "ri": 1e4}, "must not be 0"),
        ("inverting_amp", {"vin": 1.0, "sensor": "rf", "rf": 1e4}, "needs the fixed resistor 'ri'"),
        ("inverting_amp", {"vin": 1.0, "sensor": "ri", "ri": 1e4, "rf": 1e4}, "give 'rf' only"),
        ("bridge", {"excitation": 10.0, "arrangement": "eighth"}, "'quarter', 'half' or 'full'"),
        ("ratiometric", {"excitation": 10.0, "rated_output": 2.0, "capacity": 50.0}, "2 mV/V is 0.002"),
        ("ratiometric", {"excitation": 10.0, "rated_output": 0.002, "capacity": 0.0}, "must not be 0"),
        ("current_loop", {"shunt": 0.0, "low": 0, "high": 1}, "greater than 0"),
        ("current_loop", {"shunt": 250.0, "low": 5, "high": 5}, "must differ"),
        ("current_excitation", {"amps": 1e-3, "lead_ohms": -1.0}, "greater than or equal to 0"),
        ("linear", {"slope": float("nan")}, "finite"),
        ("rtd", {"stage": "pt100"}, "'rtd'"),
    ],
)
def test_bad_parameters_are_rejected_with_a_reason(name, params, message):
    with pytest.raises(ValidationError, match=message):
        STAGES[name].params.model_validate({"stage": name, **params})


def test_params_compare_by_their_fields():
    a, b = _params("table"), _params("table")
    assert a == b and hash(a) == hash(b)
    assert a != _params("table", points=[[0.0, 0.0], [1.0, 11.0]])


def test_thermistor_points_are_solved_once():
    # Steinhart-Hart through three points of the beta model (R25 = 10 kOhm, B = 3950 K)
    # reproduces those points; the coefficients are kept on the parameter object.
    def r_beta(t):  # definition of the B value (common practice, no source)
        return 1e4 * math.exp(3950.0 * (1 / (t + 273.15) - 1 / 298.15))

    points = [[0.0, r_beta(0.0)], [25.0, r_beta(25.0)], [50.0, r_beta(50.0)]]
    params = STAGES["thermistor"].params.model_validate({"stage": "thermistor", "points": points})
    assert params._coefficients is not None
    out = STAGES["thermistor"].apply(np.array([p[1] for p in points]), params, CTX)
    np.testing.assert_allclose(out.values, [0.0, 25.0, 50.0], atol=1e-9)
