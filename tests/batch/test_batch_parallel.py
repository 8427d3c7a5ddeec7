"""Local worker processes and a Dask cluster give exactly what a serial run gives."""

from __future__ import annotations

import os
from pathlib import Path

import pytest

from batch_helpers import invoke, run_cli, summary, tables, write_log


@pytest.fixture
def mixed_inbox(tmp_path: Path) -> Path:
    """Four files: plain, gzipped, and one with unreadable lines (so rejects files too)."""
    folder = tmp_path / "inbox"
    folder.mkdir()
    write_log(folder / "tank-2026-11-03.csv", 20_000, day=3)
    write_log(folder / "tank-2026-11-04.csv.gz", 20_000, day=4, gz=True)
    write_log(folder / "tank-2026-11-05.tsv", 20_000, day=5).write_text(
        (folder / "tank-2026-11-05.tsv").read_text().replace(",", "\t")
    )
    write_log(folder / "tank-2026-11-06.csv", 20_000, day=6, garbage_every=1000)
    return folder


def assert_same_outputs(a: Path, b: Path) -> None:
    """Same files, same bytes; and the Parquet tables equal with their metadata."""
    names_a = sorted(p.name for p in a.iterdir() if p.suffix in (".parquet", ".csv"))
    names_b = sorted(p.name for p in b.iterdir() if p.suffix in (".parquet", ".csv"))
    assert names_a == names_b
    assert "tank-2026-11-06.parquet.rejects.csv" in names_a
    ta, tb = tables(a), tables(b)
    for name in ta:
        assert ta[name].equals(tb[name], check_metadata=True), name
        assert ta[name].schema.metadata == tb[name].schema.metadata
    for name in names_a:
        assert (a / name).read_bytes() == (b / name).read_bytes(), name


def per_file(out: Path) -> dict:
    return {c["source"]: (c["output"], c["rows"], c["rejects"], c["quality"], c["source_sha256"]) for c in summary(out)["converted"]}


def test_workers_2_equals_a_serial_run(tmp_path, mixed_inbox, tiny_map):
    serial, parallel = tmp_path / "serial", tmp_path / "parallel"
    assert invoke("batch", str(mixed_inbox), "--map", str(tiny_map), "--out", str(serial), "--settle", "0").returncode == 3
    r = run_cli("batch", str(mixed_inbox), "--map", str(tiny_map), "--out", str(parallel), "--settle", "0", "--workers", "2")
    assert r.returncode == 3, r.stderr
    assert_same_outputs(serial, parallel)
    assert per_file(serial) == per_file(parallel)
    s = summary(parallel)
    assert s["workers"] == 2
    assert all(int(c["worker"].rsplit(":", 1)[1]) != s["pid"] for c in s["converted"])  # converted in workers
    # and the manifest works the same: nothing to do on a rerun
    again = invoke("batch", str(mixed_inbox), "--map", str(tiny_map), "--out", str(parallel), "--settle", "0", "--workers", "2")
    assert again.returncode == 0 and summary(parallel)["counts"]["skipped"] == 4


@pytest.mark.cluster
def test_a_dask_local_cluster_equals_a_local_run(tmp_path, mixed_inbox, tiny_map):
    distributed = pytest.importorskip("distributed", reason="dask distributed (the countmill[cluster] extra) is not installed")
    local, remote = tmp_path / "local", tmp_path / "cluster"
    assert invoke("batch", str(mixed_inbox), "--map", str(tiny_map), "--out", str(local), "--settle", "0").returncode == 3
    with distributed.LocalCluster(
        n_workers=2, threads_per_worker=1, processes=True, host="127.0.0.1", dashboard_address=":0"
    ) as cluster:
        r = run_cli(
            "batch", str(mixed_inbox), "--map", str(tiny_map), "--out", str(remote), "--settle", "0",
            "--cluster", cluster.scheduler_address, timeout=120,
        )
        with distributed.Client(cluster) as client:
            worker_pids = set(client.run(os.getpid).values())
    assert r.returncode == 3, r.stderr
    assert_same_outputs(local, remote)
    assert per_file(local) == per_file(remote)
    s = summary(remote)
    assert s["cluster"].startswith("tcp://127.0.0.1:")
    pids = {int(c["worker"].rsplit(":", 1)[1]) for c in s["converted"]}
    assert pids <= worker_pids  # converted on the cluster's workers


def test_an_unreachable_cluster_fails_the_run_and_converts_nothing(tmp_path, inbox, tiny_map, monkeypatch):
    pytest.importorskip("distributed", reason="dask distributed (the countmill[cluster] extra) is not installed")
    import countmill.batch.work

    monkeypatch.setattr(countmill.batch.work, "CLUSTER_CONNECT_TIMEOUT", 1)
    out = tmp_path / "out"
    r = invoke("batch", str(inbox), "--map", str(tiny_map), "--out", str(out), "--settle", "0", "--cluster", "tcp://127.0.0.1:9")
    assert r.returncode == 1
    s = summary(out)
    assert "cannot reach the Dask scheduler at tcp://127.0.0.1:9" in s["error"]
    assert s["counts"]["converted"] == 0 and s["counts"]["left"] == 3
    assert list(out.glob("*.parquet")) == []
