"""Helpers for the batch tests: a tiny two-channel map, logs written on the spot, the CLI.

Nothing here is reference data: the logs are invented (a tank level on channel 1, a line
pressure on channel 2, one scan per second) and the tests compare countmill with itself
(rerun, killed run, workers, cluster) or check what the batch did with each file.
"""

from __future__ import annotations

import contextlib
import datetime as dt
import gzip
import io
import json
import os
import subprocess
import sys
from pathlib import Path

import pyarrow.parquet as pq

MAP_TEMPLATE = """\
[map]
name = "tiny-logger"
timezone = "UTC"
{files}

[adc]
bits = 12
span = [0.0, 4.096]
coding = "straight"

[gains]
0 = 1
1 = 10

[[channel]]
id = 1
name = "tank_level"
unit = "m"
range = [0, 3]
chain = [ {{ stage = "linear", slope = {slope}, intercept = 0.0 }} ]

[[channel]]
id = 2
name = "line_pressure"
unit = "bar"
range = [0, 10]
expect = [0.1, 9]
chain = [ {{ stage = "linear", slope = 2.5, intercept = 0.0 }} ]
"""


def write_map(path: Path, *, slope: float = 1.0, files: str | None = None) -> Path:
    files_line = f'files = "{files}"' if files else ""
    path.write_text(MAP_TEMPLATE.format(slope=slope, files=files_line))
    return path


def log_text(scans: int, *, day: int = 3, garbage_every: int = 0) -> str:
    """``scans`` seconds of two channels; every ``garbage_every``-th scan adds an unreadable line."""
    t0 = dt.datetime(2026, 11, day)
    lines = ["time,channel,code,gain"]
    for i in range(scans):
        t = (t0 + dt.timedelta(seconds=i)).isoformat()
        lines.append(f"{t},1,{1000 + (i * 7) % 900},0")
        lines.append(f"{t},2,{200 + (i * 13) % 150},1")
        if garbage_every and i % garbage_every == garbage_every - 1:
            lines.append(f"{t},2,not-a-code,1")
    return "\n".join(lines) + "\n"


def write_log(path: Path, scans: int, *, gz: bool = False, **kw) -> Path:
    data = log_text(scans, **kw).encode()
    path.write_bytes(gzip.compress(data, mtime=0) if gz else data)
    return path


def countmill_cmd(*args: str) -> list[str]:
    script = Path(sys.executable).with_name("countmill")
    if script.exists():
        return [str(script), *args]
    return [sys.executable, "-c", "import sys; from countmill.cli import main; main(sys.argv[1:])", *args]


def run_cli(*args: str, timeout: float = 60, **kw) -> subprocess.CompletedProcess:
    return subprocess.run(countmill_cmd(*args), capture_output=True, text=True, timeout=timeout, **kw)


def invoke(*args: str) -> subprocess.CompletedProcess:
    """Run the command line in this process (no start-up cost); same exit codes and stderr."""
    from countmill.cli import main  # noqa: PLC0415

    err = io.StringIO()
    code = 0
    with contextlib.redirect_stderr(err), contextlib.redirect_stdout(io.StringIO()):
        try:
            main(list(args))
        except SystemExit as exc:
            code = exc.code if isinstance(exc.code, int) else (0 if exc.code is None else 1)
    return subprocess.CompletedProcess(args, code, "", err.getvalue())


def summary(out: Path) -> dict:
    return json.loads((out / "batch-summary.json").read_text())


def tables(out: Path) -> dict[str, object]:
    """Every final ``*.parquet`` of ``out`` read back as an Arrow table (with its metadata)."""
    return {p.name: pq.read_table(p) for p in sorted(out.glob("*.parquet"))}


def partials(out: Path) -> list[str]:
    return sorted(str(p.relative_to(out)) for p in out.rglob(".*.partial-*"))


def age(path: Path, seconds: float) -> None:
    """Set mtime back, as an old file would have it."""
    st = path.stat()
    os.utime(path, ns=(st.st_atime_ns, st.st_mtime_ns - int(seconds * 1e9)))
