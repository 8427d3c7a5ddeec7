"""``countmill batch`` end to end: what a nightly cron run sees, file by file and exit code by exit code."""

from __future__ import annotations

import gzip
import json
import sqlite3
import time
from pathlib import Path

import pyarrow.compute as pc
import pyarrow.parquet as pq

from batch_helpers import age, invoke, partials, run_cli, summary, tables, write_log, write_map


def batch(inbox: Path, out: Path, *extra: str, map_path: Path | None = None):
    """``countmill batch`` in this process (the tests of real processes are in test_batch_faults.py)."""
    args = ["batch", str(inbox), "--out", str(out), "--settle", "0", *extra]
    if map_path is not None:
        args += ["--map", str(map_path)]
    return invoke(*args)


def test_first_run_converts_all_and_rerun_converts_nothing(tmp_path, inbox, tiny_map):
    out = tmp_path / "out"
    first = run_cli("batch", str(inbox), "--map", str(tiny_map), "--out", str(out), "--settle", "0")  # the real command
    assert first.returncode == 0, first.stderr
    assert sorted(p.name for p in out.glob("*.parquet")) == ["tank-2026-11-03.parquet", "tank-2026-11-04.parquet", "tank-2026-11-05.parquet"]
    s = summary(out)
    assert s["counts"] == {"converted": 3, "skipped": 0, "left": 0, "failed": 0, "ignored": 0}
    assert s["rows"] == 3 * 600 and s["rejects"] == 0 and s["exit_code"] == 0
    # per-channel quality, by hand: tank_level codes 1000..1899 at gain 1 are 1.000..1.899 V -> m,
    # inside range [0, 3]: good. line_pressure codes 200..349 at gain 10 are 0.020..0.0349 V,
    # * 2.5 = 0.050..0.087 bar: inside range [0, 10] but below expect 0.1: suspect.
    assert s["quality"]["tank_level"] == {"good": 900, "not_evaluated": 0, "suspect": 0, "bad": 0, "missing": 0}
    assert s["quality"]["line_pressure"] == {"good": 0, "not_evaluated": 0, "suspect": 900, "bad": 0, "missing": 0}
    assert {c["why"] for c in s["converted"]} == {"new"}
    # one log line per file on stderr, then the closing line
    lines = first.stderr.strip().splitlines()
    assert sum(line.startswith("batch: converted ") for line in lines) == 3
    assert lines[-1].startswith("batch: done: 3 converted, 0 skipped, 0 left, 0 failed; 1800 rows")
    # the output is the converter's: provenance names the source and its hash
    meta = json.loads(pq.read_schema(out / "tank-2026-11-05.parquet").metadata[b"countmill"])
    assert meta["source"]["name"] == "tank-2026-11-05.csv.gz"
    before = {p.name: p.stat().st_mtime_ns for p in out.glob("*.parquet")}

    second = batch(inbox, out, map_path=tiny_map)
    assert second.returncode == 0, second.stderr
    s2 = summary(out)
    assert s2["counts"]["converted"] == 0 and s2["counts"]["skipped"] == 3
    assert all(item["reason"].startswith("already converted") for item in s2["skipped"])
    assert {p.name: p.stat().st_mtime_ns for p in out.glob("*.parquet")} == before  # not rewritten
    # the latest summary and a timestamped copy of each run
    assert len(list((out / "summaries").glob("batch-*.json"))) == 2
    assert json.loads((out / s2["summary_copy"]).read_text())["run_id"] == s2["run_id"]


def test_changed_content_and_changed_map_convert_again(tmp_path, inbox, tiny_map):
    out = tmp_path / "out"
    assert batch(inbox, out, map_path=tiny_map).returncode == 0
    old = pq.read_table(out / "tank-2026-11-03.parquet")
    old_inode = (out / "tank-2026-11-03.parquet").stat().st_ino

    # a new map (tank_level slope 2 instead of 1): every file it covers is converted again
    write_map(tiny_map, slope=2.0)
    r = batch(inbox, out, map_path=tiny_map)
    assert r.returncode == 0, r.stderr
    s = summary(out)
    assert s["counts"]["converted"] == 3 and {c["why"] for c in s["converted"]} == {"map changed"}
    new = pq.read_table(out / "tank-2026-11-03.parquet")
    def level(t):
        return t.filter(pc.equal(t["channel"], "tank_level"))["value"].to_pylist()

    assert level(new) == [2 * v for v in level(old)]
    # replaced by rename (a new file), never rewritten in place
    assert (out / "tank-2026-11-03.parquet").stat().st_ino != old_inode
    provenance = json.loads(new.schema.metadata[b"countmill"])
    assert provenance["map"]["sha256"] == s["maps"][0]["sha256"]

    # one file's content changes: only that one is converted again
    write_log(inbox / "tank-2026-11-04.csv", 310, day=4)
    r = batch(inbox, out, map_path=tiny_map)
    s = summary(out)
    assert [(c["source"], c["why"], c["rows"]) for c in s["converted"]] == [("tank-2026-11-04.csv", "content changed", 620)]
    assert s["counts"]["skipped"] == 2

    # an output deleted by hand is made again
    (out / "tank-2026-11-03.parquet").unlink()
    batch(inbox, out, map_path=tiny_map)
    assert [(c["source"], c["why"]) for c in summary(out)["converted"]] == [("tank-2026-11-03.csv", "output missing")]

    # the manifest keeps the history: 3 + 3 + 1 + 1 conversions
    with sqlite3.connect(out / "batch-manifest.sqlite") as db:
        assert db.execute("SELECT count(*) FROM conversions").fetchone()[0] == 8


def test_a_file_still_changing_is_left_for_the_next_run(tmp_path, tiny_map):
    inbox = tmp_path / "inbox"
    inbox.mkdir()
    write_log(inbox / "tank-2026-11-03.csv", 100, day=3)
    time.sleep(1.3)
    write_log(inbox / "tank-2026-11-04.csv", 100, day=4)  # still being written, as far as we know
    out = tmp_path / "out"
    r = invoke("batch", str(inbox), "--map", str(tiny_map), "--out", str(out), "--settle", "1")
    assert r.returncode == 0, r.stderr  # left files are not a failure
    s = summary(out)
    assert [c["source"] for c in s["converted"]] == ["tank-2026-11-03.csv"]
    assert [item["source"] for item in s["left"]] == ["tank-2026-11-04.csv"]
    assert "settle 1 s" in s["left"][0]["reason"]
    assert "batch: left tank-2026-11-04.csv for the next run" in r.stderr
    assert not (out / "tank-2026-11-04.parquet").exists()

    time.sleep(1.1)
    r = invoke("batch", str(inbox), "--map", str(tiny_map), "--out", str(out), "--settle", "1")
    s = summary(out)
    assert [c["source"] for c in s["converted"]] == ["tank-2026-11-04.csv"]
    assert s["counts"]["left"] == 0 and s["counts"]["skipped"] == 1


def test_settle_follows_the_modification_time(tmp_path, tiny_map):
    # issue 6: a file whose mtime changed in the last --settle seconds waits; an older one,
    # even if it just arrived, does not (default settle 120 s)
    inbox = tmp_path / "inbox"
    inbox.mkdir()
    write_log(inbox / "tank-2026-11-03.csv", 100, day=3)
    write_log(inbox / "tank-2026-11-04.csv", 100, day=4)
    age(inbox / "tank-2026-11-03.csv", 3600)
    out = tmp_path / "out"
    r = invoke("batch", str(inbox), "--map", str(tiny_map), "--out", str(out))
    assert r.returncode == 0, r.stderr
    s = summary(out)
    assert [c["source"] for c in s["converted"]] == ["tank-2026-11-03.csv"]
    assert [item["source"] for item in s["left"]] == ["tank-2026-11-04.csv"]


def test_exit_3_when_lines_are_rejected_and_the_rejects_file_sits_next_to_the_output(tmp_path, tiny_map):
    inbox = tmp_path / "inbox"
    inbox.mkdir()
    write_log(inbox / "tank-2026-11-03.csv", 100, day=3)
    write_log(inbox / "tank-2026-11-04.txt", 100, day=4, garbage_every=25)  # 4 unreadable lines
    out = tmp_path / "out"
    r = batch(inbox, out, map_path=tiny_map)
    assert r.returncode == 3, r.stderr
    rejects = (out / "tank-2026-11-04.parquet.rejects.csv").read_text().splitlines()
    assert rejects[0] == "line,reason,text" and len(rejects) == 1 + 4
    assert not (out / "tank-2026-11-03.parquet.rejects.csv").exists()
    s = summary(out)
    assert s["exit_code"] == 3 and s["rejects"] == 4
    by_source = {c["source"]: c for c in s["converted"]}
    assert by_source["tank-2026-11-04.txt"]["rejects_file"] == "tank-2026-11-04.parquet.rejects.csv"
    # nothing new on the next run: exit 0 (the rejects were reported when it was converted)
    assert batch(inbox, out, map_path=tiny_map).returncode == 0


def test_a_corrupt_gz_fails_alone_with_exit_1_and_leaves_no_output(tmp_path, inbox, tiny_map):
    good = gzip.compress(b"".join(inbox.joinpath("tank-2026-11-03.csv").read_bytes() for _ in range(40)), mtime=0)
    (inbox / "tank-2026-11-06.csv.gz").write_bytes(good[: len(good) // 2])  # truncated, as by a full disk
    out = tmp_path / "out"
    r = batch(inbox, out, map_path=tiny_map)
    assert r.returncode == 1, r.stderr
    assert not (out / "tank-2026-11-06.parquet").exists()
    assert not (out / "tank-2026-11-06.parquet.rejects.csv").exists()
    assert partials(out) == []
    assert len(list(out.glob("*.parquet"))) == 3  # the good files were converted
    s = summary(out)
    assert s["counts"]["converted"] == 3 and s["counts"]["failed"] == 1
    (failed,) = s["failed"]
    assert failed["source"] == "tank-2026-11-06.csv.gz" and failed["kind"] == "input"
    assert "corrupt or truncated" in failed["reason"]
    assert "batch: FAILED tank-2026-11-06.csv.gz: " in r.stderr
    # the next night it is tried again (and fails again); the good files are not redone
    r = batch(inbox, out, map_path=tiny_map)
    assert r.returncode == 1 and summary(out)["counts"] == {"converted": 0, "skipped": 3, "left": 0, "failed": 1, "ignored": 0}


def test_exit_2_for_usage_and_map_errors_converts_nothing(tmp_path, inbox, tiny_map):
    out = tmp_path / "out"
    bad = tmp_path / "bad.toml"
    bad.write_text('[map]\nname = "x"\n[[channel]]\nid = 1\nname = "a"\nunit = "m"\nchain = [ { stage = "nope" } ]\n')
    r = batch(inbox, out, map_path=bad)
    assert r.returncode == 2
    assert "bad.toml" in r.stderr
    assert list(out.glob("*.parquet")) == []
    assert summary(out)["exit_code"] == 2 and "bad.toml" in summary(out)["error"]

    assert batch(tmp_path / "no-such-inbox", out, map_path=tiny_map).returncode == 2
    r = batch(inbox, out)  # neither --map nor --maps
    assert r.returncode == 2 and "--map" in r.stderr
    r = invoke("batch", str(inbox), "--out", str(out), "--map", str(tiny_map), "--workers", "2", "--cluster", "tcp://127.0.0.1:1")
    assert r.returncode == 2 and "not both" in r.stderr

    # --maps: every map must say which files are its own
    maps = tmp_path / "maps"
    maps.mkdir()
    write_map(maps / "tank.toml", files="tank-*")
    write_map(maps / "other.toml")
    r = invoke("batch", str(inbox), "--maps", str(maps), "--out", str(out), "--settle", "0")
    assert r.returncode == 2 and "other.toml" in r.stderr and "map.files" in r.stderr
    assert list(out.glob("*.parquet")) == []


def test_maps_folder_routes_files_by_glob_and_refuses_ambiguity(tmp_path, tiny_map):
    inbox = tmp_path / "inbox"
    inbox.mkdir()
    write_log(inbox / "tank-2026-11-03.csv", 50, day=3)
    write_log(inbox / "pump-2026-11-03.csv", 50, day=3)
    write_log(inbox / "pump-2026-11-04.csv", 50, day=4)
    write_log(inbox / "pump-2026-11-04.csv.gz", 50, day=4, gz=True)  # same output name as the .csv
    write_log(inbox / "tank-pump.csv", 50, day=5)  # both globs claim it
    (inbox / "README.md").write_text("not a log")
    maps = tmp_path / "maps"
    maps.mkdir()
    write_map(maps / "tank.toml", files="tank-*.csv")
    write_map(maps / "pump.toml", files="*pump*", slope=3.0)
    out = tmp_path / "out"
    r = invoke("batch", str(inbox), "--maps", str(maps), "--out", str(out), "--settle", "0")
    assert r.returncode == 1, r.stderr
    s = summary(out)
    assert {c["source"]: c["map"] for c in s["converted"]} == {"tank-2026-11-03.csv": "tank.toml", "pump-2026-11-03.csv": "pump.toml"}
    failed = {f["source"]: f["reason"] for f in s["failed"]}
    assert "claimed by several maps (pump.toml, tank.toml)" in failed["tank-pump.csv"]
    assert "pump-2026-11-04.parquet is claimed by several raw files" in failed["pump-2026-11-04.csv"]
    assert "pump-2026-11-04.parquet is claimed by several raw files" in failed["pump-2026-11-04.csv.gz"]
    assert s["ignored"] == ["README.md"]
    assert sorted(tables(out)) == ["pump-2026-11-03.parquet", "tank-2026-11-03.parquet"]


def test_same_content_under_a_second_name_is_not_converted_twice(tmp_path, inbox, tiny_map):
    out = tmp_path / "out"
    batch(inbox, out, map_path=tiny_map)
    (inbox / "tank-2026-11-03 (copy).csv").write_bytes((inbox / "tank-2026-11-03.csv").read_bytes())
    r = batch(inbox, out, map_path=tiny_map)
    assert r.returncode == 0
    (dup,) = [s for s in summary(out)["skipped"] if "duplicate_of" in s]
    assert dup["source"] == "tank-2026-11-03 (copy).csv" and dup["duplicate_of"] == "tank-2026-11-03.parquet"
    assert not (out / "tank-2026-11-03 (copy).parquet").exists()
