"""Which files of the inbox a batch run converts, skips, leaves for later, or refuses.

Raw files are the regular files directly in INBOX (not in sub-folders) whose names do not
start with ``.`` (rsync, editors and ``countmill`` itself write temporaries under such
names) and that a map claims:

- with ``--pattern GLOB`` (repeatable): the names matching one of the globs;
- else with a map whose ``[map] files = "GLOB"`` is set: the names matching it (always the
  case with ``--maps FOLDER``, where every map must say which files are its own);
- else the default: names ending ``.csv``, ``.tsv``, ``.txt`` or ``.log``, each optionally
  followed by ``.gz`` (case-insensitive).

Globs are :mod:`fnmatch` globs on the file name, case-sensitive. The output of
``day.csv.gz`` is ``DIR/day.parquet``: the name without ``.gz`` and without its last suffix.
"""

from __future__ import annotations

import fnmatch
import hashlib
import os
import stat
import time
from dataclasses import dataclass, field
from pathlib import Path

from countmill.batch.manifest import Manifest, output_is_recorded
from countmill.chanmap import ChannelMap

DEFAULT_SUFFIXES = (".csv", ".tsv", ".txt", ".log")


def output_name(raw_name: str) -> str:
    """``day.csv.gz`` -> ``day.parquet``; ``day.2026.csv`` -> ``day.2026.parquet``."""
    base = raw_name[:-3] if raw_name.lower().endswith(".gz") else raw_name
    return Path(base).stem + ".parquet"


def has_default_suffix(name: str) -> bool:
    base = name[:-3] if name.lower().endswith(".gz") else name
    return Path(base).suffix.lower() in DEFAULT_SUFFIXES


@dataclass
class MapChoice:
    """A channel map of the run and the raw files it claims."""

    path: Path
    raw: bytes  # the map file's bytes, sent to workers so that all of them use the same map
    cmap: ChannelMap
    patterns: tuple[str, ...]  # empty: the default suffixes

    def claims(self, name: str) -> bool:
        if not self.patterns:
            return has_default_suffix(name)
        return any(fnmatch.fnmatchcase(name, p) for p in self.patterns)

    def describe(self) -> dict:
        return {
            "path": str(self.path),
            "name": self.cmap.name,
            "sha256": self.cmap.sha256,
            "files": list(self.patterns) or [f"*{s}" for s in DEFAULT_SUFFIXES] + [f"*{s}.gz" for s in DEFAULT_SUFFIXES],
        }


@dataclass
class RawFile:
    path: Path
    output: str
    map: MapChoice
    st: os.stat_result

    @property
    def name(self) -> str:
        return self.path.name


@dataclass
class Plan:
    """What the run does with each file of the inbox."""

    todo: list[tuple[RawFile, str, str]] = field(default_factory=list)  # (file, sha256, why)
    skipped: list[dict] = field(default_factory=list)
    left: list[dict] = field(default_factory=list)
    failed: list[dict] = field(default_factory=list)
    ignored: list[str] = field(default_factory=list)


def discover(inbox: Path, maps: list[MapChoice], plan: Plan) -> list[RawFile]:
    """Raw files in ``inbox`` that exactly one map claims, one per output name.

    Files claimed by several maps, and all files that would write the same output, go to
    ``plan.failed``; names no map claims go to ``plan.ignored``.
    """
    found: list[RawFile] = []
    with os.scandir(inbox) as entries:
        names = sorted(e.name for e in entries)
    for name in names:
        if name.startswith("."):
            continue
        path = inbox / name
        try:
            st = path.stat()
        except FileNotFoundError:  # vanished since the listing, or a dangling symbolic link
            continue
        except OSError as exc:
            plan.failed.append(_failure(path, None, f"cannot stat: {exc.strerror}", error_kind(exc)))
            continue
        if not stat.S_ISREG(st.st_mode):
            continue
        owners = [m for m in maps if m.claims(name)]
        if not owners:
            plan.ignored.append(name)
            continue
        if len(owners) > 1:
            which = ", ".join(m.path.name for m in owners)
            why = f"claimed by several maps ({which}); make their [map] files globs disjoint"
            plan.failed.append(_failure(path, output_name(name), why, "usage"))
            continue
        found.append(RawFile(path, output_name(name), owners[0], st))

    by_output: dict[str, list[RawFile]] = {}
    for f in found:
        by_output.setdefault(f.output, []).append(f)
    unique = []
    for output, files in by_output.items():
        if len(files) == 1:
            unique.append(files[0])
            continue
        why = f"the output name {output} is claimed by several raw files ({', '.join(f.name for f in files)}); rename or move all but one"
        for f in files:
            plan.failed.append(_failure(f.path, output, why, "usage"))
    return sorted(unique, key=lambda f: f.name)


def classify(
    files: list[RawFile], manifest: Manifest, out_dir: Path, plan: Plan, *, settle: float, rehash: bool = False, now: float | None = None
) -> None:
    """Sort ``files`` into ``plan.todo``, ``plan.skipped``, ``plan.left`` and ``plan.failed``."""
    now = time.time() if now is None else now
    for f in files:
        _classify_one(f, manifest, out_dir, plan, settle=settle, rehash=rehash, now=now)


def _classify_one(f: RawFile, manifest: Manifest, out_dir: Path, plan: Plan, *, settle: float, rehash: bool, now: float) -> None:
    map_sha = f.map.cmap.sha256
    latest = manifest.latest(f.output)
    # the conversion the output folder really holds for this name, if any
    holds = latest if latest is not None and output_is_recorded(latest, out_dir / f.output) else None

    def is_done(sha: str | None) -> bool:
        return holds is not None and (holds.source_sha256, holds.map_sha256) == (sha, map_sha)

    # unchanged since it was hashed and already converted: done, settling or not
    sha = None if rehash else manifest.cached_hash(*_stat_key(f))
    if not is_done(sha):
        # the last modification time: what a writer moves (and what `touch -d` sets back)
        age = now - f.st.st_mtime
        if settle > 0 and age < settle:
            if age >= 0:
                why = f"changed {age:.0f} s ago (settle {settle:g} s)"
            else:
                why = f"changed {-age:.0f} s in the future by this machine's clock (settle {settle:g} s)"
            plan.left.append({"source": f.name, "output": f.output, "reason": why})
            return
    if sha is None:
        try:
            sha = _hash_file(f, manifest)
        except OSError as exc:
            plan.failed.append(_failure(f.path, f.output, f"cannot read: {exc.strerror or exc}", error_kind(exc)))
            return
        if sha is None:
            plan.left.append({"source": f.name, "output": f.output, "reason": "changed while being read"})
            return
    if is_done(sha):
        plan.skipped.append({
            "source": f.name, "output": f.output, "source_sha256": sha,
            "reason": f"already converted on {holds.converted_at} (same content, same map)",
        })
        return
    twins = [
        e for e in manifest.outputs_holding(sha, map_sha)
        if e.output != f.output and output_is_recorded(e, out_dir / e.output)
    ]
    if twins:
        plan.skipped.append({
            "source": f.name, "output": f.output, "source_sha256": sha, "duplicate_of": twins[0].output,
            "reason": f"same content as {twins[0].source_name}, already converted to {twins[0].output} with this map",
        })
        return
    if latest is None:
        why = "new"
    elif not (out_dir / f.output).exists():
        why = "output missing"
    elif holds is None:
        why = "output not the one recorded"
    elif holds.source_sha256 != sha:
        why = "content changed"
    else:
        why = "map changed"
    plan.todo.append((f, sha, why))


def _stat_key(f: RawFile) -> tuple:
    st = f.st
    return (str(f.path.resolve()), st.st_size, st.st_mtime_ns, st.st_ctime_ns, st.st_ino)


def _hash_file(f: RawFile, manifest: Manifest) -> str | None:
    """SHA-256 of the stored bytes; None when the file changed while it was read."""
    with open(f.path, "rb") as fh:
        sha = hashlib.file_digest(fh, "sha256").hexdigest()
    after = f.path.stat()
    st = f.st
    if (after.st_size, after.st_mtime_ns, after.st_ino) != (st.st_size, st.st_mtime_ns, st.st_ino):
        return None
    manifest.remember_hash(*_stat_key(f), sha)
    return sha


def error_kind(exc: BaseException) -> str:
    """``disk_full``, ``permission`` or ``io`` for an OS error; its text as a fallback."""
    import errno  # noqa: PLC0415

    code = getattr(exc, "errno", None)
    text = str(exc).lower()
    if code in (errno.ENOSPC, errno.EDQUOT, errno.EFBIG) or "no space left" in text or "file too large" in text or "quota" in text:
        return "disk_full"
    if code in (errno.EACCES, errno.EPERM, errno.EROFS) or "permission denied" in text or "read-only file system" in text:
        return "permission"
    return "io"


def _failure(path: Path, output: str | None, reason: str, kind: str) -> dict:
    return {"source": path.name, "output": output, "kind": kind, "reason": reason, "worker": None}
