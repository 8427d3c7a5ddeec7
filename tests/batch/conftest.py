"""Fixtures for the batch tests; the helpers live in ``batch_helpers.py`` beside this file."""

from __future__ import annotations

import shutil
import sys
from pathlib import Path

import pytest

sys.path.insert(0, str(Path(__file__).parent))  # the test modules import batch_helpers

from batch_helpers import write_log, write_map  # noqa: E402


@pytest.fixture
def tiny_map(tmp_path: Path) -> Path:
    return write_map(tmp_path / "tiny.toml")


@pytest.fixture
def inbox(tmp_path: Path) -> Path:
    """Three good files of 300 scans (600 lines) each, one of them gzipped."""
    folder = tmp_path / "inbox"
    folder.mkdir()
    write_log(folder / "tank-2026-11-03.csv", 300, day=3)
    write_log(folder / "tank-2026-11-04.csv", 300, day=4)
    write_log(folder / "tank-2026-11-05.csv.gz", 300, day=5, gz=True)
    return folder


@pytest.fixture(scope="session")
def big_logs(tmp_path_factory) -> list[Path]:
    """Three files of 150 000 scans (300 000 lines, ~9 MB) each, written once per session."""
    folder = tmp_path_factory.mktemp("big")
    return [write_log(folder / f"big-2026-11-{d:02d}.csv", 150_000, day=d) for d in (3, 4, 5)]


@pytest.fixture
def big_inbox(tmp_path: Path, big_logs: list[Path]) -> Path:
    folder = tmp_path / "big-inbox"
    folder.mkdir()
    for p in big_logs:
        shutil.copyfile(p, folder / p.name)
    return folder
