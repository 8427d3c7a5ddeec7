"""The day report on a crafted day (see conftest.py): structure, self-containment, advice,
numbers against pandas, and a real render in headless Chromium."""

from __future__ import annotations

import re
import subprocess
from html.parser import HTMLParser

import numpy as np
import pandas as pd
import pytest
from click.testing import CliRunner
from report_day import CHANNELS, SPIKE_CODE  # beside this file (conftest puts it on the path)

from countmill.cli import cli
from countmill.report.advice import CAUTIONS
from countmill.report.data import summarise


class _Collect(HTMLParser):
    def __init__(self):
        super().__init__()
        self.links: list[tuple[str, str, str]] = []  # (tag, attribute, value)
        self.tags: list[str] = []

    def handle_starttag(self, tag, attrs):
        self.tags.append(tag)
        for name, value in attrs:
            if name in ("src", "href", "xlink:href", "srcset", "action", "poster", "data"):
                self.links.append((tag, name, value or ""))


def sections(text: str) -> dict[str, str]:
    """Channel name -> the HTML of its section."""
    parts = re.split(r"(?=<h2 id='ch-)", text)
    out = {}
    for part in parts[1:]:
        name = re.match(r"<h2 id='ch-([^']+)'", part).group(1)
        out[name] = part
    return out


@pytest.fixture(scope="module")
def page(crafted_day):
    return crafted_day["report"].read_text(encoding="utf-8")


def test_every_channel_has_a_section_with_its_plot(page):
    found = sections(page)
    assert sorted(found) == sorted(CHANNELS)
    for name, html in found.items():
        assert html.count('src="data:image/png;base64,') >= 1, name
    # measured channels also get the ADC code histogram (inline SVG); the derived one does not
    for name in CHANNELS:
        assert ("<svg" in found[name]) == (name != "double_volts"), name


def test_page_is_self_contained(page):
    parser = _Collect()
    parser.feed(page)
    assert parser.links, "expected images and in-page links"
    for tag, attribute, value in parser.links:
        assert value.startswith(("data:", "#")), f"<{tag} {attribute}={value[:60]!r}> reaches outside the page"
    assert "script" not in parser.tags and "link" not in parser.tags and "iframe" not in parser.tags
    assert "url(" not in page and "@import" not in page


def test_header_from_provenance(page, crafted_day):
    assert "report-test-rig" in page and "rig-2026-06-10.csv" in page
    assert "rejected lines</th><td>1 (in day.parquet.rejects.csv)" in page  # one line of the raw file is no record
    assert "2026-06-10 07:00:00 UTC" in page  # 08:00 Irish summer time (IST, UTC+1), from the IANA tz database


def test_rail_advice_fires_only_where_a_channel_sat_at_a_rail(page, crafted_day):
    found = sections(page)
    # reference: a 12-bit two's complement ADC logs -2048 … 2047, and those two codes are its rails
    # (contract §4; common practice for two's complement converters)
    pressure = found["vessel_pressure"]
    assert "class='advice rail'" in pressure
    assert "upper rail (code 2047) in 120 of 720 samples" in pressure
    assert "Use a lower gain code: gain code 1 (×10)" in pressure
    # 4-20 mA at 0 mA on a unipolar span reads code 0: no gain setting helps
    assert "class='advice fault'" in found["loop_level"] and "lower rail (code 0)" in found["loop_level"]
    for healthy in ("bench_volts", "beam_strain", "double_volts"):
        assert "class='advice" not in found[healthy], healthy
    assert crafted_day["result"].advice == {"vessel_pressure": ["rail"], "loop_level": ["fault"], "probe_volts": ["resolution"]}


def test_resolution_advice_from_the_gain_table(page):
    probe = sections(page)["probe_volts"]
    # reference: the map's gain table (×1 → ×10 is 10× finer) and LSB = span / 2^bits
    # = 4.096 V / 4096 = 1 mV at the ADC, so 100 µV at the amplifier input with ×10;
    # ×100 would put ±0.1 V at ±10 V, beyond the ±2.048 V span
    assert "class='advice resolution'" in probe
    assert "Gain code 1 (×10) would still keep them inside the span with 10 % headroom and give 10× finer resolution" in probe
    assert "one LSB = 100 µV at the amplifier input instead of 1000 µV" in probe


def test_cautions_follow_the_unit_dimension(page):
    found = sections(page)
    assert "<b>Caution.</b> countmill is a post-processor" in page
    assert CAUTIONS["pressure"].split(":")[0] in found["vessel_pressure"]  # kPa: pressure
    assert CAUTIONS["structure"][:40] in found["beam_strain"]  # strain: structures
    assert CAUTIONS["electrical"][:40] in found["bench_volts"]  # V: possibly mains
    assert "Pressure:" not in found["loop_level"] and "Load and strain" not in found["loop_level"]


def _summary_rows(page: str) -> dict[str, list[str]]:
    table = page.split("<h2>Summary</h2>")[1].split("</table>")[0]
    rows = {}
    for row in re.findall(r"<tr>(.*?)</tr>", table)[1:]:
        cells = [re.sub(r"<[^>]+>", "", c) for c in re.findall(r"<td[^>]*>(.*?)</td>", row)]
        rows[cells[0]] = cells
    return rows


def test_summary_table_against_pandas(page, crafted_day):
    tidy = pd.read_parquet(crafted_day["tidy"])  # reference: pandas groupby of the tidy output
    rows = _summary_rows(page)
    for name in CHANNELS:
        mine = tidy[tidy["channel"] == name]
        usable = mine[mine["quality"].isin([1, 2])]["value"]
        cells = rows[name]
        assert int(cells[2]) == len(mine)
        for cell, want in zip(cells[3:6], (usable.min(), usable.mean(), usable.max())):
            assert float(cell.replace("−", "-")) == pytest.approx(want, rel=5e-4, abs=1e-9), name
        for cell, level in zip(cells[6:11], (1, 2, 3, 4, 9)):
            share = 100 * (mine["quality"] == level).mean()
            assert cell == ("0" if share == 0 else "<0.1" if share < 0.05 else f"{share:.1f}"), (name, level)


def test_plot_envelope_keeps_the_spike_and_matches_pandas(crafted_day):
    day = summarise(crafted_day["tidy"], columns=40)
    tidy = pd.read_parquet(crafted_day["tidy"])
    volts = tidy[(tidy["channel"] == "bench_volts")].copy()
    # reference: pandas groupby over 40 equal time slices of the period
    t = volts["time"].astype("int64").to_numpy()
    slices = (t - day.start_us) * 40 // (day.end_us - day.start_us + 1)
    ch = next(c for c in day.channels if c.name == "bench_volts")
    for cls, levels in (("usable", [1, 2]), ("suspect", [3])):
        sel = volts["quality"].isin(levels).to_numpy()
        want_hi = pd.Series(volts["value"].to_numpy()[sel]).groupby(slices[sel]).max().reindex(range(40))
        want_lo = pd.Series(volts["value"].to_numpy()[sel]).groupby(slices[sel]).min().reindex(range(40))
        np.testing.assert_array_equal(ch.high[cls], want_hi.to_numpy())
        np.testing.assert_array_equal(ch.low[cls], want_lo.to_numpy())
    # the one-sample spike (1990 codes of 1 mV, outside `expect`: suspect) survives decimation
    assert np.nanmax(ch.high["suspect"]) == pytest.approx(SPIKE_CODE * 4.096 / 4096)


def test_report_from_csv_matches_parquet(crafted_day, tmp_path):
    from countmill.report import write_report

    out = tmp_path / "from-csv.html"
    result = write_report(crafted_day["csv"], out)
    assert result.advice == crafted_day["result"].advice
    assert _summary_rows(out.read_text()) == _summary_rows(crafted_day["report"].read_text())


def test_cli_report_exit_codes(crafted_day, tmp_path):
    runner = CliRunner()
    ok = runner.invoke(cli, ["report", str(crafted_day["tidy"]), "-o", str(tmp_path / "r.html")])
    assert ok.exit_code == 0, ok.output
    assert (tmp_path / "r.html").read_text().startswith("<!DOCTYPE html>")
    missing = runner.invoke(cli, ["report", str(tmp_path / "none.parquet"), "-o", str(tmp_path / "x.html")])
    assert missing.exit_code == 1  # contract §2: failed, nothing written
    wide = tmp_path / "wide.parquet"
    runner.invoke(cli, ["convert", str(crafted_day["raw"]), "--map", str(crafted_day["map"]), "--layout", "wide", "--every", "1min", "-o", str(wide)])
    refused = runner.invoke(cli, ["report", str(wide), "-o", str(tmp_path / "y.html")])
    assert refused.exit_code == 2 and not (tmp_path / "y.html").exists()


@pytest.mark.browser
def test_renders_in_headless_chromium(crafted_day, chromium, tmp_path):
    from PIL import Image

    shot = tmp_path / "shot.png"
    command = [
        chromium, "--headless", "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
        "--disable-background-networking", "--disable-component-update", "--disable-sync",
        f"--user-data-dir={tmp_path / 'profile'}", f"--screenshot={shot}", "--window-size=1280,2000",
        crafted_day["report"].resolve().as_uri(),
    ]
    subprocess.run(command, check=True, capture_output=True, timeout=120)
    pixels = np.asarray(Image.open(shot).convert("L"), dtype=float)
    assert pixels.shape == (2000, 1280)
    # a blank page is one grey level; the report has text, tables and plots
    assert pixels.std() > 20
    assert (pixels < 128).mean() > 0.01
