"""End-to-end ``countmill convert`` on small crafted logs (contract §2, §3, §5).

Every log here is written by the test, so the expected rows, rejects and flags are known by
construction. Outputs are real Parquet / CSV files read back with pyarrow and pandas; the
command line is run through click's CliRunner on ``countmill.cli.cli`` and, for exit codes
and clean stderr, as the installed ``countmill`` console script in a subprocess.

The default ADC of the map builder is 12-bit straight binary over 0 … 4.096 V: one code is
1 mV at the ADC (common practice for a 4.096 V reference, no source).
"""

from __future__ import annotations

import datetime as dt
import gzip
import hashlib
import json
import subprocess
import sys
from pathlib import Path

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.parquet as pq
import pytest

import countmill
from countmill.convert import convert_file

T0 = dt.datetime(2026, 1, 1, 0, 0, 0)

#: supply (V) and current (A) with a derived power in W; range on supply only
BENCH_CHANNELS = [
    {"id": 1, "name": "supply", "unit": "V", "chain": [{"stage": "linear", "slope": 1.0}], "range": [0.0, 4.0]},
    {"id": 2, "name": "current", "unit": "A", "chain": [{"stage": "linear", "slope": 1.0, "unit": "A"}]},
]
BENCH_DERIVED = [{"name": "power", "unit": "W", "expression": "supply * current"}]


def stamp(seconds: float) -> str:
    return (T0 + dt.timedelta(seconds=seconds)).isoformat()


def good_lines(n: int, start: int = 0) -> list[tuple]:
    """n clean records, alternating channel 1 and 2, one per second."""
    return [(stamp(start + i), 1 + (i % 2), 1000 + i, 0) for i in range(n)]


@pytest.fixture
def bench_map(make_map):
    return make_map(BENCH_CHANNELS, BENCH_DERIVED)


def measured(df: pd.DataFrame) -> pd.DataFrame:
    """Rows that come from a raw record (derived rows have no channel_id)."""
    return df[df["channel_id"].notna()]


def read_rejects(out: Path) -> pd.DataFrame:
    return pd.read_csv(out.with_name(out.name + ".rejects.csv"), keep_default_na=False, dtype={"text": str})


def console_script() -> str:
    """The installed ``countmill`` entry point beside this Python."""
    return str(Path(sys.executable).with_name("countmill"))


# --------------------------------------------------------------------------- bad input lines

BAD_LINES = [
    # (raw bytes of the line, a phrase the reject reason must contain)
    (b"2026-01-01T00:01:00,1,1000", "expected 4 fields"),  # too few fields
    (b"2026-01-01T00:01:01,1,1000,0,5", "expected 4 fields"),  # too many fields
    (b"2026-01-01T00:01:02,one,1000,0", "channel"),  # non-integer channel
    (b"2026-01-01T00:01:03,1,10.5,0", "code"),  # non-integer code
    (b"2026-01-01T00:01:04,1,1000,x", "gain"),  # non-integer gain
    (b"yesterday noon,1,1000,0", "time"),  # unreadable time
    (b"2026-01-01T00:01:06,1,10\x0000,0", "NUL"),  # NUL byte
    (b"2026-01-01T00:01:07,1,10\xff0,0", "code"),  # not UTF-8
]


@pytest.mark.parametrize("bad, reason", BAD_LINES, ids=["few", "many", "channel", "code", "gain", "time", "nul", "utf8"])
def test_each_bad_line_is_one_reject_and_the_rest_are_rows(write_log, bench_map, convert, bad, reason):
    lines = good_lines(4) + [bad] + good_lines(3, start=10)
    raw = write_log(lines)
    result, out = convert(raw, bench_map)
    assert result.exit_code == 3, result.output
    rejects = read_rejects(out.path)
    assert list(rejects.columns) == ["line", "reason", "text"]
    assert rejects["line"].tolist() == [5]
    assert reason in rejects["reason"][0]
    # the line as read, without its line ending, decoded with replacement characters
    assert rejects["text"][0] == bad.decode("utf-8", errors="replace")
    rows = measured(out.df)
    assert len(rows) + len(rejects) == len(lines)  # every data line accounted for once
    assert rows["line"].tolist() == [1, 2, 3, 4, 6, 7, 8]


def test_all_bad_cases_together_accounting_excludes_derived_rows(write_log, bench_map, convert):
    truncated = b"2026-01-01T00:02:00,1,10"  # cut short, no line ending
    lines = good_lines(6) + [b for b, _ in BAD_LINES] + good_lines(6, start=100) + [truncated]
    raw = write_log(lines, final_newline=False)
    result, out = convert(raw, bench_map)
    assert result.exit_code == 3
    rejects = read_rejects(out.path)
    assert len(rejects) == len(BAD_LINES) + 1
    # the derived rows are extra: 12 records, 6 on supply -> 6 power rows
    assert len(out.df) == 12 + 6
    assert len(measured(out.df)) + len(rejects) == len(lines)
    last = rejects.iloc[-1]
    assert last["line"] == len(lines) and "truncated" in last["reason"]
    assert last["text"] == truncated.decode()
    assert "\ufffd" in rejects[rejects["line"] == 14]["text"].iloc[0]  # the 0xFF byte, replaced


def test_rejects_text_has_no_line_ending_with_crlf(write_log, bench_map, convert):
    raw = write_log(good_lines(2) + ["2026-01-01T00:00:09\t1\t5\t0"] + good_lines(2, start=3), newline="\r\n")
    result, out = convert(raw, bench_map)
    assert result.exit_code == 3
    assert read_rejects(out.path)["text"].tolist() == ["2026-01-01T00:00:09\t1\t5\t0"]


def test_complete_last_line_without_line_ending_is_a_row(write_log, bench_map, convert):
    # Implementation's choice (the contract lists "a truncated last line" as a reject): a last
    # line that lacks its line ending but parses completely is kept; only one that fails to
    # parse is a reject, and its reason then says it may be truncated.
    raw = write_log(good_lines(3), final_newline=False)
    result, out = convert(raw, bench_map)
    assert result.exit_code == 0
    assert measured(out.df)["line"].tolist() == [1, 2, 3]
    assert not out.path.with_name(out.path.name + ".rejects.csv").exists()


def test_a_header_line_after_the_first_data_line_is_a_reject(write_log, bench_map, convert):
    raw = write_log(good_lines(2) + ["time,channel,code,gain"] + good_lines(2, start=5))
    result, out = convert(raw, bench_map)
    assert result.exit_code == 3
    assert read_rejects(out.path)["line"].tolist() == [3]


def test_numbers_too_wide_for_the_output_columns_are_rejects(write_log, bench_map, convert):
    # channel_id and code are int32, gain_code int16 in the output (contract §5): a wider
    # number cannot be written as read, so the line is a reject rather than a wrapped value.
    lines = good_lines(2) + [
        (stamp(10), 1, 2**31, 0),
        (stamp(11), 2**31, 5, 0),
        (stamp(12), 1, 5, 2**15),
    ] + good_lines(2, start=20)
    result, out = convert(write_log(lines, header=True), bench_map)
    assert result.exit_code == 3
    assert read_rejects(out.path)["line"].tolist() == [4, 5, 6]
    assert len(measured(out.df)) == 4


# --------------------------------------------------------------------------- file shapes


def baseline_values(df: pd.DataFrame) -> pd.DataFrame:
    return df.drop(columns=["line"]).reset_index(drop=True)


SHAPES = {
    # name: (write_log options, expected line numbers of the 6 records)
    "plain": ({}, [1, 2, 3, 4, 5, 6]),
    "header": ({"header": True}, [2, 3, 4, 5, 6, 7]),
    "bom+header": ({"header": True, "bom": True}, [2, 3, 4, 5, 6, 7]),
    "bom, no header": ({"bom": True}, [1, 2, 3, 4, 5, 6]),
    "crlf": ({"header": True, "newline": "\r\n"}, [2, 3, 4, 5, 6, 7]),
    "tsv": ({"header": True, "sep": "\t"}, [2, 3, 4, 5, 6, 7]),
    "gzip": ({"header": True, "gz": True}, [2, 3, 4, 5, 6, 7]),
    "gzip crlf tsv": ({"gz": True, "newline": "\r\n", "sep": "\t"}, [1, 2, 3, 4, 5, 6]),
}


@pytest.mark.parametrize("shape", list(SHAPES))
def test_file_shapes_give_the_same_rows(write_log, bench_map, convert, shape):
    options, expected_lines = SHAPES[shape]
    _, plain = convert(write_log(good_lines(6), "plain.csv"), bench_map, "plain.parquet")
    name = "shaped.csv.gz" if options.get("gz") else "shaped.csv"
    result, out = convert(write_log(good_lines(6), name, **options), bench_map, "shaped.parquet")
    assert result.exit_code == 0, result.output
    pd.testing.assert_frame_equal(baseline_values(out.df), baseline_values(plain.df))
    assert measured(out.df)["line"].tolist() == expected_lines


def test_comments_and_blank_lines_are_skipped_but_counted(write_log, bench_map, convert):
    lines = [
        "# logger A, firmware 2.1",
        "time,channel,code,gain",
        "",
        *[",".join(map(str, r)) for r in good_lines(2)],
        "   ",
        "# operator note",
        *[",".join(map(str, r)) for r in good_lines(2, start=2)],
        "",
    ]
    result, out = convert(write_log(lines), bench_map)
    assert result.exit_code == 0
    assert not out.path.with_name(out.path.name + ".rejects.csv").exists()
    assert measured(out.df)["line"].tolist() == [4, 5, 8, 9]


def test_gzip_output_equals_plain_output_including_lines(write_log, bench_map, convert):
    lines = good_lines(8) + [b"2026-01-01T00:09:00,1"]
    _, plain = convert(write_log(lines, "day.csv", header=True), bench_map, "plain.parquet")
    result, packed = convert(write_log(lines, "day.csv.gz", header=True, gz=True), bench_map, "packed.parquet")
    assert result.exit_code == 3
    pd.testing.assert_frame_equal(packed.df, plain.df)
    pd.testing.assert_frame_equal(read_rejects(packed.path), read_rejects(plain.path))


@pytest.mark.parametrize("comment", [False, True], ids=["bulk", "line by line"])
def test_csv_double_quoted_fields_read_like_plain_ones(write_log, bench_map, convert, comment):
    # RFC 4180 quoting: "101" is the field 101. Lines after the first data line are read in
    # bulk, unless their block holds a comment; then they are read line by line. Both agree.
    plain = good_lines(6)
    quoted = [f'"{t}",{c},"{code}",{g}' for t, c, code, g in plain]
    lines = ['"time","channel","code","gain"', *quoted[:3], *(["# note"] if comment else []), *quoted[3:]]
    result, out = convert(write_log(lines), bench_map, "quoted.parquet")
    _, reference = convert(write_log(plain, "plain.csv"), bench_map, "plain.parquet")
    assert result.exit_code == 0, result.output
    pd.testing.assert_frame_equal(baseline_values(out.df), baseline_values(reference.df))
    assert measured(out.df)["line"].tolist() == ([2, 3, 4, 6, 7, 8] if comment else [2, 3, 4, 5, 6, 7])


def test_log_without_gain_column_means_gain_code_zero(write_log, make_map, convert):
    cmap = make_map(BENCH_CHANNELS, input={"columns": ["time", "channel", "code"]}, gains={0: 2, 1: 10})
    raw = write_log([(stamp(0), 1, 1000), (stamp(1), 1, 1500)], header="time,channel,code")
    result, out = convert(raw, cmap)
    assert result.exit_code == 0
    assert out.df["gain_code"].tolist() == [0, 0]
    np.testing.assert_allclose(out.df["volts"], [0.5, 0.75])  # 1.000 V / 2, 1.500 V / 2


def test_columns_in_another_order(write_log, make_map, convert):
    cmap = make_map(BENCH_CHANNELS, input={"columns": ["channel", "gain", "code", "time"]})
    result, out = convert(write_log([(1, 1, 2000, stamp(0))]), cmap)
    assert result.exit_code == 0
    np.testing.assert_allclose(out.df["volts"], [0.2])  # 2.000 V at the ADC, gain 10
    assert out.df["time"][0] == pd.Timestamp("2026-01-01T00:00:00Z")


# --------------------------------------------------------------------------- exit codes, files


def test_exit_0_and_no_rejects_file(write_log, bench_map, convert):
    result, out = convert(write_log(good_lines(4)), bench_map)
    assert result.exit_code == 0
    assert not out.path.with_name(out.path.name + ".rejects.csv").exists()


def test_rejects_file_name_follows_the_output(write_log, bench_map, convert, tmp_path):
    result, out = convert(write_log(good_lines(2) + ["bad"]), bench_map, "day.parquet")
    assert result.exit_code == 3
    assert (tmp_path / "day.parquet.rejects.csv").read_text().splitlines()[0] == "line,reason,text"


def test_a_clean_rerun_removes_the_stale_rejects_file(write_log, bench_map, convert, tmp_path):
    convert(write_log(good_lines(2) + ["bad"]), bench_map, "day.parquet")
    assert (tmp_path / "day.parquet.rejects.csv").exists()
    result, _ = convert(write_log(good_lines(2)), bench_map, "day.parquet")
    assert result.exit_code == 0
    assert not (tmp_path / "day.parquet.rejects.csv").exists()


def test_missing_raw_file_is_exit_1_and_nothing_written(bench_map, run_cli, tmp_path):
    out = tmp_path / "out.parquet"
    result = run_cli("convert", tmp_path / "absent.csv", "--map", bench_map, "-o", out)
    assert result.exit_code == 1
    assert "absent.csv" in result.output
    assert sorted(p.name for p in tmp_path.iterdir()) == ["map.toml"]


def test_bad_map_is_exit_2_and_nothing_written(write_log, write_map, run_cli, tmp_path):
    raw = write_log(good_lines(2) + ["bad"])
    bad_map = write_map('[map]\nname = "x"\n[adc]\nbits = 12\nspan = [0.0, 4.096]\n[[channel]]\nid = 1\nname = "a"\nunit = "V"\nchain = [{ stage = "nonsense" }]\n')
    result = run_cli("convert", raw, "--map", bad_map, "-o", tmp_path / "out.csv")
    assert result.exit_code == 2
    assert "map.toml" in result.output and "nonsense" in result.output
    assert sorted(p.name for p in tmp_path.iterdir()) == ["map.toml", "raw.csv"]


def test_unknown_output_suffix_is_a_usage_error(write_log, bench_map, run_cli, tmp_path):
    result = run_cli("convert", write_log(good_lines(2)), "--map", bench_map, "-o", tmp_path / "out.txt")
    assert result.exit_code == 2
    assert not (tmp_path / "out.txt").exists()


def test_corrupt_gzip_is_exit_1_with_nothing_at_the_final_path(write_log, bench_map, run_cli, tmp_path):
    # A gzip stream cut in half: the reader fails part-way, after rows were already written
    # to the temporary file; nothing may be left at the final path, no temporary file either.
    lines = [(stamp(i), 1, i % 4000, 0) for i in range(20_000)]
    whole = write_log(lines, "whole.csv.gz", gz=True).read_bytes()
    raw = tmp_path / "cut.csv.gz"
    raw.write_bytes(whole[: len(whole) // 2])
    (tmp_path / "whole.csv.gz").unlink()
    result = run_cli("convert", raw, "--map", bench_map, "-o", tmp_path / "cut.parquet", "--chunk-rows", "500")
    assert result.exit_code == 1
    assert "corrupt" in result.output or "truncated" in result.output
    assert sorted(p.name for p in tmp_path.iterdir()) == ["cut.csv.gz", "map.toml"]


def test_gz_name_without_gzip_data_is_exit_1(write_log, bench_map, run_cli, tmp_path):
    # contract §3/§7: gzip accepted for .gz; a .gz that is not gzip is corrupt input (exit 1)
    raw = tmp_path / "plain.csv.gz"
    raw.write_bytes(b"time,channel,code,gain\n2026-01-01T00:00:00,1,5,0\n")
    result = run_cli("convert", raw, "--map", bench_map, "-o", tmp_path / "plain.parquet")
    assert result.exit_code == 1
    assert "not gzip" in result.output
    assert not (tmp_path / "plain.parquet").exists()


def test_output_is_written_under_a_temporary_name_until_complete(write_log, bench_map, tmp_path):
    # Look into the output folder while the conversion runs (the progress callback is called
    # after every chunk): the final name must not exist until the end.
    raw = write_log([(stamp(i), 1, 100 + i, 0) for i in range(3000)])
    final = tmp_path / "out" / "day.parquet"
    seen = []

    def look(done, total):
        seen.append((final.exists(), sorted(p.name for p in final.parent.iterdir())))

    convert_file(raw, bench_map, final, chunk_rows=100, progress=look)
    assert len(seen) > 1
    assert not any(exists for exists, _ in seen)
    assert all("day.parquet" not in names for _, names in seen)
    # the sink opens in the background writer thread, so the first looks may come
    # before the temporary file exists; later ones see it
    assert any(name.startswith(".day.parquet.partial-") for _, names in seen for name in names)
    assert sorted(p.name for p in final.parent.iterdir()) == ["day.parquet"]


def test_default_output_is_raw_stem_dot_parquet_in_the_current_folder(write_log, bench_map, tmp_path):
    raw = write_log(good_lines(3), "day-07.csv.gz", gz=True)
    work = tmp_path / "work"
    work.mkdir()
    done = subprocess.run([console_script(), "convert", str(raw), "--map", str(bench_map)], cwd=work, capture_output=True, text=True)
    assert done.returncode == 0, done.stderr
    assert sorted(p.name for p in work.iterdir()) == ["day-07.parquet"]


@pytest.mark.parametrize(
    "case, expected",
    [("clean", 0), ("rejects", 3), ("bad map", 2), ("no raw file", 1), ("bad option", 2)],
)
def test_console_script_exit_codes_and_no_traceback(write_log, bench_map, write_map, tmp_path, case, expected):
    raw = write_log(good_lines(3) + (["bad line"] if case == "rejects" else []))
    map_path = bench_map
    if case == "bad map":
        map_path = write_map("[map\nname =", "broken.toml")
    if case == "no raw file":
        raw = tmp_path / "absent.csv"
    args = [console_script(), "convert", str(raw), "--map", str(map_path), "-o", str(tmp_path / "o.parquet")]
    if case == "bad option":
        args += ["--chunk-rows", "0"]
    done = subprocess.run(args, capture_output=True, text=True)
    assert done.returncode == expected, done.stderr
    assert "Traceback" not in done.stderr
    if expected in (1, 2):
        assert not (tmp_path / "o.parquet").exists()
        assert done.stderr.strip()  # says why, in one message
        assert len([line for line in done.stderr.splitlines() if line.startswith("countmill:")]) <= 1


def test_help_documents_the_exit_codes(run_cli):
    result = run_cli("--help")
    assert result.exit_code == 0
    for code, words in [("0", "converted"), ("3", "rejected"), ("2", "map error"), ("1", "failed")]:
        assert any(line.strip().startswith(code) and words in line for line in result.output.splitlines())


# --------------------------------------------------------------------------- Parquet output


def test_parquet_column_types_are_exactly_the_contract(write_log, bench_map, convert):
    _, out = convert(write_log(good_lines(4)), bench_map)
    schema = pq.read_schema(out.path)
    expected = pa.schema(
        [
            ("time", pa.timestamp("us", tz="UTC")),
            ("line", pa.int64()),
            ("channel", pa.string()),
            ("channel_id", pa.int32()),
            ("code", pa.int32()),
            ("gain_code", pa.int16()),
            ("volts", pa.float64()),
            ("value", pa.float64()),
            ("unit", pa.string()),
            ("quality", pa.int8()),
            ("flags", pa.int64()),
        ]
    )
    assert [(f.name, f.type) for f in schema] == [(f.name, f.type) for f in expected]


def _column_encodings(path: Path, column: str) -> set[str]:
    meta = pq.ParquetFile(path).metadata
    index = meta.schema.names.index(column)
    return {e for g in range(meta.num_row_groups) for e in meta.row_group(g).column(index).encodings}


def test_repeating_numbers_are_dictionary_encoded_and_read_back_exactly(write_log, make_map, convert):
    # "supply" repeats 3 codes; "current" gets a new code on every record: its volts and
    # values are all distinct and stay plainly encoded (a dictionary would only cost time)
    channels = [
        {"id": 1, "name": "supply", "unit": "V", "chain": [{"stage": "linear", "slope": 1.0}]},
        {"id": 2, "name": "current", "unit": "A", "chain": [{"stage": "linear", "slope": 1.0, "unit": "A"}]},
    ]
    repeating = [(stamp(i), 1, 1000 + i % 3, 0) for i in range(400)]
    distinct = [(stamp(i), 2, 7 * i, 0) for i in range(400)]  # inside a 12-bit ADC
    for lines, dictionary in ((repeating, True), (distinct, False)):
        _, out = convert(write_log(lines), make_map(channels))
        for column in ("code", "volts", "value"):
            assert ("RLE_DICTIONARY" in _column_encodings(out.path, column)) is dictionary, column
        df = pd.read_parquet(out.path)
        codes = np.array([code for _, _, code, _ in lines])
        np.testing.assert_array_equal(df["code"], codes)
        np.testing.assert_array_equal(df["value"], df["volts"])  # slope 1, in the same unit
        assert df["volts"].nunique() == len(set(codes))
    assert "RLE_DICTIONARY" in _column_encodings(out.path, "channel")  # names: always


def test_parquet_flag_metadata_follows_cf_conventions(write_log, bench_map, convert):
    # CF conventions (flag_values / flag_masks / flag_meanings), IOC/IODE primary-level scheme
    _, out = convert(write_log(good_lines(2)), bench_map)
    schema = pq.read_schema(out.path)
    quality = {k.decode(): v.decode() for k, v in schema.field("quality").metadata.items()}
    assert quality["flag_values"] == "1 2 3 4 9"
    assert quality["flag_meanings"] == "good not_evaluated suspect bad missing"
    flags = {k.decode(): v.decode() for k, v in schema.field("flags").metadata.items()}
    masks = [int(m) for m in flags["flag_masks"].split()]
    meanings = flags["flag_meanings"].split()
    assert len(masks) == len(meanings)
    assert all(m > 0 and m & (m - 1) == 0 for m in masks) and len(set(masks)) == len(masks)  # one bit each
    contract_reasons = (
        "saturated_low saturated_high invalid_code unknown_gain unmapped_channel below_range above_range "
        "outside_expected spike rate_of_change flat_line open_circuit short_circuit loop_fault loop_marginal "
        "outside_model input_missing calibration_overdue time_out_of_order time_duplicate gap_before time_ambiguous"
    ).split()
    assert set(contract_reasons) <= set(meanings)


@pytest.mark.parametrize("gz", [False, True], ids=["plain", "gzip"])
def test_parquet_provenance(write_log, make_map, convert, gz):
    channels = [
        {**BENCH_CHANNELS[0], "description": "24 V rail through a divider",
         "calibration": {"points": [[1.0, 1.01], [3.0, 3.02]], "degree": 1, "date": dt.date(2026, 1, 1), "due": dt.date(2027, 1, 1)}},
        BENCH_CHANNELS[1],
        {**BENCH_CHANNELS[1], "from": dt.datetime(2026, 6, 1), "unit": "mA", "chain": [{"stage": "linear", "slope": 1000.0, "unit": "mA"}]},
    ]
    cmap = make_map(channels, BENCH_DERIVED, name="bench-rig")
    raw = write_log(good_lines(4), "day.csv.gz" if gz else "day.csv", gz=gz)
    _, out = convert(raw, cmap)
    info = json.loads(pq.read_schema(out.path).metadata[b"countmill"])
    assert info["version"] == countmill.__version__
    assert info["map"]["name"] == "bench-rig"
    assert info["map"]["sha256"] == hashlib.sha256(cmap.read_bytes()).hexdigest()
    assert info["source"]["name"] == raw.name
    # the source hash is over the bytes as stored: the compressed bytes for .gz
    assert info["source"]["sha256"] == hashlib.sha256(raw.read_bytes()).hexdigest()
    if gz:
        assert info["source"]["sha256"] != hashlib.sha256(gzip.decompress(raw.read_bytes())).hexdigest()
    supply = info["channels"]["supply"]
    assert {"id", "unit", "description", "chain", "calibration", "revisions"} <= set(supply)
    assert supply["id"] == 1 and supply["unit"] == "V" and supply["description"] == "24 V rail through a divider"
    assert supply["chain"][0]["stage"] == "linear"
    assert supply["calibration"]["points"] == [[1.0, 1.01], [3.0, 3.02]]
    assert supply["calibration"]["due"] == "2027-01-01"
    current = info["channels"]["current"]
    assert current["id"] == 2
    assert len(current["revisions"]) == 2
    assert [r["unit"] for r in current["revisions"]] == ["A", "mA"]
    assert "power" in info["channels"] and info["channels"]["power"]["unit"] == "W"


# --------------------------------------------------------------------------- CSV output


def test_csv_output_reads_back_in_pandas(write_log, bench_map, convert):
    lines = good_lines(4) + [(stamp(9), 99, 5, 0)]
    _, parquet = convert(write_log(lines), bench_map, "day.parquet")
    result, out = convert(write_log(lines), bench_map, "day.csv")
    assert result.exit_code == 0
    text = out.path.read_text().splitlines()
    df = out.df
    assert list(df.columns) == [f.name for f in pq.read_schema(parquet.path)] + ["flag_names"]
    # time: ISO 8601 in UTC with a Z, the same instants as the Parquet output
    assert all(t.endswith("Z") for t in df["time"])
    pd.testing.assert_series_equal(pd.to_datetime(df["time"], utc=True).dt.as_unit("us"), parquet.df["time"], check_names=False)
    # NaN and null are empty fields: the first power row has no current yet (input_missing)
    power = df[df["channel"] == "power"]
    assert np.isnan(power["value"].iloc[0]) and np.isnan(power["volts"].iloc[0])
    assert power["flag_names"].iloc[0] == "input_missing"
    first_power_line = text[2]
    assert ",,,," in first_power_line and "nan" not in first_power_line.lower()
    # numeric columns come back numeric
    for column in ("value", "volts", "quality", "flags", "line"):
        assert pd.api.types.is_numeric_dtype(df[column]), column
    np.testing.assert_allclose(df["value"], parquet.df["value"], equal_nan=True)
    assert df["quality"].tolist() == parquet.df["quality"].tolist()
    # flag_names spells out the flags bitmask, ';'-separated
    unmapped = df[df["channel_id"] == 99].iloc[0]
    assert unmapped["flag_names"] == "unmapped_channel" and pd.isna(unmapped["channel"])
    names = df["flag_names"].fillna("")
    for i in range(len(df)):
        assert sorted(n for n in names[i].split(";") if n) == sorted(out.names(i))


def test_csv_sidecar_is_csvw_with_flags_and_provenance(write_log, bench_map, convert, tmp_path):
    raw = write_log(good_lines(3))
    _, out = convert(raw, bench_map, "day.csv")
    sidecar = tmp_path / "day.csv-metadata.json"  # W3C CSVW: the file's URL + "-metadata.json"
    meta = json.loads(sidecar.read_text())
    assert meta["@context"] == "http://www.w3.org/ns/csvw"
    assert meta["url"] == "day.csv"
    columns = meta["tableSchema"]["columns"]
    assert [c["name"] for c in columns] == list(out.df.columns)
    assert all("datatype" in c for c in columns)
    by_name = {c["name"]: c for c in columns}
    assert by_name["time"]["datatype"] == "dateTime"
    assert by_name["value"]["datatype"] == "double"
    assert by_name["quality"]["flag_values"] == "1 2 3 4 9"
    assert by_name["quality"]["flag_meanings"] == "good not_evaluated suspect bad missing"
    assert by_name["flags"]["flag_masks"] and by_name["flags"]["flag_meanings"]
    provenance = meta["countmill"]
    assert provenance["source"]["sha256"] == hashlib.sha256(raw.read_bytes()).hexdigest()
    assert provenance["map"]["sha256"] == hashlib.sha256(bench_map.read_bytes()).hexdigest()
    assert provenance["channels"]["supply"]["unit"] == "V"
    assert provenance["channels"]["power"]["unit"] == "W"


def test_csv_with_no_rows_still_has_its_header(write_log, bench_map, convert):
    result, out = convert(write_log([], header=True), bench_map, "empty.csv")
    assert result.exit_code == 0
    assert len(out.df) == 0 and "flag_names" in out.df.columns


# --------------------------------------------------------------------------- what rows hold


def test_unmapped_channel_rows_are_kept(write_log, bench_map, convert):
    result, out = convert(write_log([(stamp(0), 1, 1000, 0), (stamp(1), 42, 1234, 2)]), bench_map)
    assert result.exit_code == 0
    row = out.df.iloc[-1]
    assert row["channel_id"] == 42 and row["code"] == 1234 and row["gain_code"] == 2
    last = out.table.slice(len(out.df) - 1)
    assert last.column("channel").null_count == 1 and last.column("unit").null_count == 1  # null, not ""
    assert np.isnan(row["value"]) and row["quality"] == 9
    assert out.names(len(out.df) - 1) == ["unmapped_channel"]


@pytest.mark.parametrize(
    "coding, span, code, volts, reasons, quality",
    [
        # 12-bit straight binary: valid codes 0 … 4095, the rails are the end codes (contract §4)
        ("straight", [0.0, 4.096], 2048, 2.048, [], 1),
        ("straight", [0.0, 4.096], 1, 0.001, [], 1),
        ("straight", [0.0, 4.096], 0, 0.0, ["saturated_low"], 4),
        ("straight", [0.0, 4.096], 4095, 4.095, ["saturated_high"], 4),
        ("straight", [0.0, 4.096], 4096, None, ["invalid_code"], 9),
        ("straight", [0.0, 4.096], -1, None, ["invalid_code"], 9),
        # 12-bit two's complement: codes -2048 … 2047 about mid-span
        ("twos", [-2.048, 2.048], 0, 0.0, [], 1),
        ("twos", [-2.048, 2.048], -1000, -1.0, [], 1),
        ("twos", [-2.048, 2.048], -2048, -2.048, ["saturated_low"], 4),
        ("twos", [-2.048, 2.048], 2047, 2.047, ["saturated_high"], 4),
        ("twos", [-2.048, 2.048], 2048, None, ["invalid_code"], 9),
        ("twos", [-2.048, 2.048], -2049, None, ["invalid_code"], 9),
        # bipolar span, straight (offset) binary: code 0 is the bottom of the span
        ("straight", [-2.048, 2.048], 2048, 0.0, [], 1),
    ],
)
def test_adc_codes_rails_and_invalid_codes(write_log, make_map, convert, coding, span, code, volts, reasons, quality):
    cmap = make_map([{"id": 1, "name": "v", "unit": "V", "chain": [{"stage": "linear", "slope": 1.0}]}],
                    adc={"bits": 12, "span": span, "coding": coding})
    result, out = convert(write_log([(stamp(0), 1, code, 0)]), cmap)
    assert result.exit_code == 0
    row = out.df.iloc[0]
    assert out.names(0) == reasons
    assert row["quality"] == quality
    assert row["code"] == code
    if volts is None:
        assert np.isnan(row["value"]) and np.isnan(row["volts"])
    else:
        assert row["value"] == pytest.approx(volts, abs=1e-12)


def test_gain_codes_divide_and_unknown_gain_is_missing(write_log, bench_map, convert):
    lines = [(stamp(0), 1, 2000, 0), (stamp(1), 1, 2000, 1), (stamp(2), 1, 2000, 2), (stamp(3), 1, 2000, 7)]
    _, out = convert(write_log(lines), bench_map)
    rows = out.channel_rows("supply")
    np.testing.assert_allclose(rows["volts"].iloc[:3], [2.0, 0.2, 0.02])
    last = rows.iloc[3]
    assert np.isnan(last["volts"]) and np.isnan(last["value"]) and last["quality"] == 9
    assert out.names(rows.index[3]) == ["unknown_gain"]


def test_eight_bit_adc_with_10_mv_per_degree_reads_one_code_per_degree(write_log, make_map, convert):
    # An 8-bit ADC over 0 … 2.56 V has a 10 mV LSB; a sensor giving 10 mV/degC then reads one
    # code per degree (common practice, no source). The channel carries its own [adc] table.
    cmap = make_map([
        {"id": 3, "name": "air", "unit": "degC", "chain": [{"stage": "linear", "slope": 100.0}],
         "adc": {"bits": 8, "span": [0.0, 2.56], "coding": "straight"}, "gains": {0: 1}},
    ])
    codes = list(range(1, 255))
    _, out = convert(write_log([(stamp(i), 3, c, 0) for i, c in enumerate(codes)]), cmap)
    np.testing.assert_allclose(out.df["value"], codes, rtol=0, atol=1e-9)
    assert set(out.df["quality"]) == {1}


def test_rtd_channel_in_degf(write_log, make_map, convert):
    # Pt100 at 1 mA excitation; a 24-bit ADC over 0 … 2.097152 V has a 0.125 uV LSB, so the
    # resistances below are hit exactly. Resistance -> temperature from IEC 60751
    # (Callendar-Van Dusen, A = 3.9083e-3, B = -5.775e-7): 100 ohm at 0 degC,
    # 119.397 ohm at 50 degC, 138.5055 ohm at 100 degC. degF = degC * 9/5 + 32 (definition).
    cmap = make_map([
        {"id": 5, "name": "hot_water", "unit": "degF",
         "chain": [{"stage": "current_excitation", "amps": 0.001}, {"stage": "rtd", "r0": 100.0}],
         "adc": {"bits": 24, "span": [0.0, 2.097152], "coding": "straight"}, "gains": {0: 1}},
    ])
    ohms = [100.0, 119.397125, 138.5055]
    codes = [round(r * 0.001 / 0.125e-6) for r in ohms]
    _, out = convert(write_log([(stamp(i), 5, c, 0) for i, c in enumerate(codes)]), cmap)
    np.testing.assert_allclose(out.df["value"], [32.0, 122.0, 212.0], atol=1e-3)
    assert out.df["unit"].tolist() == ["degF"] * 3


# --------------------------------------------------------------------------- check, describe


def test_check_lists_channels_and_gain_codes(write_log, bench_map, run_cli):
    lines = [(stamp(0), 1, 100, 0), (stamp(1), 1, 100, 0), (stamp(2), 1, 100, 1), (stamp(3), 2, 100, 7), (stamp(4), 77, 1, 0), "junk"]
    raw = write_log(lines, header=True)
    result = run_cli("check", bench_map, raw)
    assert result.exit_code == 0, result.output
    out = result.output
    assert "ok" in out.splitlines()[0]
    assert "6 data lines" in out and "1 unreadable" in out
    table = {tuple(line.split()[:3]): line for line in out.splitlines()[2:]}
    assert table[("1", "supply", "0")].split()[4] == "2"  # two records at gain code 0
    assert table[("1", "supply", "1")].split()[3] == "10.0"
    assert "unknown gain" in table[("2", "current", "7")]
    assert "unmapped" in table[("77", "-", "0")]


def test_check_without_raw_validates_the_map(bench_map, write_map, run_cli):
    assert run_cli("check", bench_map).exit_code == 0
    broken = write_map('[map]\nname = "x"\n', "broken.toml")
    result = run_cli("check", broken)
    assert result.exit_code == 2 and "broken.toml" in result.output


def test_describe_shows_units_steps_revisions_calibration_and_cold_junction(make_map, run_cli):
    cmap = make_map([
        {"id": 0, "name": "terminal", "unit": "degC", "chain": [{"stage": "linear", "slope": 100.0, "intercept": -50.0}]},
        {"id": 4, "name": "kettle", "unit": "degF", "description": "kettle wall",
         "chain": [{"stage": "thermocouple", "type": "K", "cold_junction": "terminal"}],
         "calibration": {"points": [[20.0, 20.3], [98.0, 98.4]], "degree": 1, "date": dt.date(2026, 5, 1), "due": dt.date(2027, 5, 1)}},
        {"id": 4, "name": "kettle", "unit": "degC", "from": dt.datetime(2026, 11, 3, 14, 0),
         "chain": [{"stage": "thermocouple", "type": "J", "cold_junction": "terminal"}]},
        {"id": 6, "name": "mash", "unit": "degC",
         "chain": [{"stage": "current_excitation", "amps": 0.001}, {"stage": "rtd"}]},
    ])
    result = run_cli("describe", cmap)
    assert result.exit_code == 0, result.output
    text = result.output
    assert "revision 1 of 2" in text and "revision 2 of 2" in text and "2026-11-03T14:00:00" in text
    assert "due 2027-05-01" in text
    assert "'terminal'" in text.split("channel 4")[1]  # the thermocouple names its cold junction
    mash = text.split("channel 6 'mash'")[1]
    steps = [line.strip() for line in mash.splitlines() if line.strip()[:2] in ("1.", "2.", "3.", "4.")]
    assert [s.rsplit("→", 1)[1].strip() for s in steps] == ["V at the ADC", "V at the amplifier input", "ohm", "degC"]
    kettle = text.split("channel 4 'kettle' [degF]")[1].split("channel 4")[0]
    assert "→ degC" in kettle and "degC → degF" in kettle
