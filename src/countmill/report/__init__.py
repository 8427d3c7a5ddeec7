"""The day report: one self-contained HTML page per converted (tidy) file.

>>> from countmill.report import write_report
>>> write_report("day.parquet", "day.html")  # doctest: +SKIP

:mod:`~countmill.report.data` reads and summarises (one streaming pass),
:mod:`~countmill.report.advice` turns code statistics into ADC and gain advice and picks the
safety cautions, :mod:`~countmill.report.plots` draws, :mod:`~countmill.report.html` writes.
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

from countmill.pipeline.output import publish, temporary_path


@dataclass
class ReportResult:
    output: Path
    channels: int
    rows: int
    #: channel -> advice kinds ("rail", "fault", "resolution")
    advice: dict[str, list[str]]


def write_report(converted: str | Path, output: str | Path, *, columns: int = 1000) -> ReportResult:
    """Summarise ``converted`` (a tidy countmill Parquet or CSV) into the HTML page ``output``.

    ``columns`` is the number of time slices per plot (about one per pixel column).
    """
    from countmill.report import advice as adv, html, plots, svg  # noqa: PLC0415 (matplotlib is slow to import)
    from countmill.report.data import summarise  # noqa: PLC0415

    day = summarise(converted, columns=columns)
    zone = day.provenance.get("map", {}).get("timezone")
    sections, counts, kinds = [], {}, {}
    for ch in day.channels:
        views = adv.adc_views(ch)
        pictures = [(view, svg.codes_svg(view, f"{ch.name}: ADC codes per gain code")) for view in views]
        sections.append(html.channel_section(ch, plots.series_png(ch, day, zone), pictures))
        counts[ch.name] = sum(len(v.advice) for v in views)
        kinds[ch.name] = sorted({k for v in views for k in v.kinds})
    text = html.page(day, sections, counts)
    output = Path(output)
    output.parent.mkdir(parents=True, exist_ok=True)
    tmp = temporary_path(output)
    try:
        tmp.write_text(text, encoding="utf-8")
        publish(tmp, output)
    except BaseException:
        tmp.unlink(missing_ok=True)
        raise
    return ReportResult(output=output, channels=len(day.channels), rows=day.rows, advice={k: v for k, v in kinds.items() if v})
