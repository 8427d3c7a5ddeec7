#!/usr/bin/env python3
"""Time ``countmill report`` against ``countmill convert`` on the same generated day.

    python benchmarks/report_vs_convert.py --scan 0.2        # about 8.6 million rows
    python benchmarks/report_vs_convert.py --scan 10         # the demo day

Each step runs as its own process (start-up included), as a user runs it. The report reads
only the columns it needs and aggregates in one streaming pass; its plots cost about the
same whatever the size of the day, so the gap to the conversion grows with the day.
"""

from __future__ import annotations

import argparse
import resource
import subprocess
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]


def timed(command: list[str]) -> tuple[float, float]:
    """Wall and CPU seconds of a child process."""
    before = resource.getrusage(resource.RUSAGE_CHILDREN)
    start = time.perf_counter()
    done = subprocess.run(command, capture_output=True, text=True)
    wall = time.perf_counter() - start
    after = resource.getrusage(resource.RUSAGE_CHILDREN)
    if done.returncode not in (0, 3):
        sys.exit(f"{' '.join(command)} failed ({done.returncode}):\n{done.stderr}")
    return wall, (after.ru_utime - before.ru_utime) + (after.ru_stime - before.ru_stime)


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--scan", type=float, default=0.2, help="scan interval of the generated day [s]")
    parser.add_argument("--hours", type=float, default=24)
    args = parser.parse_args()
    countmill = [str(Path(sys.executable).with_name("countmill"))]  # the console script beside this Python
    with tempfile.TemporaryDirectory() as tmp:
        folder = Path(tmp)
        subprocess.run([sys.executable, str(ROOT / "demo_logs" / "make_day.py"), "--out", str(folder),
                        "--scan", str(args.scan), "--hours", str(args.hours)], check=True, capture_output=True)
        raw = next(folder.glob("*.csv"))
        out = folder / "day.parquet"
        convert = timed(countmill + ["convert", "-q", str(raw), "--map", str(ROOT / "channel_maps" / "brewhouse.toml"), "-o", str(out)])
        report = timed(countmill + ["report", "-q", str(out), "-o", str(folder / "report.html")])
        import pyarrow.parquet as pq

        rows = pq.ParquetFile(out).metadata.num_rows
    print(f"rows           {rows}")
    print(f"convert        {convert[0]:7.2f} s wall {convert[1]:7.2f} s CPU")
    print(f"report         {report[0]:7.2f} s wall {report[1]:7.2f} s CPU")
    print(f"report/convert {report[1] / convert[1]:7.2f} (CPU)")


if __name__ == "__main__":
    main()
