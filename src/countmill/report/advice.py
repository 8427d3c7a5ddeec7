"""Plain-language advice on the ADC and gain settings of a channel, and safety cautions.

ADC and gain: volts at the ADC = gain × volts at the amplifier input, so with another gain
code ``g'`` the same input would sit at ``v_adc × gain[g'] / gain[g]``. From the codes a
channel logged we know the extremes of ``v_adc`` for each gain code, and so which gain codes
would have kept the same signal inside the converter's span.

* A reading at a rail (the lowest or highest code) is clipped: the true input is unknown.
  At the upper rail, or the lower rail of a bipolar span, a lower gain code helps; where
  there is none, or at the lower rail of a unipolar span (an input at or below the bottom
  of the span), the cause is the input: wiring, the sensor, or a broken 4-20 mA loop.
* A higher gain code gives finer resolution (one LSB at the amplifier input is
  ``LSB / gain``). It is advised when the most-used gain code's readings would still fit,
  with 10 % headroom toward each rail, at a gain at least twice as large.

Cautions follow the dimension of each channel's unit (pint, :mod:`countmill.units`).
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from countmill.report.data import ChannelSummary, CodeCounts
from countmill.sensors.adc import code_to_volts, valid_code_range
from countmill.units import parse_unit

HEADROOM = 0.9  # share of the way from 0 V to each end of the span a signal may use
MIN_GAIN_STEP = 2.0
MIN_SAMPLES = 10  # fewer readings say too little about a signal's extremes to advise a gain


@dataclass
class GainUse:
    gain_code: int
    gain: float | None
    count: int
    low_rail: int
    high_rail: int
    min_code: int | None  # over readings not at a rail
    max_code: int | None


@dataclass
class AdcView:
    """One ADC set-up of a channel (revisions that share it are merged)."""

    revisions: list[int]
    adc: dict | None
    gains: dict[int, float] | None
    counts: CodeCounts
    uses: list[GainUse]
    lowest: int
    highest: int
    #: (kind, text); kind is "rail" (use a lower gain), "fault" (no gain helps) or "resolution"
    advice: list[tuple[str, str]] = field(default_factory=list)

    @property
    def kinds(self) -> set[str]:
        return {kind for kind, _ in self.advice}

    @property
    def share_used(self) -> float:
        """Share of the ADC's codes between the lowest and highest code logged off the rails."""
        code = self.counts.code[self.counts.count > 0]
        if self.adc is not None:
            code = code[(code > self.lowest) & (code < self.highest)]
        if not len(code):
            return 0.0
        return (int(code.max()) - int(code.min()) + 1) / (self.highest - self.lowest + 1)


def _gain_label(code: int, gains: dict[int, float] | None) -> str:
    gain = (gains or {}).get(code)
    return f"gain code {code} (×{gain:g})" if gain is not None else f"gain code {code}"


def adc_views(summary: ChannelSummary) -> list[AdcView]:
    """The channel's ADC set-ups with their code statistics and advice (empty if derived)."""
    revisions = summary.meta.get("revisions") or []
    groups: dict[str, list[int]] = {}
    for r in sorted(summary.codes):
        rev = revisions[r] if r < len(revisions) else {}
        key = repr((rev.get("adc"), rev.get("gains")))
        groups.setdefault(key, []).append(r)
    views = []
    for members in groups.values():
        rev = revisions[members[0]] if members[0] < len(revisions) else {}
        parts = [summary.codes[r] for r in members]
        counts = _merge(parts)
        adc = rev.get("adc")
        gains = {int(k): float(v) for k, v in rev["gains"].items()} if rev.get("gains") else None
        if adc:
            lowest, highest = valid_code_range(int(adc["bits"]), adc["coding"])
        else:  # an older file without the ADC in its metadata: only what was logged
            lowest, highest = int(counts.code.min()), int(counts.code.max())
        view = AdcView(members, adc, gains, counts, _uses(counts, lowest, highest, gains, adc is not None), lowest, highest)
        _advise(view, summary)
        views.append(view)
    return views


def _merge(parts: list[CodeCounts]) -> CodeCounts:
    if len(parts) == 1:
        return parts[0]
    g = np.concatenate([p.gain for p in parts])
    c = np.concatenate([p.code for p in parts])
    n = np.concatenate([p.count for p in parts])
    keys, inverse = np.unique(np.stack([g, c]), axis=1, return_inverse=True)
    return CodeCounts(gain=keys[0], code=keys[1], count=np.bincount(inverse.ravel(), weights=n).astype(np.int64))


def _uses(counts: CodeCounts, lowest: int, highest: int, gains, rails_known: bool) -> list[GainUse]:
    uses = []
    for g in np.unique(counts.gain).tolist():
        sel = counts.gain == g
        code, n = counts.code[sel], counts.count[sel]
        low = int(n[code == lowest].sum()) if rails_known else 0
        high = int(n[code == highest].sum()) if rails_known else 0
        inner = (code > lowest) & (code < highest) if rails_known else np.ones(len(code), dtype=bool)
        uses.append(GainUse(
            gain_code=int(g),
            gain=(gains or {}).get(int(g)),
            count=int(n.sum()),
            low_rail=low,
            high_rail=high,
            min_code=int(code[inner].min()) if inner.any() else None,
            max_code=int(code[inner].max()) if inner.any() else None,
        ))
    return uses


def _advise(view: AdcView, summary: ChannelSummary) -> None:
    total = sum(u.count for u in view.uses) or 1
    unipolar = view.adc is not None and float(view.adc["span"][0]) >= 0.0
    for use in view.uses:
        label = _gain_label(use.gain_code, view.gains)
        lower = sorted((k for k, v in (view.gains or {}).items() if use.gain is not None and v < use.gain), key=lambda k: -view.gains[k])
        others = [u for u in view.uses if u is not use and u.low_rail + u.high_rail == 0 and u.count > use.count]
        for side, n, code in (("upper", use.high_rail, view.highest), ("lower", use.low_rail, view.lowest)):
            if not n:
                continue
            head = (f"Sat at the {side} rail (code {code}) in {n} of {total} samples "
                    f"({100 * n / total:.1f} %), with {label}.")
            if side == "lower" and unipolar:
                view.advice.append(("fault", head + " The input was at or below the bottom of a unipolar span, where no gain "
                                   "setting helps: check the wiring and the sensor (a broken 4-20 mA loop reads 0 mA)."))
            elif lower:
                hint = (f" Most samples used {_gain_label(others[0].gain_code, view.gains)} without reaching a rail: "
                        "check why the gain code changed.") if others else ""
                view.advice.append(("rail", head + f" Use a lower gain code: {_gain_label(lower[0], view.gains)}." + hint))
            elif view.gains is None:
                view.advice.append(("rail", head + " Use a lower gain code, if the amplifier has one; if not, check the "
                                   "wiring and the sensor."))
            else:
                view.advice.append(("fault", head + " There is no lower gain code for this channel, so the input itself "
                                   "left the converter's span: check the wiring and the sensor."))
    _advise_resolution(view, summary, total)


def _advise_resolution(view: AdcView, summary: ChannelSummary, total: int) -> None:
    main = max(view.uses, key=lambda u: u.count)
    if main.min_code is None or main.count < 0.5 * total or main.count < MIN_SAMPLES:
        return
    share = (main.max_code - main.min_code + 1) / (view.highest - view.lowest + 1)
    label = _gain_label(main.gain_code, view.gains)
    if view.adc is None or view.gains is None or main.gain is None:
        if share < 0.05:
            view.advice.append(("resolution", f"With {label} the readings used only {100 * share:.2g} % of the ADC codes; "
                               "a higher gain would give finer resolution if the signal stays this small."))
        return
    bits, span, coding = int(view.adc["bits"]), [float(s) for s in view.adc["span"]], view.adc["coding"]
    v_lo, v_hi = code_to_volts(np.array([main.min_code, main.max_code]), bits=bits, span=span, coding=coding)
    lo_limit = span[0] * HEADROOM if span[0] < 0 else span[0]
    hi_limit = span[1] * HEADROOM if span[1] > 0 else span[1]
    best = None
    for code, gain in view.gains.items():
        factor = gain / main.gain
        if factor < MIN_GAIN_STEP:
            continue
        if lo_limit <= v_lo * factor <= hi_limit and lo_limit <= v_hi * factor <= hi_limit:
            if best is None or gain > view.gains[best]:
                best = code
    if best is None:
        return
    n = view.gains[best] / main.gain
    lsb = (span[1] - span[0]) / 2**bits
    limits = summary.meta.get("revisions") or [{}]
    rng = limits[-1].get("range")
    check = (f" Check first that the largest input the sensor can give (its range {rng[0]:g} … {rng[1]:g} "
             f"{summary.unit}) still fits." if rng else " Check first that the largest input the sensor can give still fits.")
    view.advice.append((
        "resolution",
        f"With {label} the readings used {100 * share:.2g} % of the ADC codes. {_gain_label(best, view.gains).capitalize()} "
        f"would still keep them inside the span with 10 % headroom and give {n:g}× finer resolution "
        f"(one LSB = {lsb / view.gains[best] * 1e6:.4g} µV at the amplifier input instead of "
        f"{lsb / main.gain * 1e6:.4g} µV), if the signal stays within this period's extremes." + check,
    ))


# --- cautions ---------------------------------------------------------------------------------

CAUTION_GENERAL = (
    "countmill is a post-processor for logged data, not a safety system: it does not watch the plant as it "
    "runs and must never be used to trip, interlock or raise alarms. Readings marked suspect (3), bad (4) or "
    "missing (9) are not fit for any safety decision, and a good (1) reading is only as sound as the sensor, "
    "its wiring and its calibration. Work on sensor wiring on mains circuits, on pressure vessels and "
    "pipework, and on load-bearing structures is for qualified people, under the local codes and the site's "
    "own procedures."
)
CAUTIONS = {
    "pressure": "Pressure: a wrong or missing reading can hide an over-pressure. Protection comes from the "
                "vessel's own relief devices and rated gauges, not from this report; work on pressure systems "
                "only by qualified people under local codes.",
    "structure": "Load and strain: this report is no structural assessment. Whether a structure or support is "
                 "safe is for a qualified structural engineer to judge, under local codes.",
    "heat": "Temperature: hot vessels, surfaces and liquids burn. Over-temperature protection must be an "
            "independent device, never this report.",
    "electrical": "Electrical quantity: where this signal comes from a mains circuit, the measurement wiring "
                  "and its isolation are for qualified electricians, under local wiring codes.",
}
_DIMENSIONS = {
    "pressure": ({"[mass]": 1, "[length]": -1, "[time]": -2},),
    "structure": ({"[mass]": 1, "[length]": 1, "[time]": -2}, {"[mass]": 1}),
    "heat": ({"[temperature]": 1},),
    "electrical": (
        {"[current]": 1},
        {"[mass]": 1, "[length]": 2, "[time]": -3, "[current]": -1},  # voltage
        {"[mass]": 1, "[length]": 2, "[time]": -3},  # power
        {"[mass]": 1, "[length]": 2, "[time]": -2},  # energy
    ),
}


def caution_kinds(unit: str, chain: list[dict] | None = None) -> list[str]:
    """Which cautions apply to a channel, from its unit's dimension (and a bridge stage)."""
    kinds = []
    try:
        parsed = parse_unit(unit)
    except ValueError:
        return kinds
    dims = dict(parsed.dimensionality)
    for kind, shapes in _DIMENSIONS.items():
        if any(dims == shape for shape in shapes):
            kinds.append(kind)
    is_strain = "strain" in str(parsed) or any((s or {}).get("stage") == "bridge" for s in chain or [])
    if is_strain and "structure" not in kinds:
        kinds.append("structure")
    return kinds
