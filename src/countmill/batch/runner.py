"""One nightly batch run: lock, clean up, plan, convert, record, report.

>>> from countmill.batch import BatchOptions, run_batch
>>> report = run_batch(BatchOptions(inbox=Path("inbox"), out_dir=Path("out"), map_path=Path("m.toml")))  # doctest: +SKIP
>>> report.exit_code  # doctest: +SKIP
0

Order of events, chosen so that a run killed at any moment leaves a folder the next run
finishes without help:

1. take the folder lock (:mod:`countmill.batch.lock`), else exit 4;
2. delete temporaries (``.NAME.partial-PID``) left in DIR by killed runs: under the lock no
   other batch run can be writing them;
3. load every map (a map error: exit 2, nothing converted);
4. plan (:mod:`countmill.batch.inbox`): hash, compare with the manifest, leave settling files;
5. convert; each output appears at its final path complete (temporary name, ``fsync``,
   rename, inside :func:`countmill.convert.convert_file`), and only then is its manifest entry
   committed (:mod:`countmill.batch.manifest`). A killed run has therefore at most converted
   a file without recording it, and the next run converts that file again;
6. write the summary (:mod:`countmill.batch.summary`), release the lock.
"""

from __future__ import annotations

import datetime as dt
import os
import socket
import sys
import time
import tomllib
import uuid
from dataclasses import dataclass
from pathlib import Path
from typing import Callable

from countmill import __version__
from countmill.batch import work
from countmill.batch.inbox import MapChoice, Plan, classify, discover
from countmill.batch.lock import OutputLock
from countmill.batch.manifest import MANIFEST_NAME, Conversion, Manifest
from countmill.batch.summary import HISTORY_FOLDER, add_quality, utc_text, write_summary
from countmill.convert import DEFAULT_CHUNK_ROWS
from countmill.errors import CountmillError, MapError, UsageError

DEFAULT_SETTLE = 120.0


@dataclass
class BatchOptions:
    inbox: Path
    out_dir: Path
    map_path: Path | None = None  # one map for the inbox ...
    maps_dir: Path | None = None  # ... or every *.toml here, each with [map] files
    settle: float = DEFAULT_SETTLE  # [s]
    workers: int = 1
    cluster: str | None = None  # Dask scheduler address
    chunk_rows: int = DEFAULT_CHUNK_ROWS
    patterns: tuple[str, ...] = ()  # file-name globs overriding the map's [map] files
    rehash: bool = False  # ignore the manifest's hash cache


@dataclass
class BatchReport:
    exit_code: int
    summary: dict
    summary_path: Path | None


def stderr_log(line: str) -> None:
    print(line, file=sys.stderr, flush=True)


def run_batch(options: BatchOptions, log: Callable[[str], None] = stderr_log) -> BatchReport:
    """Convert what is new in ``options.inbox`` into ``options.out_dir``; see the module doc."""
    check_options(options)
    out_dir = options.out_dir.absolute()
    try:
        out_dir.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise CountmillError(f"{out_dir}: cannot create the output folder: {exc.strerror}") from None
    with OutputLock(out_dir):
        return _Run(options, options.inbox.absolute(), out_dir, log).execute()


def check_options(options: BatchOptions) -> None:
    if (options.map_path is None) == (options.maps_dir is None):
        raise UsageError("give either --map MAP or --maps FOLDER")
    if not options.inbox.is_dir():
        raise UsageError(f"{options.inbox}: the inbox is not a folder")
    if options.maps_dir is not None and not options.maps_dir.is_dir():
        raise UsageError(f"{options.maps_dir}: --maps must be a folder of *.toml maps")
    if options.maps_dir is not None and options.patterns:
        raise UsageError("--pattern goes with --map; with --maps each map's [map] files chooses its files")
    if options.workers < 1:
        raise UsageError(f"--workers must be at least 1; got {options.workers}")
    if options.cluster and options.workers != 1:
        raise UsageError("give --workers or --cluster, not both")
    if options.settle < 0:
        raise UsageError(f"--settle must be 0 or more seconds; got {options.settle:g}")
    if options.chunk_rows < 1:
        raise UsageError(f"--chunk-rows must be at least 1; got {options.chunk_rows}")


def load_maps(options: BatchOptions) -> list[MapChoice]:
    from countmill.chanmap import parse_map  # noqa: PLC0415
    from countmill.chanmap.models import MapFile  # noqa: PLC0415

    if options.map_path is not None:
        paths = [options.map_path]
    else:
        paths = sorted(p for p in options.maps_dir.glob("*.toml") if p.is_file())
        if not paths:
            raise UsageError(f"{options.maps_dir}: no *.toml map in this folder")
    maps = []
    for path in paths:
        try:
            raw = path.read_bytes()
        except OSError as exc:
            raise MapError(f"cannot read the map: {exc.strerror}", path=str(path)) from None
        cmap = parse_map(raw, str(path))
        files = MapFile.model_validate(tomllib.loads(raw.decode("utf-8-sig"))).map.files
        if options.maps_dir is not None and not files:
            raise MapError('--maps needs every map to say which files it covers: [map] files = "GLOB"', path=str(path), key="map.files")
        patterns = options.patterns or ((files,) if files else ())
        maps.append(MapChoice(path=path.absolute(), raw=raw, cmap=cmap, patterns=tuple(patterns)))
    return maps


def clean_temporaries(out_dir: Path) -> list[str]:
    """Delete ``.NAME.partial-PID`` files that killed runs left behind (we hold the lock)."""
    removed = []
    for folder in (out_dir, out_dir / HISTORY_FOLDER):
        if not folder.is_dir():
            continue
        for entry in os.scandir(folder):
            if entry.name.startswith(".") and ".partial-" in entry.name and entry.is_file(follow_symlinks=False):
                try:
                    os.unlink(entry.path)
                    removed.append(os.path.relpath(entry.path, out_dir))
                except FileNotFoundError:
                    pass
    return sorted(removed)


class _Run:
    def __init__(self, options: BatchOptions, inbox: Path, out_dir: Path, log: Callable[[str], None]):
        self.options, self.inbox, self.out_dir, self.log = options, inbox, out_dir, log
        self.started = dt.datetime.now(dt.timezone.utc)
        self.clock = time.monotonic()
        self.run_id = self.started.strftime("%Y%m%dT%H%M%SZ-") + uuid.uuid4().hex[:8]
        self.plan = Plan()
        self.maps: list[MapChoice] = []
        self.converted: list[dict] = []
        self.manifest: Manifest | None = None
        self.error: str | None = None
        self.interrupted = False

    def execute(self) -> BatchReport:
        self.cleaned = clean_temporaries(self.out_dir)
        try:
            self.maps = load_maps(self.options)
            self.manifest = Manifest(self.out_dir)
            self.manifest.start_run(self.run_id, utc_text(self.started))
            files = discover(self.inbox, self.maps, self.plan)
            classify(files, self.manifest, self.out_dir, self.plan, settle=self.options.settle, rehash=self.options.rehash)
            self._log_plan()
            self._convert()
        except CountmillError as exc:
            self.error = str(exc)
            self.log(f"batch: error: {exc}")
            return self._finish(exc.exit_code)
        except KeyboardInterrupt:
            self.interrupted = True
            self.error = "interrupted (SIGINT or SIGTERM); the next run converts what is left"
            self.log(f"batch: error: {self.error}")
            # a signal can land between a temporary's creation and its writer's clean-up;
            # we still hold the lock, so any temporary left in DIR is a dead writer's
            self.cleaned += clean_temporaries(self.out_dir)
            self._finish(1)
            raise
        return self._finish(None)

    # --- converting ----------------------------------------------------------------------
    def _convert(self) -> None:
        jobs = []
        for f, sha, why in self.plan.todo:
            jobs.append({
                "source": str(f.path), "output": str(self.out_dir / f.output), "map_path": str(f.map.path),
                "map_bytes": f.map.raw, "chunk_rows": self.options.chunk_rows,
                "_file": f, "_sha": sha, "_why": why,
            })
        for m in self.maps:  # the coordinator converts with the maps it already compiled
            work._maps[(str(m.path), m.raw)] = m.cmap
        if not jobs:
            return
        payload = [{k: v for k, v in job.items() if not k.startswith("_")} for job in jobs]
        by_output = {p["output"]: job for p, job in zip(payload, jobs, strict=True)}
        if self.options.cluster:
            outcomes = work.run_cluster(payload, self.options.cluster)
        elif self.options.workers > 1 and len(payload) > 1:
            outcomes = work.run_processes(payload, min(self.options.workers, len(payload)))
        else:
            outcomes = work.run_serial(payload)
        pending = dict(by_output)
        try:
            for sent, outcome in outcomes:
                self._settle_outcome(pending.pop(sent["output"]), outcome)
        except (CountmillError, KeyboardInterrupt) as exc:
            why = "the run was interrupted" if isinstance(exc, KeyboardInterrupt) else str(exc)
            for job in pending.values():
                f = job["_file"]
                self.plan.left.append({"source": f.name, "output": f.output, "reason": f"not converted: {why}"})
            raise

    def _settle_outcome(self, job: dict, outcome: dict) -> None:
        f = job["_file"]
        worker = f"{outcome['host']}:{outcome['pid']}" if "host" in outcome else None
        if not outcome["ok"]:
            self._fail(f.name, f.output, outcome["kind"], outcome["reason"], worker)
            return
        try:
            st = (self.out_dir / f.output).stat()
        except OSError:  # a worker that does not share our storage
            why = f"the worker {worker} reported success but {f.output} is not in {self.out_dir}: is the storage shared?"
            self._fail(f.name, f.output, "io", why, worker)
            return
        entry = Conversion(
            output=f.output, output_size=st.st_size, output_mtime_ns=st.st_mtime_ns, output_inode=st.st_ino,
            rejects_file=outcome["rejects_file"], source_name=f.name,
            source_sha256=outcome["source_sha256"], source_size=f.st.st_size, map_path=str(f.map.path),
            map_name=f.map.cmap.name, map_sha256=outcome["map_sha256"], data_lines=outcome["data_lines"],
            rows=outcome["rows"], rejects=outcome["rejects"], seconds=outcome["seconds"],
            converted_at=utc_text(dt.datetime.now(dt.timezone.utc)), run_id=self.run_id,
        )
        try:
            self.manifest.record(entry)
        except Exception as exc:  # sqlite3.Error, disk full on the manifest ...
            why = f"converted, but the manifest could not record it ({exc}); the next run converts it again"
            self._fail(f.name, f.output, "manifest", why, worker)
            return
        record = {
            "source": f.name, "output": f.output, "rejects_file": entry.rejects_file, "why": job["_why"],
            "source_sha256": entry.source_sha256, "map": f.map.path.name, "map_sha256": entry.map_sha256,
            "data_lines": entry.data_lines, "rows": entry.rows, "rejects": entry.rejects,
            "quality": outcome["quality"], "seconds": entry.seconds, "worker": worker,
        }
        if entry.source_sha256 != job["_sha"]:
            record["note"] = "the file changed between planning and conversion; the output is of the bytes the converter read"
        self.converted.append(record)
        note = f", {entry.rejects} rejected -> {entry.rejects_file}" if entry.rejects else ", 0 rejected"
        self.log(f"batch: converted {f.name} -> {f.output}: {entry.rows} rows{note} ({job['_why']}, {entry.seconds:.1f} s)")

    def _fail(self, source: str, output: str | None, kind: str, reason: str, worker: str | None = None) -> None:
        self.plan.failed.append({"source": source, "output": output, "kind": kind, "reason": reason, "worker": worker})
        self.log(f"batch: FAILED {source}: {reason}")

    def _log_plan(self) -> None:
        for item in self.plan.failed:
            self.log(f"batch: FAILED {item['source']}: {item['reason']}")
        for item in self.plan.left:
            self.log(f"batch: left {item['source']} for the next run: {item['reason']}")
        for item in self.plan.skipped:
            self.log(f"batch: skipped {item['source']}: {item['reason']}")
        if self.plan.ignored:
            self.log(f"batch: ignored {len(self.plan.ignored)} file(s) no map claims (listed in the summary)")

    # --- reporting -----------------------------------------------------------------------
    def _finish(self, exit_code: int | None) -> BatchReport:
        plan = self.plan
        rejects = sum(c["rejects"] for c in self.converted)
        if exit_code is None:
            exit_code = 1 if plan.failed else 3 if rejects else 0
        quality: dict = {}
        for c in self.converted:
            add_quality(quality, c["quality"])
        counts = {
            "converted": len(self.converted), "skipped": len(plan.skipped), "left": len(plan.left),
            "failed": len(plan.failed), "ignored": len(plan.ignored),
        }
        finished = dt.datetime.now(dt.timezone.utc)
        summary = {
            "countmill_version": __version__,
            "run_id": self.run_id,
            "host": socket.gethostname(),
            "pid": os.getpid(),
            "started": utc_text(self.started),
            "finished": utc_text(finished),
            "duration_s": round(time.monotonic() - self.clock, 3),
            "inbox": str(self.inbox),
            "out": str(self.out_dir),
            "maps": [m.describe() for m in self.maps],
            "settle_s": self.options.settle,
            "workers": self.options.workers,
            "cluster": self.options.cluster,
            "exit_code": exit_code,
            "error": self.error,
            "interrupted": self.interrupted,
            "counts": counts,
            "rows": sum(c["rows"] for c in self.converted),
            "rejects": rejects,
            "quality": dict(sorted(quality.items())),
            "converted": sorted(self.converted, key=lambda c: c["source"]),
            "skipped": sorted(plan.skipped, key=lambda c: c["source"]),
            "left": sorted(plan.left, key=lambda c: c["source"]),
            "failed": sorted(plan.failed, key=lambda c: c["source"]),
            "ignored": sorted(plan.ignored),
            "cleaned_temporaries": self.cleaned,
            "manifest": MANIFEST_NAME,
        }
        path = None
        try:
            path = write_summary(self.out_dir, summary, self.started)
        except OSError as exc:
            self.log(f"batch: FAILED to write the summary: {exc.strerror or exc}")
            exit_code = summary["exit_code"] = 1
        if self.manifest is not None:
            try:
                self.manifest.finish_run(self.run_id, utc_text(finished), exit_code, counts)
            except Exception:
                pass  # the summary has said it all; the runs table is a convenience
            self.manifest.close()
        self.log(
            f"batch: done: {counts['converted']} converted, {counts['skipped']} skipped, {counts['left']} left,"
            f" {counts['failed']} failed; {summary['rows']} rows, {rejects} rejected; {summary['duration_s']:.1f} s;"
            f" summary {path or '(not written)'}; exit {exit_code}"
        )
        return BatchReport(exit_code=exit_code, summary=summary, summary_path=path)
