"""The run summary: ``DIR/batch-summary.json`` (the latest run) and ``DIR/summaries/``.

Both are written like the outputs: a temporary name in the same folder, ``fsync``, rename.
The fields are listed in ``docs/batch.md``.
"""

from __future__ import annotations

import datetime as dt
import json
import os
from pathlib import Path

from countmill.flags import Quality
from countmill.pipeline.output import publish, temporary_path

SUMMARY_NAME = "batch-summary.json"
HISTORY_FOLDER = "summaries"
QUALITY_NAMES = {int(q): q.name.lower() for q in Quality}


def utc_text(moment: dt.datetime) -> str:
    return moment.astimezone(dt.timezone.utc).strftime("%Y-%m-%dT%H:%M:%S.%fZ")[:-4] + "Z"


def named_quality(counts: dict[int, int]) -> dict[str, int]:
    """``{1: 5, 3: 2}`` -> ``{"good": 5, "suspect": 2}``, all five levels present."""
    return {QUALITY_NAMES[level]: int(counts.get(level, 0)) for level in QUALITY_NAMES}


def add_quality(total: dict[str, dict[str, int]], per_file: dict[str, dict[str, int]]) -> None:
    for channel, levels in per_file.items():
        into = total.setdefault(channel, {name: 0 for name in QUALITY_NAMES.values()})
        for name, n in levels.items():
            into[name] += n


def write_json_atomic(path: Path, data: dict) -> None:
    path.parent.mkdir(parents=True, exist_ok=True)
    tmp = temporary_path(path)
    try:
        with open(tmp, "w", encoding="utf-8") as fh:
            json.dump(data, fh, indent=2, ensure_ascii=False)
            fh.write("\n")
        publish(tmp, path)
    except BaseException:
        tmp.unlink(missing_ok=True)
        raise


def write_summary(out_dir: Path, summary: dict, started: dt.datetime) -> Path:
    """Write the timestamped copy, then the latest; returns the latest's path."""
    history = out_dir / HISTORY_FOLDER
    stamp = started.astimezone(dt.timezone.utc).strftime("%Y%m%dT%H%M%SZ")
    copy = history / f"batch-{stamp}.json"
    n = 1
    while copy.exists():
        copy = history / f"batch-{stamp}-{n}.json"
        n += 1
    summary = dict(summary, summary_copy=os.path.relpath(copy, out_dir))
    write_json_atomic(copy, summary)
    latest = out_dir / SUMMARY_NAME
    write_json_atomic(latest, summary)
    return latest
