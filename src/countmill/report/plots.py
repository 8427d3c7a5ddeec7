"""Figures for the day report (matplotlib, Agg, no pyplot state): PNG bytes.

The time-series plot draws, per pixel column, the span between the lowest and the highest
usable value (good or not evaluated) as one connected line, so that a one-sample spike is
still a visible stroke on a day of millions of samples. Suspect samples are orange, bad
ones red (a ring or a cross marks a lone column); suspect or bad values beyond the axis are
triangles at its edge; samples without a value are grey ticks along the bottom. Range
limits are red dashed lines, expected limits orange dotted ones, each drawn over the time
its channel revision was in force.
"""

from __future__ import annotations

import io
from zoneinfo import ZoneInfo

import matplotlib

matplotlib.use("Agg")

import matplotlib.dates as mdates  # noqa: E402
import numpy as np  # noqa: E402
from matplotlib.figure import Figure  # noqa: E402
from matplotlib.transforms import blended_transform_factory  # noqa: E402

from countmill.report.data import ChannelSummary, DaySummary  # noqa: E402

DPI = 100
SERIES_SIZE = (11.0, 2.8)
COLORS = {"usable": "#1f5f99", "suspect": "#e08a00", "bad": "#c0182b", "missing": "#777777", "range": "#c0182b", "expect": "#e08a00"}


def _png(fig: Figure) -> bytes:
    buffer = io.BytesIO()
    fig.savefig(buffer, format="png", dpi=DPI, metadata={"Software": None})
    return buffer.getvalue()


def _to_days(times_us: np.ndarray) -> np.ndarray:
    """Matplotlib date numbers (days since 1970-01-01 UTC) from µs since the epoch."""
    return np.asarray(times_us, dtype=np.float64) / 86_400e6


def _revision_spans(summary: ChannelSummary, day: DaySummary) -> list[tuple[dict, float, float]]:
    revisions = summary.meta.get("revisions") or []
    if not revisions:
        return [(summary.meta, day.start_us, day.end_us)]
    starts = []
    for rev in revisions:
        text = rev.get("from_utc")
        starts.append(day.start_us if not text else int(np.datetime64(text.rstrip("Z"), "us").astype(np.int64)))
    spans = []
    for i, rev in enumerate(revisions):
        lo = max(starts[i], day.start_us)
        hi = min(starts[i + 1] if i + 1 < len(starts) else day.end_us, day.end_us)
        if hi > lo or len(revisions) == 1:
            spans.append((rev, lo, hi))
    return spans


def series_png(summary: ChannelSummary, day: DaySummary, timezone: str | None) -> bytes:
    fig = Figure(figsize=SERIES_SIZE)
    ax = fig.add_axes((0.06, 0.17, 0.78, 0.74))
    width = (day.end_us - day.start_us + 1) / day.columns
    x = _to_days(day.column_times_us() + width / 2)

    low, high = summary.low, summary.high
    shown = [a for cls in ("usable", "suspect") for a in (low[cls], high[cls])]
    data = np.concatenate(shown)
    data = data[np.isfinite(data)]
    spans = _revision_spans(summary, day)
    expects = [v for rev, _, _ in spans for v in (rev.get("expect") or [])]
    candidates = np.concatenate([data, np.asarray(expects, dtype=float)])
    if len(candidates) == 0:
        ranges = [v for rev, _, _ in spans for v in (rev.get("range") or [])]
        candidates = np.asarray(ranges or [0.0, 1.0], dtype=float)
    ylo, yhi = float(candidates.min()), float(candidates.max())
    pad = (yhi - ylo) * 0.06 or max(abs(yhi) * 0.01, 0.5)
    ylo, yhi = ylo - pad, yhi + pad

    y = np.empty(2 * len(x))
    y[0::2], y[1::2] = low["usable"], high["usable"]
    ax.plot(np.repeat(x, 2), y, color=COLORS["usable"], linewidth=0.8, label="good / not evaluated")
    inset = 0.015 * (yhi - ylo)  # off-scale samples are drawn just inside the frame, not on it
    for cls, marker, kwargs in (("suspect", "o", {"facecolors": "none", "edgecolors": COLORS["suspect"]}),
                                ("bad", "x", {"color": COLORS["bad"]})):
        lo, hi = np.clip(low[cls], ylo + inset, yhi - inset), np.clip(high[cls], ylo + inset, yhi - inset)
        present = np.isfinite(lo)
        if not present.any():
            continue
        y[0::2], y[1::2] = lo, hi
        ax.plot(np.repeat(x, 2), y, color=COLORS[cls], linewidth=0.9, zorder=3, label=cls)
        # a column whose neighbours hold none of this class would be an invisible dot: mark it
        alone = present & ~np.r_[False, present[:-1]] & ~np.r_[present[1:], False]
        pts_x, pts_y = np.r_[x[alone], x[alone]], np.r_[lo[alone], hi[alone]]
        if alone.any():
            ax.scatter(pts_x, pts_y, s=16, marker=marker, linewidths=0.9, zorder=4, **kwargs)
        for off, edge_y, arrow in ((low[cls] < ylo, ylo + inset, "v"), (high[cls] > yhi, yhi - inset, "^")):
            if off.any():
                ax.scatter(x[off], np.full(off.sum(), edge_y), s=22, marker=arrow, color=COLORS[cls], zorder=4,
                           label=f"{cls}, off scale")
    gaps = summary.missing > 0
    if gaps.any():
        edge = blended_transform_factory(ax.transData, ax.transAxes)
        ax.plot(x[gaps], np.full(gaps.sum(), 0.02), "|", color=COLORS["missing"], markersize=7, transform=edge, label="missing (no value)")

    off_scale = []
    for kind, style in (("range", "--"), ("expect", ":")):
        labelled = False
        for rev, lo, hi in spans:
            for v in rev.get(kind) or []:
                if ylo <= v <= yhi:
                    ax.hlines(v, _to_days(lo), _to_days(hi), colors=COLORS[kind], linestyles=style, linewidth=1.0,
                              label=None if labelled else f"{kind} limit")
                    labelled = True
                elif f"{kind} {v:g}" not in off_scale:
                    off_scale.append(f"{kind} {v:g}")
    ax.set_ylim(ylo, yhi)
    ax.set_xlim(_to_days(day.start_us), _to_days(max(day.end_us, day.start_us + 1_000_000)))  # one instant: 1 s wide
    zone = ZoneInfo(timezone) if timezone else None
    locator = mdates.AutoDateLocator(tz=zone)
    ax.xaxis.set_major_locator(locator)
    ax.xaxis.set_major_formatter(mdates.ConciseDateFormatter(locator, tz=zone))
    ax.set_xlabel(f"time ({timezone or 'UTC'})", fontsize=8)
    ax.set_ylabel(summary.unit, fontsize=9)
    ax.tick_params(labelsize=8)
    ax.grid(True, color="#dddddd", linewidth=0.5)
    title = summary.name + (f"   (off scale: {', '.join(off_scale)})" if off_scale else "")
    ax.set_title(title, fontsize=9, loc="left", y=1.0)
    ax.legend(loc="upper left", bbox_to_anchor=(1.01, 1.0), fontsize=7, frameon=False)
    return _png(fig)
