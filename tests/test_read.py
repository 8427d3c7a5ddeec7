"""``countmill.read``: tidy and wide, Parquet and CSV, into pandas with units and provenance.

References: pyarrow's own reading of the Parquet file (for the values and types), the map
written below (for the units), and the CF ``flag_masks`` / ``flag_meanings`` attributes the
file publishes (for decoding ``flags``). Invented numbers; ADC 12-bit straight binary over
0 … 4.096 V (1 mV per code, common practice for a 4.096 V reference, no source).
"""

from __future__ import annotations

import numpy as np
import pyarrow.parquet as pq
import pytest

import countmill
from countmill.convert import convert_file
from countmill.errors import InputError
from countmill.flags import decode

MAP = """
[map]
name = "read-test-rig"
timezone = "UTC"

[adc]
bits = 12
span = [0.0, 4.096]
coding = "straight"

[gains]
0 = 1

[[channel]]
id = 1
name = "tank_temp"
unit = "degC"
range = [0.0, 100.0]
expect = [10.0, 40.0]
chain = [ { stage = "linear", slope = 100.0, intercept = 0.0 } ]

[[channel]]
id = 2
name = "line_pressure"
unit = "bar"
range = [0.0, 10.0]
chain = [ { stage = "linear", slope = 10.0, intercept = 0.0 } ]

[[derived]]
name = "pressure_head"
unit = "bar"
expression = "line_pressure * 2"
"""


@pytest.fixture(scope="module")
def outputs(tmp_path_factory):
    folder = tmp_path_factory.mktemp("read")
    (folder / "rig.toml").write_text(MAP)
    rng = np.random.default_rng(3)
    lines = ["time,channel,code,gain"]
    for k in range(200):
        stamp = np.datetime64("2026-03-01T10:00:00", "s") + np.timedelta64(5 * k, "s")
        for cid in (1, 2):
            code = int(rng.integers(50, 450))
            if k in (20, 21):
                code = 4095  # the upper rail: saturated_high
            if k == 50 and cid == 1:
                code = 7000  # invalid for 12 bits
            lines.append(f"{stamp}Z,{cid},{code},0")
        if k % 50 == 0:
            lines.append(f"{stamp}Z,7,1,0")  # an unmapped channel
    raw = folder / "rig.csv"
    raw.write_text("\n".join(lines) + "\n")
    paths = {}
    for name, kwargs in {
        "tidy.parquet": {}, "tidy.csv": {},
        "wide.parquet": {"layout": "wide", "every": "1min"}, "wide.csv": {"layout": "wide", "every": "1min"},
    }.items():
        convert_file(raw, folder / "rig.toml", folder / name, **kwargs)
        paths[name] = folder / name
    return paths


UNITS = {"tank_temp": "degC", "line_pressure": "bar", "pressure_head": "bar"}  # reference: the map above


@pytest.mark.parametrize("name", ["tidy.parquet", "tidy.csv", "wide.parquet", "wide.csv"])
def test_attrs_units_and_provenance(outputs, name):
    df = countmill.read(outputs[name])
    assert {k: df.attrs["units"][k] for k in UNITS} == UNITS
    assert df.attrs["countmill"]["map"]["name"] == "read-test-rig"
    assert df.attrs["countmill"]["source"]["name"] == "rig.csv"
    assert df.attrs["layout"] == name.split(".")[0]
    assert str(df["time"].dtype) == "datetime64[us, UTC]"


def test_tidy_parquet_and_csv_read_alike(outputs):
    pa_table = pq.read_table(outputs["tidy.parquet"]).to_pandas()  # reference: pyarrow itself
    p = countmill.read(outputs["tidy.parquet"])
    c = countmill.read(outputs["tidy.csv"])
    assert len(p) == len(c) == len(pa_table)
    for frame in (p, c):
        np.testing.assert_array_equal(frame["time"].to_numpy(), pa_table["time"].to_numpy())
        np.testing.assert_array_equal(frame["value"].to_numpy(), pa_table["value"].to_numpy())
        np.testing.assert_array_equal(frame["flags"].to_numpy(), pa_table["flags"].to_numpy())
        assert frame["quality"].dtype == np.int8 and frame["flags"].dtype == np.int64
        # derived rows have no channel number: a nullable integer, not a float
        assert str(frame["channel_id"].dtype) == "Int32"
        assert frame.loc[frame["channel"] == "pressure_head", "channel_id"].isna().all()
    # an unmapped record keeps a null channel
    assert p["channel"].isna().sum() == c["channel"].isna().sum() == 4


def test_wide_parquet_and_csv_read_alike(outputs):
    p = countmill.read(outputs["wide.parquet"])
    c = countmill.read(outputs["wide.csv"])
    assert list(p.columns) == list(c.columns)
    for column in p.columns:
        np.testing.assert_array_equal(p[column].to_numpy(), c[column].to_numpy(), err_msg=column)
        assert p[column].dtype == c[column].dtype, column
    assert p["tank_temp"].dtype == np.float64 and p["tank_temp_quality"].dtype == np.int8


def test_decode_on_a_pandas_series(outputs):
    df = countmill.read(outputs["tidy.parquet"])
    # reference: the CF flag_masks / flag_meanings the file publishes on its flags column
    meta = pq.read_schema(outputs["tidy.parquet"]).field("flags").metadata
    masks = [int(m) for m in meta[b"flag_masks"].split()]
    meanings = meta[b"flag_meanings"].decode().split()
    expected = [[name for mask, name in zip(masks, meanings) if v & mask] for v in df["flags"].tolist()]
    assert decode(df["flags"]) == expected
    assert any("saturated_high" in names for names in expected)
    csv = countmill.read(outputs["tidy.csv"])
    assert csv["flag_names"].tolist() == [";".join(names) for names in expected]


def test_read_columns_subset_and_missing_file(outputs, tmp_path):
    df = countmill.read(outputs["tidy.parquet"], columns=["time", "channel", "value"])
    assert list(df.columns) == ["time", "channel", "value"]
    assert countmill.read(outputs["tidy.csv"], columns=["time", "value"]).shape[1] == 2
    with pytest.raises(InputError):
        countmill.read(tmp_path / "nothing.parquet")
