"""Fixtures for the report tests: the crafted day of ``report_day.py`` (beside this file),
converted and reported once per session, and Debian's headless Chromium."""

from __future__ import annotations

import shutil
import subprocess
import sys
from pathlib import Path

import pytest

sys.path.insert(0, str(Path(__file__).parent))  # the test modules import report_day

from report_day import write_day  # noqa: E402

from countmill.convert import convert_file  # noqa: E402
from countmill.report import write_report  # noqa: E402


@pytest.fixture(scope="session")
def crafted_day(tmp_path_factory):
    folder = tmp_path_factory.mktemp("report")
    cmap, raw = write_day(folder)
    tidy = folder / "day.parquet"
    convert_file(raw, cmap, tidy)
    convert_file(raw, cmap, folder / "day.csv")
    report = folder / "report.html"
    result = write_report(tidy, report)
    return {"folder": folder, "map": cmap, "raw": raw, "tidy": tidy, "csv": folder / "day.csv", "report": report, "result": result}


@pytest.fixture(scope="session")
def chromium():
    """Debian's chromium; installed once with apt-get when missing (needs root and the mirror)."""
    path = shutil.which("chromium")
    if path is None and shutil.which("apt-get"):
        try:
            subprocess.run(["apt-get", "update", "-q"], check=True, capture_output=True, timeout=600)
            subprocess.run(["apt-get", "install", "-y", "-q", "chromium"], check=True, capture_output=True, timeout=900)
        except (subprocess.SubprocessError, OSError) as exc:
            pytest.skip(f"chromium is not installed and apt-get could not install it: {exc}")
        path = shutil.which("chromium")
    if path is None:
        pytest.skip("chromium is not installed (Debian package 'chromium') and there is no apt-get to install it")
    return path
