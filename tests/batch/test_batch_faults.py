"""Faults a nightly job meets, with real processes: SIGKILL, SIGTERM, a second run, a full disk."""

from __future__ import annotations

import errno
import json
import random
import resource
import shutil
import signal
import sqlite3
import subprocess
import time
from pathlib import Path

import pyarrow.parquet as pq
import pytest

from batch_helpers import countmill_cmd, invoke, partials, run_cli, summary, tables, write_map

SEED = 20261103


def start_batch(inbox: Path, out: Path, map_path: Path, *extra: str) -> subprocess.Popen:
    cmd = countmill_cmd("batch", str(inbox), "--map", str(map_path), "--out", str(out), "--settle", "0", "-q", *extra)
    return subprocess.Popen(cmd, stdout=subprocess.DEVNULL, stderr=subprocess.PIPE, text=True)


def wait_for(predicate, timeout: float = 20.0, step: float = 0.002) -> bool:
    deadline = time.monotonic() + timeout
    while time.monotonic() < deadline:
        if predicate():
            return True
        time.sleep(step)
    return False


def lock_holder(out: Path) -> dict | None:
    try:
        return json.loads((out / ".countmill-batch.lock").read_text())
    except (OSError, ValueError):
        return None


def assert_consistent(out: Path, refs: dict[str, dict]) -> None:
    """After any kill: every final output is one complete reference conversion, and every
    manifest entry whose output is still the recorded file describes that file."""
    for path in out.glob("*.parquet"):
        table = pq.read_table(path)  # a partial file would not even read
        assert any(table.equals(ref[path.name], check_metadata=True) for ref in refs.values()), path.name
    if not (out / "batch-manifest.sqlite").exists():
        return
    with sqlite3.connect(out / "batch-manifest.sqlite") as db:
        rows = db.execute(
            """SELECT output, source_sha256, map_sha256, output_size, output_mtime_ns, output_inode FROM conversions c
               WHERE id = (SELECT max(id) FROM conversions WHERE output = c.output)"""
        ).fetchall()
    for output, source_sha, map_sha, size, mtime_ns, inode in rows:
        path = out / output
        assert path.exists(), f"manifest names {output}, which is not there"  # entries only after the output
        st = path.stat()
        if (st.st_size, st.st_mtime_ns, st.st_ino) == (size, mtime_ns, inode):
            provenance = json.loads(pq.read_schema(path).metadata[b"countmill"])
            assert (provenance["source"]["sha256"], provenance["map"]["sha256"]) == (source_sha, map_sha)


@pytest.mark.slow
def test_sigkill_at_random_moments_never_leaves_a_partial_output(tmp_path, big_inbox):
    """Five runs killed with SIGKILL (seeded): half at any moment of the run, half while an
    output is being written. Each run switches the map, so every file is being replaced; the
    run after each kill finishes with either map, sometimes going back to the earlier map,
    which must not mistake a file the killed run put in place for its own."""
    maps = {"a": write_map(tmp_path / "a.toml", slope=1.0), "b": write_map(tmp_path / "b.toml", slope=0.5)}
    refs = {}
    for key, map_path in maps.items():
        done = invoke("batch", str(big_inbox), "--map", str(map_path), "--out", str(tmp_path / f"ref-{key}"), "--settle", "0")
        assert done.returncode == 0, done.stderr
        refs[key] = tables(tmp_path / f"ref-{key}")

    rng = random.Random(SEED)
    out = tmp_path / "out"
    state = None  # the map the complete outputs in ``out`` come from
    killed_mid_write = 0
    for i in range(5):
        kill_map = "b" if state == "a" else "a"
        proc = start_batch(big_inbox, out, maps[kill_map], "--chunk-rows", "20000")
        if i % 2 == 0:  # any moment: start-up, hashing, planning, converting, committing
            time.sleep(rng.uniform(0.2, 2.0))
        else:  # while an output is being written
            wait_for(lambda p=proc: bool(partials(out)) or p.poll() is not None)
            time.sleep(rng.uniform(0.0, 0.1))
        proc.kill()
        proc.wait()
        killed_mid_write += bool(partials(out))
        assert_consistent(out, refs)

        finish_map = rng.choice([kill_map, state]) if state else kill_map
        done = invoke("batch", str(big_inbox), "--map", str(maps[finish_map]), "--out", str(out), "--settle", "0")
        assert done.returncode == 0, done.stderr  # the killed run left no lock behind
        assert partials(out) == []  # its temporaries were cleaned up
        got = tables(out)
        assert sorted(got) == sorted(refs[finish_map])
        assert all(got[name].equals(refs[finish_map][name], check_metadata=True) for name in got)
        assert summary(out)["counts"]["failed"] == 0
        state = finish_map
    assert killed_mid_write >= 1, "no kill landed while an output was being written: the test proved little"


def test_a_second_run_exits_4_while_the_first_holds_the_lock(tmp_path, big_inbox, tiny_map):
    out = tmp_path / "out"
    first = start_batch(big_inbox, out, tiny_map)
    try:
        assert wait_for(lambda: (lock_holder(out) or {}).get("pid") == first.pid)
        first.send_signal(signal.SIGSTOP)  # frozen while it holds the lock: no race with its end
        assert lock_holder(out)["pid"] == first.pid
        second = run_cli("batch", str(big_inbox), "--map", str(tiny_map), "--out", str(out), "--settle", "0")
        assert second.returncode == 4
        message = second.stderr.strip()
        assert str(out) in message and f"pid {first.pid}" in message and "holds the lock" in message
    finally:
        first.send_signal(signal.SIGCONT)
    assert first.wait(timeout=60) == 0, first.stderr.read()
    s = summary(out)  # written by the first run only
    assert s["pid"] == first.pid and s["counts"]["converted"] == 3
    # the lock is free again: a third run runs (and has nothing to do)
    third = invoke("batch", str(big_inbox), "--map", str(tiny_map), "--out", str(out), "--settle", "0")
    assert third.returncode == 0 and summary(out)["counts"]["skipped"] == 3


def test_sigterm_stops_cleanly_and_the_next_run_finishes(tmp_path, big_inbox, tiny_map):
    out = tmp_path / "out"
    proc = start_batch(big_inbox, out, tiny_map, "--chunk-rows", "20000")
    assert wait_for(lambda: bool(partials(out)) or proc.poll() is not None)
    proc.send_signal(signal.SIGTERM)
    code = proc.wait(timeout=30)
    if code == 0:
        pytest.skip("the run ended before SIGTERM arrived")  # not seen on a 2-core machine
    assert code == 1
    assert "interrupted" in proc.stderr.read()
    assert partials(out) == []  # the run removed its temporaries before it exited
    s = summary(out)
    assert s["interrupted"] is True and s["exit_code"] == 1
    assert s["counts"]["converted"] + s["counts"]["left"] == 3
    done = invoke("batch", str(big_inbox), "--map", str(tiny_map), "--out", str(out), "--settle", "0")
    assert done.returncode == 0
    assert summary(out)["counts"]["converted"] + s["counts"]["converted"] == 3


def test_a_full_disk_fails_that_file_alone(tmp_path, inbox, tiny_map, big_logs):
    """RLIMIT_FSIZE stands in for a full disk: writes past 64 KiB fail with EFBIG, as a
    full disk fails with ENOSPC; the small outputs fit (about 13 KB), the big one does not
    (about 220 KB)."""
    shutil.copyfile(big_logs[0], inbox / big_logs[0].name)
    out = tmp_path / "out"

    def small_disk():
        resource.setrlimit(resource.RLIMIT_FSIZE, (64 * 1024, 64 * 1024))

    cmd = countmill_cmd("batch", str(inbox), "--map", str(tiny_map), "--out", str(out), "--settle", "0")
    r = subprocess.run(cmd, capture_output=True, text=True, preexec_fn=small_disk, timeout=60)
    assert r.returncode == 1, r.stderr
    s = summary(out)
    (failed,) = s["failed"]
    assert failed["source"] == big_logs[0].name and failed["kind"] == "disk_full"
    assert "File too large" in failed["reason"] and "big-2026-11-03.parquet" in failed["reason"]
    assert s["counts"]["converted"] == 3
    assert not (out / "big-2026-11-03.parquet").exists() and partials(out) == []
    # room again: the next run converts it, and only it
    done = invoke("batch", str(inbox), "--map", str(tiny_map), "--out", str(out), "--settle", "0")
    assert done.returncode == 0
    assert [c["source"] for c in summary(out)["converted"]] == [big_logs[0].name]


@pytest.mark.parametrize(
    ("error", "kind", "words"),
    [
        (OSError(errno.ENOSPC, "No space left on device"), "disk_full", "no room to write"),
        (PermissionError(errno.EACCES, "Permission denied"), "permission", "not allowed"),
    ],
)
def test_os_errors_are_reported_per_file(tmp_path, inbox, tiny_map, monkeypatch, error, kind, words):
    """Root ignores permission bits, so the converter is made to raise here instead."""
    import countmill.convert

    real = countmill.convert.convert_file

    def flaky(raw, *args, **kw):
        if Path(raw).name == "tank-2026-11-04.csv":
            Path(args[1]).with_name(".tank-2026-11-04.parquet.partial-1").write_bytes(b"PAR1")  # what a dead writer leaves
            raise error
        return real(raw, *args, **kw)

    monkeypatch.setattr(countmill.convert, "convert_file", flaky)
    out = tmp_path / "out"
    r = invoke("batch", str(inbox), "--map", str(tiny_map), "--out", str(out), "--settle", "0")
    assert r.returncode == 1
    s = summary(out)
    (failed,) = s["failed"]
    assert failed["source"] == "tank-2026-11-04.csv" and failed["kind"] == kind and words in failed["reason"]
    assert s["counts"]["converted"] == 2
    assert "batch: FAILED tank-2026-11-04.csv" in r.stderr
    monkeypatch.setattr(countmill.convert, "convert_file", real)
    invoke("batch", str(inbox), "--map", str(tiny_map), "--out", str(out), "--settle", "0")
    s = summary(out)
    assert s["cleaned_temporaries"] == [".tank-2026-11-04.parquet.partial-1"]
    assert [c["source"] for c in s["converted"]] == ["tank-2026-11-04.csv"]



def test_an_output_put_in_place_but_not_recorded_is_converted_again(tmp_path, inbox):
    """The one state a kill between the rename and the manifest commit leaves: the new output
    is in place, the manifest still describes the old one. A later run with the old map must
    not take the file for its own (the manifest keeps each output's size, mtime and inode)."""
    from countmill.convert import convert_file

    map_a, map_b = write_map(tmp_path / "a.toml"), write_map(tmp_path / "b.toml", slope=0.5)
    out = tmp_path / "out"
    assert invoke("batch", str(inbox), "--map", str(map_a), "--out", str(out), "--settle", "0").returncode == 0
    reference = tables(out)
    convert_file(inbox / "tank-2026-11-03.csv", map_b, out / "tank-2026-11-03.parquet")  # in place, never recorded
    assert not tables(out)["tank-2026-11-03.parquet"].equals(reference["tank-2026-11-03.parquet"])

    assert invoke("batch", str(inbox), "--map", str(map_a), "--out", str(out), "--settle", "0").returncode == 0
    assert [(c["source"], c["why"]) for c in summary(out)["converted"]] == [("tank-2026-11-03.csv", "output not the one recorded")]
    got = tables(out)
    assert all(got[name].equals(reference[name], check_metadata=True) for name in reference)
