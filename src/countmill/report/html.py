"""The day report as one self-contained HTML page: inline CSS, images as base64 PNG,
no script, no font or file from anywhere else."""

from __future__ import annotations

import base64
import datetime as dt
import html
from zoneinfo import ZoneInfo

import numpy as np

from countmill import __version__
from countmill.report.advice import CAUTION_GENERAL, CAUTIONS, AdcView, caution_kinds
from countmill.report.data import ChannelSummary, DaySummary

LEVEL_NAMES = ["good", "not evaluated", "suspect", "bad", "missing"]

CSS = """
body { font-family: system-ui, -apple-system, "Segoe UI", Roboto, sans-serif; margin: 24px auto; max-width: 1180px;
       color: #1d2329; background: #ffffff; line-height: 1.4; }
h1 { font-size: 1.5em; margin-bottom: 0.2em; } h2 { font-size: 1.15em; margin: 1.6em 0 0.3em; border-top: 2px solid #d7dde3; padding-top: 0.6em; }
table { border-collapse: collapse; font-size: 0.82em; } th, td { padding: 3px 7px; border-bottom: 1px solid #e3e7eb; text-align: right; }
th { background: #eef2f5; } td.name, th.name { text-align: left; } td.flags { text-align: left; color: #5a6570; }
table.head td, table.head th { text-align: left; border: none; padding: 1px 10px 1px 0; }
.caution { background: #fff4e0; border-left: 5px solid #e08a00; padding: 8px 12px; margin: 12px 0; font-size: 0.9em; }
.caution.small { margin: 6px 0; padding: 4px 10px; font-size: 0.82em; }
.advice { background: #e8f1fb; border-left: 5px solid #1f5f99; padding: 6px 12px; margin: 6px 0; font-size: 0.88em; }
.advice.fault { background: #fbe9eb; border-left-color: #c0182b; }
.muted { color: #5a6570; font-size: 0.85em; } img { display: block; max-width: 100%; }
.q3 { color: #a86500; } .q4 { color: #c0182b; } .q9 { color: #555; }
"""


def _e(value) -> str:
    return html.escape(str(value), quote=True)


def _num(value: float) -> str:
    if value is None or not np.isfinite(value):
        return "–"
    return f"{value:.4g}"


def _share(n: int, total: int) -> str:
    """Per cent with one decimal; a share too small to show as 0.1 is '<0.1', never '0.0'."""
    pct = 100 * n / total
    return "<0.1" if 0 < pct < 0.05 else f"{pct:.1f}"


def _img(png: bytes, alt: str) -> str:
    return f'<img alt="{_e(alt)}" src="data:image/png;base64,{base64.b64encode(png).decode()}">'


def anchor(name: str) -> str:
    return "ch-" + "".join(c if c.isalnum() or c in "-_" else "-" for c in name)


def _when(instant_us: int, zone: str | None) -> str:
    t = dt.datetime.fromtimestamp(instant_us / 1e6, tz=dt.timezone.utc)
    text = t.strftime("%Y-%m-%d %H:%M:%S UTC")
    if zone and zone != "UTC":
        text += " (" + t.astimezone(ZoneInfo(zone)).strftime("%Y-%m-%d %H:%M:%S %Z") + ")"
    return text


def header(day: DaySummary) -> str:
    info = day.provenance
    source, cmap = info.get("source", {}), info.get("map", {})
    zone = cmap.get("timezone")
    rejects = "no rejects file beside it" if day.rejects is None else f"{day.rejects} (in {day.path.name}.rejects.csv)"
    rows = [
        ("converted file", day.path.name),
        ("raw source", f"{source.get('name', '?')}  sha256 {source.get('sha256', '?')}"),
        ("channel map", f"{cmap.get('name', '?')} ({cmap.get('path', '?')})  sha256 {cmap.get('sha256', '?')}"),
        ("period", f"{_when(day.start_us, zone)} to {_when(day.end_us, zone)}" if day.rows else "no rows"),
        ("rows", f"{day.rows}" + (f", of which {day.unmapped} from unmapped channels" if day.unmapped else "")),
        ("rejected lines", rejects),
        ("converted with", f"countmill {info.get('version', '?')}; report by countmill {__version__}"),
    ]
    cells = "".join(f"<tr><th>{_e(k)}</th><td>{_e(v)}</td></tr>" for k, v in rows)
    return f'<h1>Day report: {_e(source.get("name", day.path.name))}</h1>\n<table class="head">{cells}</table>'


def summary_table(day: DaySummary, advice_count: dict[str, int]) -> str:
    head = ("<tr><th class='name'>channel</th><th>unit</th><th>samples</th><th>min</th><th>mean</th><th>max</th>"
            + "".join(f"<th>% {n}</th>" for n in LEVEL_NAMES)
            + "<th class='name'>most frequent reasons</th><th>advice</th></tr>")
    body = []
    for ch in day.channels:
        total = ch.samples or 1
        shares = "".join(
            f"<td class='q{q}'>{_share(n, total)}</td>" if n else "<td>0</td>"
            for q, n in zip((1, 2, 3, 4, 9), ch.levels.tolist())
        )
        flags = ", ".join(f"{name} × {n}" for name, n in ch.top_flags()) or "–"
        body.append(
            f"<tr><td class='name'><a href='#{anchor(ch.name)}'>{_e(ch.name)}</a></td><td>{_e(ch.unit)}</td>"
            f"<td>{ch.samples}</td><td>{_num(ch.minimum)}</td><td>{_num(ch.mean)}</td><td>{_num(ch.maximum)}</td>"
            f"{shares}<td class='flags'>{_e(flags)}</td><td>{advice_count.get(ch.name, 0) or ''}</td></tr>"
        )
    note = ("<p class='muted'>min, mean and max are over the samples of quality good (1) or not evaluated (2). "
            "Quality levels follow the IOC/IODE primary-level flag scheme; the reasons are the contract's flag names.</p>")
    return f"<h2>Summary</h2>\n<table>{head}{''.join(body)}</table>\n{note}"


def channel_section(ch: ChannelSummary, series: bytes, views: list[tuple[AdcView, str]]) -> str:
    meta = ch.meta
    parts = [f"<h2 id='{anchor(ch.name)}'>{_e(ch.name)} <span class='muted'>[{_e(ch.unit)}]"
             + (f", channel {meta['id']}" if meta.get("id") is not None else ", derived") + "</span></h2>"]
    if meta.get("description"):
        parts.append(f"<p class='muted'>{_e(meta['description'])}</p>")
    if meta.get("expression"):
        parts.append(f"<p class='muted'>computed as <code>{_e(meta['expression'])}</code></p>")
    for kind in caution_kinds(ch.unit, meta.get("chain")):
        parts.append(f"<div class='caution small'>{_e(CAUTIONS[kind])}</div>")
    levels = ", ".join(f"{name} {n}" for name, n in zip(LEVEL_NAMES, ch.levels.tolist()) if n)
    parts.append(f"<p class='muted'>{ch.samples} samples: {_e(levels)}.</p>")
    parts.append(_img(series, f"{ch.name} over the period"))
    if ch.derived:
        parts.append("<p class='muted'>A derived channel has no ADC codes of its own.</p>")
    for view, picture in views:
        revs = ""
        if len(ch.meta.get("revisions") or []) > 1:
            revs = " (revision " + ", ".join(str(r + 1) for r in view.revisions) + ")"
        adc = view.adc
        if adc:
            lsb = (adc["span"][1] - adc["span"][0]) / 2 ** adc["bits"]
            what = f"{adc['bits']}-bit {adc['coding']} ADC, {adc['span'][0]:g} … {adc['span'][1]:g} V, LSB {lsb * 1e6:.4g} µV"
        else:
            what = "ADC set-up not recorded in this file"
        parts.append(f"<h3 class='muted'>ADC and gain{_e(revs)}: {_e(what)}; readings off the rails span {100 * view.share_used:.2g} % of the codes</h3>")
        parts.append(f"<div class='codes'>{picture}</div>")
        uses = "".join(
            f"<tr><td class='name'>{u.gain_code}</td><td>{'×%g' % u.gain if u.gain is not None else 'unknown'}</td>"
            f"<td>{u.count}</td><td>{u.low_rail}</td><td>{u.high_rail}</td>"
            f"<td>{'' if u.min_code is None else u.min_code}</td><td>{'' if u.max_code is None else u.max_code}</td></tr>"
            for u in view.uses
        )
        parts.append("<table><tr><th class='name'>gain code</th><th>gain</th><th>samples</th><th>at lower rail</th>"
                     f"<th>at upper rail</th><th>lowest code</th><th>highest code</th></tr>{uses}</table>")
        for kind, text in view.advice:
            parts.append(f"<div class='advice {kind}'><b>ADC advice.</b> {_e(text)}</div>")
    return "\n".join(parts)


def page(day: DaySummary, sections: list[str], advice_count: dict[str, int]) -> str:
    kinds = sorted({k for ch in day.channels for k in caution_kinds(ch.unit, ch.meta.get("chain"))})
    caution = ""
    if kinds:
        caution = f"<div class='caution'><b>Caution.</b> {_e(CAUTION_GENERAL)}</div>"
    title = f"countmill day report: {day.provenance.get('source', {}).get('name', day.path.name)}"
    body = "\n".join([header(day), caution, summary_table(day, advice_count), *sections])
    return (f"<!DOCTYPE html>\n<html lang='en'><head><meta charset='utf-8'><title>{_e(title)}</title>"
            f"<meta name='viewport' content='width=device-width, initial-scale=1'><style>{CSS}</style></head>\n"
            f"<body>\n{body}\n</body></html>\n")
