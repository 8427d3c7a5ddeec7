"""Read a countmill output (tidy or wide, Parquet or CSV) into a pandas DataFrame.

>>> import countmill
>>> df = countmill.read("day.parquet")  # doctest: +SKIP
>>> df.attrs["units"]["kettle_temp"], df.attrs["countmill"]["map"]["name"]  # doctest: +SKIP
('degC', 'brewhouse-logger-a')
>>> countmill.flags.decode(df["flags"])  # doctest: +SKIP

``df.attrs["units"]`` maps every channel to its unit, ``df.attrs["countmill"]`` is the
provenance object written with the file (for CSV, from the CSVW ``-metadata.json``
sidecar), and ``df.attrs["layout"]`` is ``"tidy"`` or ``"wide"``. Times are
``datetime64[us, UTC]``; integer columns that hold nulls (``channel_id``, ``code`` and
``gain_code`` of derived rows) use pandas' nullable integer types, the others plain numpy
integers, the same for both formats.
"""

from __future__ import annotations

import json
from pathlib import Path

import pandas as pd
import pyarrow as pa
import pyarrow.parquet as pq

from countmill.errors import InputError

_NULLABLE = {
    pa.int8(): pd.Int8Dtype(),
    pa.int16(): pd.Int16Dtype(),
    pa.int32(): pd.Int32Dtype(),
    pa.int64(): pd.Int64Dtype(),
}
#: CSVW datatype -> (nullable pandas dtype, numpy dtype when there is no null)
_CSVW_INT = {"byte": ("Int8", "int8"), "short": ("Int16", "int16"), "int": ("Int32", "int32"), "long": ("Int64", "int64")}
_LATE_KEY = b"countmill.late_samples"


def read(path: str | Path, columns: list[str] | None = None) -> pd.DataFrame:
    """Read a table written by ``countmill convert`` (any layout, Parquet or CSV).

    Parameters
    ----------
    path : str or Path
        A ``.parquet`` or ``.csv`` file written by countmill.
    columns : list of str, optional
        Read only these columns (faster on large days).

    Returns
    -------
    pandas.DataFrame
        With ``attrs["units"]`` (channel -> unit), ``attrs["countmill"]`` (provenance) and
        ``attrs["layout"]``.
    """
    path = Path(path)
    if not path.exists():
        raise InputError(f"{path}: no such file")
    if path.suffix.lower() == ".csv":
        df, info, units = _read_csv(path, columns)
    else:
        df, info, units = _read_parquet(path, columns)
    df.attrs["units"] = units
    df.attrs["countmill"] = info
    layout = ((info or {}).get("layout") or {}).get("name")
    df.attrs["layout"] = layout or ("tidy" if {"channel", "value"} & set(df.columns) else "wide")
    return df


def provenance_of(path: str | Path) -> dict | None:
    """The ``countmill`` provenance object of an output file, without reading its rows."""
    path = Path(path)
    if path.suffix.lower() == ".csv":
        sidecar = path.with_name(path.name + "-metadata.json")
        return json.loads(sidecar.read_text()).get("countmill") if sidecar.exists() else None
    return _parquet_provenance(pq.ParquetFile(path))


def _parquet_provenance(pf: pq.ParquetFile) -> dict | None:
    meta = pf.schema_arrow.metadata or {}
    raw = meta.get(b"countmill") or (pf.metadata.metadata or {}).get(b"countmill")
    if raw is None:
        return None
    info = json.loads(raw)
    late = (pf.metadata.metadata or {}).get(_LATE_KEY)
    if late is not None and isinstance(info.get("layout"), dict):
        info["layout"]["late_samples"] = json.loads(late)
    return info


def _units(info: dict | None, fields: dict[str, str]) -> dict[str, str]:
    units = {name: ch.get("unit") for name, ch in (info or {}).get("channels", {}).items()}
    units.update(fields)  # a wide file's own column metadata is the last word
    return units


def _read_parquet(path: Path, columns):
    try:
        pf = pq.ParquetFile(path)
    except (pa.ArrowInvalid, OSError) as exc:
        raise InputError(f"{path}: not a readable Parquet file ({exc})") from None
    info = _parquet_provenance(pf)
    table = pf.read(columns=columns)
    fields = {f.name: f.metadata[b"units"].decode() for f in pf.schema_arrow if f.metadata and b"units" in f.metadata}
    fields = {k: v for k, v in fields.items() if k not in ("code", "volts")}  # tidy's fixed columns
    data = {}
    for name, column in zip(table.column_names, table.columns):
        mapper = _NULLABLE.get if pa.types.is_integer(column.type) and column.null_count else None
        data[name] = column.to_pandas(types_mapper=mapper)
    return pd.DataFrame(data), info, _units(info, fields)


def _read_csv(path: Path, columns):
    sidecar = path.with_name(path.name + "-metadata.json")
    meta = json.loads(sidecar.read_text()) if sidecar.exists() else {}
    described = meta.get("tableSchema", {}).get("columns", [])
    types = {c["name"]: c.get("datatype", "string") for c in described}
    dtype = {}
    for name, datatype in types.items():
        if datatype in _CSVW_INT:
            dtype[name] = _CSVW_INT[datatype][0]
        elif datatype == "double":
            dtype[name] = "float64"
        elif datatype in ("string", "dateTime"):
            dtype[name] = "str"
    df = pd.read_csv(path, dtype=dtype, usecols=columns)
    for name in df.columns:
        datatype = types.get(name)
        if datatype == "dateTime":
            df[name] = pd.to_datetime(df[name], format="ISO8601", utc=True).astype("datetime64[us, UTC]")
        elif datatype in _CSVW_INT and not df[name].isna().any():
            df[name] = df[name].astype(_CSVW_INT[datatype][1])
        elif name == "flag_names":
            df[name] = df[name].fillna("")
    fields = {c["name"]: c["unit"] for c in described if "unit" in c and c["name"] != "volts"}
    info = meta.get("countmill")
    return df, info, _units(info, fields)
