"""The benchmark harness runs end to end (``benchmarks/run.py --quick``).

Nothing here is timed: speed is shown by the harness itself, never by a test. The test only
checks that every step ran on the same records and that the results file holds the figures
the README quotes.
"""

from __future__ import annotations

import json
import subprocess
import sys
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]


@pytest.mark.slow
def test_the_benchmark_harness_runs_quick(tmp_path):
    out = tmp_path / "results.json"
    done = subprocess.run(
        [sys.executable, str(ROOT / "benchmarks" / "run.py"), "--quick", "--data", str(tmp_path / "data"), "--out", str(out)],
        capture_output=True, text=True, timeout=600,
    )
    assert done.returncode == 0, done.stderr
    results = json.loads(out.read_text())
    assert results["file"]["lines"] == 20_000
    # every row of the tidy output: one per record plus one derived row per trigger record
    assert results["file"]["rows_out"] > results["file"]["lines"]
    for step in ("convert", "transcode", "convert_binary", "read_text", "read_binary", "per_row_slice"):
        assert results["seconds_median"][step] > 0
    for key in ("convert_over_transcode", "per_row_script_over_convert", "csv_convert_over_binary_convert",
                "peak_rss_growth_4x", "thermocouple_over_linear"):
        assert key in results["ratios"]
    sizes = results["memory"]
    assert len(sizes) == 2 and all(size["convert"]["peak_rss_mib"] > 0 for size in sizes.values())
    assert "convert / transcode" in done.stdout
