"""Convert one file per task, here, in local worker processes, or on a Dask cluster.

A task is a plain dict in and a plain dict out (no exception crosses a process boundary),
so the three ways of running give the same outputs and the same reports:

- serial (``--workers 1``, the default): in the coordinating process;
- ``--workers N``: a :class:`concurrent.futures.ProcessPoolExecutor` of ``spawn``-started
  processes (they inherit neither the folder lock nor threads), each asked to die with the
  coordinator on Linux so that a killed run leaves no converter behind;
- ``--cluster ADDRESS``: one task per file submitted to a Dask ``distributed`` scheduler.
  INBOX and DIR must be at the same absolute paths on every worker (shared storage), and
  each worker needs countmill installed. The manifest and the lock stay with the
  coordinator.

Each task gets the map's bytes, not its path, so every worker converts with exactly the map
the coordinator hashed, even if the file on disk is edited during the run.
"""

from __future__ import annotations

import os
import signal
import socket
import sys
import time
from concurrent.futures import ProcessPoolExecutor, as_completed
from concurrent.futures.process import BrokenProcessPool
from typing import Iterable, Iterator

from countmill.errors import CountmillError

#: seconds to wait for a Dask scheduler to answer
CLUSTER_CONNECT_TIMEOUT = 30

_maps: dict[tuple[str, bytes], object] = {}


def convert_task(job: dict) -> dict:
    """Convert ``job["source"]`` into ``job["output"]``; never raises.

    ``job``: ``source``, ``output`` (absolute paths), ``map_path``, ``map_bytes``,
    ``chunk_rows``. Returns ``ok`` and the conversion's counts, or ``ok = False`` with
    ``kind`` (``input``, ``map``, ``disk_full``, ``permission``, ``io``, ``internal``) and
    ``reason``.
    """
    from countmill.batch.inbox import error_kind  # noqa: PLC0415
    from countmill.batch.summary import named_quality  # noqa: PLC0415
    from countmill.chanmap import parse_map  # noqa: PLC0415
    from countmill.convert import convert_file  # noqa: PLC0415
    from countmill.errors import InputError, MapError  # noqa: PLC0415

    start = time.monotonic()
    where = {"host": socket.gethostname(), "pid": os.getpid()}
    try:
        key = (job["map_path"], job["map_bytes"])
        cmap = _maps.get(key)
        if cmap is None:
            cmap = _maps[key] = parse_map(job["map_bytes"], job["map_path"])
        result = convert_file(job["source"], cmap, job["output"], chunk_rows=job["chunk_rows"])
    except MapError as exc:
        return failure("map", str(exc), **where)
    except InputError as exc:
        return failure("input", str(exc), **where)
    except CountmillError as exc:
        return failure("usage" if exc.exit_code == 2 else "input", str(exc), **where)
    except OSError as exc:
        return failure(error_kind(exc), describe_os_error(exc, job["output"]), **where)
    except MemoryError:
        return failure("internal", "out of memory", **where)
    except Exception as exc:  # a bug: report it for this file, go on with the others
        return failure("internal", f"{type(exc).__name__}: {exc}", **where)
    return {
        "ok": True,
        "data_lines": result.data_lines,
        "records": result.records,
        "rows": result.rows,
        "rejects": result.rejects,
        "rejects_file": os.path.basename(result.rejects_path) if result.rejects_path else None,
        "source_sha256": result.source_sha256,
        "map_sha256": cmap.sha256,
        "quality": {("(unmapped)" if k is None else k): named_quality(v) for k, v in result.quality_counts.items()},
        "seconds": round(time.monotonic() - start, 3),
        **where,
    }


def failure(kind: str, reason: str, **extra) -> dict:
    return {"ok": False, "kind": kind, "reason": reason, **extra}


def describe_os_error(exc: OSError, output: str) -> str:
    from countmill.batch.inbox import error_kind  # noqa: PLC0415

    kind = error_kind(exc)
    target = exc.filename or output
    text = exc.strerror or str(exc)
    if kind == "disk_full":
        return f"no room to write {target}: {text}"
    if kind == "permission":
        return f"not allowed: {target}: {text}"
    return f"I/O error on {target}: {text}"


# --- ways of running ----------------------------------------------------------------------
def run_serial(jobs: Iterable[dict]) -> Iterator[tuple[dict, dict]]:
    for job in jobs:
        yield job, convert_task(job)


def run_processes(jobs: list[dict], workers: int) -> Iterator[tuple[dict, dict]]:
    import multiprocessing  # noqa: PLC0415

    context = multiprocessing.get_context("spawn")
    pool = ProcessPoolExecutor(max_workers=workers, mp_context=context, initializer=_die_with_parent, initargs=(os.getpid(),))
    finished = False
    try:
        futures = {pool.submit(convert_task, job): job for job in jobs}
        for future in as_completed(futures):
            job = futures[future]
            try:
                outcome = future.result()
            except BrokenProcessPool:
                outcome = failure("internal", "a worker process died (killed, or out of memory) during this file or another one")
            except Exception as exc:
                outcome = failure("internal", f"{type(exc).__name__}: {exc}")
            yield job, outcome
        finished = True
    finally:
        # interrupted: drop queued files at once; running ones end with the coordinator
        pool.shutdown(wait=finished, cancel_futures=not finished)


def run_cluster(jobs: list[dict], address: str) -> Iterator[tuple[dict, dict]]:
    try:
        from distributed import Client  # noqa: PLC0415
        from distributed import as_completed as dask_completed  # noqa: PLC0415
    except ImportError:
        raise CountmillError("--cluster needs Dask distributed: pip install 'countmill[cluster]'") from None
    try:
        client = Client(address, timeout=CLUSTER_CONNECT_TIMEOUT, set_as_default=False)
    except Exception as exc:  # OSError, TimeoutError, ValueError for a bad address
        raise CountmillError(f"cannot reach the Dask scheduler at {address}: {exc}") from None
    try:
        futures = {}
        for job in jobs:
            key = f"countmill-batch-{os.path.basename(job['output'])}-{os.urandom(4).hex()}"
            futures[client.submit(convert_task, job, key=key, pure=False, retries=0)] = job
        with client.as_current():
            for future in dask_completed(list(futures)):
                job = futures[future]
                try:
                    outcome = future.result()
                except Exception as exc:  # KilledWorker, CancelledError, a worker without countmill ...
                    outcome = failure("internal", f"on the cluster: {type(exc).__name__}: {exc}")
                yield job, outcome
    finally:
        client.close()


def _die_with_parent(parent_pid: int) -> None:
    """Worker initializer: ask Linux to SIGKILL this worker when the coordinator dies."""
    if sys.platform.startswith("linux"):
        try:
            import ctypes  # noqa: PLC0415

            libc = ctypes.CDLL(None, use_errno=True)
            libc.prctl(1, int(signal.SIGKILL))  # PR_SET_PDEATHSIG
        except Exception:
            pass
    if os.getppid() != parent_pid:  # the coordinator died before prctl took effect
        os._exit(1)
