"""Shared fixtures: a channel-map builder, a raw-log writer, a CLI runner and a reader.

Everything here writes real files under pytest's ``tmp_path``; nothing is mocked.

* ``make_map(channels=[...], derived=[...], timezone=..., ...)`` writes a TOML map from
  plain Python values (see :func:`map_text`) and returns its path; ``write_map(text)``
  writes TOML text as given.
* ``write_log(lines, ...)`` writes a raw log (CSV/TSV, optional header, BOM, CRLF, gzip;
  see :func:`log_bytes`).
* ``run_cli(*args)`` invokes ``countmill.cli.cli`` through click's ``CliRunner``.
* ``convert(raw, map, out, *options)`` runs ``countmill convert`` and reads the output back
  as an :class:`Output` (pandas rows, reasons decoded with the file's own CF metadata).
* ``builders`` (session-scoped) hands the plain functions to tests that cannot take
  function-scoped fixtures (hypothesis tests writing into their own temporary folder).

The default ADC is 12-bit straight binary over 0 … 4.096 V, so one code is exactly 1 mV at
the ADC (common practice for a 4.096 V reference, no source).
"""

from __future__ import annotations

import datetime as dt
import gzip
import json
import math
from pathlib import Path
from types import SimpleNamespace
from typing import Any, Iterable, Sequence

import pandas as pd
import pyarrow.parquet as pq
import pytest
from click.testing import CliRunner

from countmill.cli import cli

DEFAULT_ADC = {"bits": 12, "span": [0.0, 4.096], "coding": "straight"}
DEFAULT_GAINS = {0: 1, 1: 10, 2: 100}


# --------------------------------------------------------------------------- TOML writing


def toml_value(value: Any) -> str:
    """One TOML value (inline tables for dicts); enough for channel maps."""
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, int):
        return str(value)
    if isinstance(value, float):
        if not math.isfinite(value):
            raise ValueError("TOML maps in these tests use finite numbers")
        return repr(value)
    if isinstance(value, str):
        return json.dumps(value)  # a JSON string is a valid TOML basic string
    if isinstance(value, (dt.datetime, dt.date)):
        return value.isoformat()
    if isinstance(value, (list, tuple)):
        return "[" + ", ".join(toml_value(v) for v in value) + "]"
    if isinstance(value, dict):
        return "{ " + ", ".join(f"{toml_key(k)} = {toml_value(v)}" for k, v in value.items()) + " }"
    raise TypeError(f"no TOML form for {value!r}")


def toml_key(key: Any) -> str:
    text = str(key)
    return text if text.replace("_", "a").replace("-", "a").isalnum() else json.dumps(text)


def toml_table(header: str, values: dict[str, Any]) -> str:
    lines = [header] + [f"{toml_key(k)} = {toml_value(v)}" for k, v in values.items()]
    return "\n".join(lines) + "\n"


def map_text(
    channels: Sequence[dict[str, Any]] = (),
    derived: Sequence[dict[str, Any]] = (),
    *,
    name: str = "test-map",
    timezone: str = "UTC",
    adc: dict[str, Any] | None = None,
    gains: dict[int, float] | None = None,
    qc: dict[str, Any] | None = None,
    input: dict[str, Any] | None = None,
) -> str:
    parts = [toml_table("[map]", {"name": name, "timezone": timezone})]
    if input is not None:
        parts.append(toml_table("[input]", input))
    parts.append(toml_table("[adc]", adc if adc is not None else DEFAULT_ADC))
    parts.append(toml_table("[gains]", gains if gains is not None else DEFAULT_GAINS))
    if qc is not None:
        parts.append(toml_table("[qc]", qc))
    parts += [toml_table("[[channel]]", c) for c in channels]
    parts += [toml_table("[[derived]]", d) for d in derived]
    return "\n".join(parts)


@pytest.fixture(scope="session")
def builders() -> SimpleNamespace:
    return SimpleNamespace(map_text=map_text, log_bytes=log_bytes, toml_value=toml_value)


@pytest.fixture
def write_map(tmp_path: Path):
    """Write TOML text as given (for maps that must be wrong in a precise way)."""

    def write(text: str, name: str = "map.toml") -> Path:
        path = tmp_path / name
        path.write_text(text, encoding="utf-8")
        return path

    return write


@pytest.fixture
def make_map(write_map):
    """Build a map from Python values (see :func:`map_text`) and write it."""

    def make(channels=(), derived=(), *, file_name: str = "map.toml", **options) -> Path:
        return write_map(map_text(channels, derived, **options), file_name)

    return make


# --------------------------------------------------------------------------- raw logs


def log_bytes(
    lines: Iterable[str | bytes | Sequence[Any]],
    *,
    header: bool | str = False,
    sep: str = ",",
    newline: str = "\n",
    bom: bool = False,
    final_newline: bool = True,
) -> bytes:
    """Raw log bytes: a tuple is joined with ``sep``; str/bytes lines are written as given."""
    out: list[bytes] = []
    if header:
        text = header if isinstance(header, str) else sep.join(["time", "channel", "code", "gain"])
        out.append(text.encode())
    for line in lines:
        if isinstance(line, bytes):
            out.append(line)
        elif isinstance(line, str):
            out.append(line.encode())
        else:
            out.append(sep.join(str(f) for f in line).encode())
    data = newline.encode().join(out)
    if final_newline and out:
        data += newline.encode()
    return (b"\xef\xbb\xbf" if bom else b"") + data


@pytest.fixture
def write_log(tmp_path: Path):
    """Write a raw log under tmp_path (``gz=True`` gzips it) and return its path."""

    def write(lines, name: str = "raw.csv", *, gz: bool = False, **options) -> Path:
        data = log_bytes(lines, **options)
        path = tmp_path / name
        path.write_bytes(gzip.compress(data, mtime=0) if gz else data)
        return path

    return write


# --------------------------------------------------------------------------- running


@pytest.fixture
def run_cli():
    """Invoke the click group ``countmill.cli.cli`` in-process, as a user would type it."""
    runner = CliRunner()

    def run(*args: Any):
        return runner.invoke(cli, [str(a) for a in args], catch_exceptions=True)

    return run


class Output:
    """A converted file read back: pandas rows and the CF flag meanings from its own metadata."""

    def __init__(self, path: Path):
        self.path = path
        if path.suffix == ".csv":
            self.df = pd.read_csv(path, keep_default_na=True)
            sidecar = json.loads(path.with_name(path.name + "-metadata.json").read_text())
            attrs = next(c for c in sidecar["tableSchema"]["columns"] if c["name"] == "flags")
        else:
            table = pq.read_table(path)
            self.table = table
            self.df = table.to_pandas()
            attrs = {k.decode(): v.decode() for k, v in table.schema.field("flags").metadata.items()}
        masks = [int(m) for m in attrs["flag_masks"].split()]
        self.meanings = dict(zip(attrs["flag_meanings"].split(), masks))

    def names(self, row: int) -> list[str]:
        """Reason names set on one row, decoded with the file's flag_masks / flag_meanings."""
        value = int(self.df["flags"].iloc[row])
        return [name for name, mask in self.meanings.items() if value & mask]

    def all_names(self) -> list[list[str]]:
        return [self.names(i) for i in range(len(self.df))]

    def channel_rows(self, name: str):
        return self.df[self.df["channel"] == name]


@pytest.fixture
def convert(run_cli, tmp_path: Path):
    """``countmill convert RAW --map MAP -o OUT -q [more]``; returns (click result, Output or None)."""

    def run(raw: Path, map_path: Path, out: str | Path = "out.parquet", *more: Any):
        out = Path(out)
        if not out.is_absolute():
            out = tmp_path / out
        result = run_cli("convert", raw, "--map", map_path, "-o", out, "-q", *more)
        return result, (Output(out) if out.exists() else None)

    return run
