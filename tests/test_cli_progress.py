"""``countmill convert`` on a terminal: a progress bar, and ``--quiet`` silences everything.

The command runs as its own process with its output on a pseudo-terminal (``pty``), as a
user at a terminal sees it; nothing is mocked. Off a terminal (CliRunner, cron, pipes) no
bar is drawn.
"""

from __future__ import annotations

import os
import subprocess
import sys

import pytest

pty = pytest.importorskip("pty")

CLI = "import sys; from countmill.cli import main; sys.exit(main())"


def _run_on_terminal(*args) -> tuple[int, str]:
    leader, follower = pty.openpty()
    proc = subprocess.Popen([sys.executable, "-c", CLI, *map(str, args)], stdin=subprocess.DEVNULL,
                            stdout=follower, stderr=follower)
    os.close(follower)
    output = b""
    while True:
        try:
            data = os.read(leader, 4096)
        except OSError:  # the terminal closes when the process ends (Linux: EIO)
            break
        if not data:
            break
        output += data
    code = proc.wait(timeout=120)
    os.close(leader)
    return code, output.decode("utf-8", errors="replace")


@pytest.fixture
def day(write_log, make_map):
    lines = [(f"2026-02-01T06:{m:02d}:{s:02d}", 1, 100 + s, 0) for m in range(10) for s in range(0, 60, 5)]
    raw = write_log(lines, name="bar-test.csv", header=True)
    cmap = make_map([{"id": 1, "name": "v", "unit": "V", "chain": [{"stage": "linear", "slope": 1.0}]}])
    return raw, cmap


def test_a_terminal_shows_a_progress_bar_and_a_summary_line(day, tmp_path):
    raw, cmap = day
    code, output = _run_on_terminal("convert", raw, "--map", cmap, "-o", tmp_path / "out.parquet")
    assert code == 0, output
    assert "bar-test.csv" in output and "100%" in output  # the bar, labelled with the file
    assert "120 rows ->" in output


def test_quiet_prints_nothing_on_a_terminal(day, tmp_path):
    raw, cmap = day
    code, output = _run_on_terminal("convert", raw, "--map", cmap, "-o", tmp_path / "out.parquet", "--quiet")
    assert code == 0
    assert output == ""
    assert (tmp_path / "out.parquet").exists()


def test_off_a_terminal_there_is_no_bar(day, tmp_path, run_cli):
    raw, cmap = day
    result = run_cli("convert", raw, "--map", cmap, "-o", tmp_path / "out.parquet")
    assert result.exit_code == 0
    assert "%" not in result.output
    quiet = run_cli("convert", raw, "--map", cmap, "-o", tmp_path / "out2.parquet", "-q")
    assert quiet.exit_code == 0 and quiet.output == ""
