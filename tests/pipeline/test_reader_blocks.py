"""The text reader gives the same records and rejects however its reads cut the file.

A block of the file ends at the last line ending of a read; the rest of the read waits for
the next one. These tests read one real file with read sizes from a few bytes (most reads
hold no whole line) to the whole file at once, and compare everything the reader returns.
"""

from __future__ import annotations

import numpy as np
import pytest

from countmill.chanmap.models import InputSpec
from countmill.pipeline.reader import LogReader

LOG = (
    "# logger: bench-rig (invented test data)\r\n"
    "# scan: 1 s\n"
    "time,channel,code,gain\n"
    "2026-03-29T00:59:59.000,0,100,0\n"
    "2026-03-29T01:00:00.500,1,-5,1\r\n"
    "\n"
    "2026-03-29T01:00:01.000,0,101,0\n"
    "2026-03-29T01:00:01.000,1,not-a-code,1\n"
    "# a comment between records\n"
    "2026-03-29T02:30:00.000,0,102,0\n"  # in Berlin's spring-forward gap: flagged by the clock
    + "".join(f"2026-03-29T03:{m:02d}:00.000,{m % 3},{1000 + m},0\n" for m in range(60))
    + "2026-03-29T04:00:00.000,2,7,0"  # the last line has no line ending
)


def read_all(path, block_bytes: int):
    records, rejects = [], []
    reader = LogReader(path, InputSpec(), "Europe/Berlin", block_bytes=block_bytes)
    with reader:
        for block in reader.blocks():
            records.append(block)
            rejects.extend((r.line, r.reason, r.text) for r in block.rejects)
    columns = {
        name: np.concatenate([getattr(b, name) for b in records])
        for name in ("line", "time_us", "time_flags", "channel", "code", "gain")
    }
    return columns, rejects, reader.data_lines


@pytest.fixture
def log_file(tmp_path):
    path = tmp_path / "rig.csv"
    path.write_bytes(LOG.encode())
    return path


def test_whole_file_in_one_read(log_file):
    columns, rejects, data_lines = read_all(log_file, 1 << 20)
    assert data_lines == len(columns["line"]) + len(rejects) == 66
    assert [line for line, _, _ in rejects] == [8]
    assert columns["line"][-1] == LOG.count("\n") + 1  # the unterminated last line is a record


@pytest.mark.parametrize("block_bytes", [1, 3, 7, 31, 64, 100, 257, 1000])
def test_any_read_size_gives_the_same_records(log_file, block_bytes):
    expected, expected_rejects, expected_lines = read_all(log_file, 1 << 20)
    columns, rejects, data_lines = read_all(log_file, block_bytes)
    assert data_lines == expected_lines
    assert rejects == expected_rejects
    for name, values in expected.items():
        np.testing.assert_array_equal(columns[name], values, err_msg=name)
