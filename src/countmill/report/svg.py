"""ADC code histograms as small inline SVG (drawn directly: bars, rails and a log axis).

Two panels per ADC set-up: the whole code range of the converter (so the share of it a
channel uses is plain to see, with the rails in red) and a zoom on the codes it used. One
filled path per gain code, counts on a log scale.
"""

from __future__ import annotations

import html

import numpy as np

from countmill.report.advice import AdcView

WIDTH, HEIGHT = 1100, 210
PANEL_W, PANEL_H = 400, 140
TOP, LEFT = 26, 58
GAIN_COLORS = ["#1f5f99", "#2a9d4b", "#8e44ad", "#d35400", "#16a085", "#7f8c8d"]
RAIL = "#c0182b"


def _e(text) -> str:
    return html.escape(str(text), quote=True)


def _panel(x0: float, lo: int, hi: int, bins: int, series: list[tuple[str, np.ndarray, np.ndarray]], title: str,
           rails: list[int]) -> list[str]:
    """One histogram panel of codes ``lo … hi`` in ``bins`` bars; ``series`` = (colour, codes, counts)."""
    n_codes = hi - lo + 1
    bins = max(1, min(bins, n_codes))
    binned = []
    for colour, codes, counts in series:
        inside = (codes >= lo) & (codes <= hi)
        slot = ((codes[inside] - lo) * bins) // n_codes
        binned.append((colour, np.bincount(slot, weights=counts[inside], minlength=bins)))
    ymax = max(float(b.max()) for _, b in binned)
    top = np.log10(max(ymax, 1.0)) + 0.15
    bar_w = PANEL_W / bins

    def y_of(count: np.ndarray) -> np.ndarray:
        return TOP + PANEL_H * (1.0 - np.log10(np.maximum(count, 1.0)) / top)

    out = [f'<rect x="{x0}" y="{TOP}" width="{PANEL_W}" height="{PANEL_H}" fill="#ffffff" stroke="#888" stroke-width="0.8"/>',
           f'<text x="{x0}" y="{TOP - 8}" font-size="12" fill="#333">{_e(title)}</text>']
    for decade in range(int(np.floor(top)) + 1):
        yy = float(y_of(np.array([10.0**decade]))[0])
        out.append(f'<line x1="{x0}" x2="{x0 + PANEL_W}" y1="{yy:.1f}" y2="{yy:.1f}" stroke="#e3e3e3" stroke-width="0.6"/>')
        out.append(f'<text x="{x0 - 4}" y="{yy + 4:.1f}" font-size="10" text-anchor="end" fill="#555">{10**decade:g}</text>')
    for colour, per_bin in binned:
        filled = np.flatnonzero(per_bin > 0)
        tops = y_of(per_bin[filled])
        path = "".join(
            f"M{x0 + i * bar_w:.2f},{TOP + PANEL_H}V{t:.2f}h{max(bar_w, 0.8):.2f}V{TOP + PANEL_H}z" for i, t in zip(filled.tolist(), tops.tolist())
        )
        out.append(f'<path d="{path}" fill="{colour}" fill-opacity="0.65" stroke="{colour}" stroke-width="0.5"/>')
    for code in rails:
        if lo <= code <= hi:
            xx = x0 + (code - lo + 0.5) * PANEL_W / n_codes
            out.append(f'<line x1="{xx:.1f}" x2="{xx:.1f}" y1="{TOP}" y2="{TOP + PANEL_H}" stroke="{RAIL}" stroke-width="1.5"/>')
    for k in range(5):
        code = lo + round(k * (n_codes - 1) / 4)
        xx = x0 + (code - lo + 0.5) * PANEL_W / n_codes
        anchor = "start" if k == 0 else "end" if k == 4 else "middle"
        out.append(f'<text x="{xx:.1f}" y="{TOP + PANEL_H + 14}" font-size="10" text-anchor="{anchor}" fill="#555">{code}</text>')
    out.append(f'<text x="{x0 + PANEL_W / 2}" y="{TOP + PANEL_H + 30}" font-size="11" text-anchor="middle" fill="#333">ADC code</text>')
    return out


def codes_svg(view: AdcView, title: str) -> str:
    """Inline SVG of the codes a channel logged, per gain code."""
    counts = view.counts
    gains = np.unique(counts.gain).tolist()
    series, legend = [], []
    for i, g in enumerate(gains):
        sel = counts.gain == g
        colour = GAIN_COLORS[i % len(GAIN_COLORS)]
        series.append((colour, counts.code[sel], counts.count[sel]))
        gain = (view.gains or {}).get(int(g))
        legend.append((colour, f"gain code {g}" + (f" (×{gain:g})" if gain is not None else " (unknown gain)")))
    used = counts.code[counts.count > 0]
    zlo, zhi = int(used.min()), int(used.max())
    rails = [view.lowest, view.highest] if view.adc is not None else []
    parts = [f'<svg xmlns="http://www.w3.org/2000/svg" role="img" width="{WIDTH}" height="{HEIGHT}" viewBox="0 0 {WIDTH} {HEIGHT}" '
             f'font-family="sans-serif"><title>{_e(title)}</title>']
    parts += _panel(LEFT, view.lowest, view.highest, 256, series, "whole ADC range (rails in red)", rails)
    parts += _panel(LEFT + PANEL_W + 60, zlo, zhi, 200, series, f"codes used: {zlo} … {zhi}", rails)
    x_legend = LEFT + 2 * PANEL_W + 80
    parts.append(f'<text x="{x_legend}" y="{TOP + 4}" font-size="11" fill="#333">samples per code (log)</text>')
    for i, (colour, label) in enumerate(legend):
        yy = TOP + 22 + 18 * i
        parts.append(f'<rect x="{x_legend}" y="{yy - 9}" width="12" height="10" fill="{colour}" fill-opacity="0.65"/>')
        parts.append(f'<text x="{x_legend + 18}" y="{yy}" font-size="11" fill="#333">{_e(label)}</text>')
    parts.append("</svg>")
    return "".join(parts)
