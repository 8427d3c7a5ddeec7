#!/usr/bin/env python3
"""countmill's speed and memory, measured side by side in one run.

    python benchmarks/run.py                  # 3 million lines, 5 rounds (make bench)
    python benchmarks/run.py --lines 10000000 --repeat 3
    python benchmarks/run.py --quick          # tiny files, one round: a smoke test

What is measured, on seeded logs of the demo brewhouse logger (``demo_logs/make_day.py``
with a 0.01 s scan and no planted faults: 19 channels, linear, RTD, thermistor, type K
and T thermocouples on a cold-junction channel, dividers, bridge, load cell, 4-20 mA
loops, a derived channel; ISO local times with milliseconds), cached in
``benchmarks/data/`` (git-ignored):

* ``convert``: ``countmill.convert.convert_file`` to Parquet, in this process;
* ``convert_large`` / ``transcode_large``: the same two on the file four times as long
  (12 million lines by default: the contract compares them on ten million or more);
* ``transcode``: the floor, a plain Arrow transcode of the same file:
  ``pyarrow.csv.open_csv`` streaming with explicit column types into a
  ``pyarrow.parquet.ParquetWriter`` with the same compression (zstd);
* ``convert_io``: ``countmill convert`` with the converter left out (records pass through
  as read; same reader, hash, summary counts and Parquet writer): countmill's reading and
  writing alone, so that convert / transcode splits into that and the conversion's share;
* ``convert binary``: the same records as fixed-size little-endian binary records;
* ``read text`` / ``read binary``: the readers alone (records out, nothing converted);
* the script a user would otherwise write: pandas ``read_csv`` plus a per-row Python
  function (``DataFrame.apply(axis=1)``: ADC code to volts, gain, linear / RTD /
  thermistor / loop maths) and ``to_parquet``, timed on two slices (one twice as long as
  the other) and scaled to the file: the difference gives the cost per line, what is left
  is fixed and counted once;
* the CLI start-up (``countmill convert`` of a 100-line file, as its own process);
* peak resident memory of each conversion in its own process, at two file sizes four times
  apart (``os.wait4`` gives the child's own ``ru_maxrss``);
* a thermocouple channel against a linear channel: the converter's cost per record on
  chunks that differ only in that channel, and the same end to end (``countmill convert``
  of logs that differ only in that channel).

The timed steps run interleaved (round after round, the order rotating), and the medians
are reported, so a busy machine slows every step alike. The table is printed and written to
``benchmarks/results.json`` with the machine, versions and date.
"""

from __future__ import annotations

import argparse
import datetime as dt
import gc
import json
import os
import platform
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parent))
from workloads import (  # noqa: E402 (the sibling module, whichever folder this runs from)
    MAP,
    ROOT,
    SCAN_S,
    binary_map,
    data_files,
    per_row_params,
    per_row_script,
    step_convert,
    step_convert_io,
    step_read,
    step_transcode,
    tc_vs_linear,
    tc_vs_linear_files,
    write_slice,
)

# --- child processes: peak memory and start-up -------------------------------------------------

def child(argv: list[str]) -> None:
    """``run.py --child STEP ARGS...``: one step in a process of its own; prints its peak
    resident memory in KiB as the last line."""
    step, *rest = argv
    if step == "convert":
        step_convert(Path(rest[0]), rest[1], Path(rest[2]))
    elif step == "transcode":
        step_transcode(Path(rest[0]), Path(rest[1]))
    elif step == "generate":
        data_files(Path(rest[0]), int(rest[1]))
    elif step == "tc_vs_linear":
        print(json.dumps(tc_vs_linear(Path(rest[0]), int(rest[1]), int(rest[2]))))
    else:
        raise SystemExit(f"unknown child step {step}")
    print(own_peak_rss_kib())


def own_peak_rss_kib() -> int:
    """This process's peak resident set since it started (Linux ``VmHWM``).

    ``ru_maxrss`` of a child also counts the memory of the parent it was forked from, so
    each child reads its own high-water mark instead.
    """
    try:
        for line in Path("/proc/self/status").read_text().splitlines():
            if line.startswith("VmHWM:"):
                return int(line.split()[1])
    except OSError:
        pass
    import resource

    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss


def run_child(args: list[str]) -> dict:
    """Wall and CPU seconds and peak RSS (MiB) of ``args`` run as a child process."""
    start = time.perf_counter()
    proc = subprocess.Popen(args, stdout=subprocess.PIPE, stderr=subprocess.PIPE)
    out, err = proc.communicate()
    wall = time.perf_counter() - start
    if proc.returncode not in (0, 3):
        raise SystemExit(f"{' '.join(map(str, args))} failed ({proc.returncode}):\n{err.decode(errors='replace')}")
    last = out.decode().strip().splitlines()[-1:] or ["0"]
    return {"wall_s": wall, "peak_rss_mib": int(last[0]) / 1024}


def peak_memory(files: dict[int, dict[str, Path]], binmap: Path, out: Path) -> dict:
    me = [sys.executable, str(Path(__file__).resolve()), "--child"]
    result = {}
    for lines, paths in sorted(files.items()):
        result[str(lines)] = {
            "convert": run_child(me + ["convert", str(paths["csv"]), str(MAP), str(out / "mem.parquet")]),
            "convert_binary": run_child(me + ["convert", str(paths["binary"]), str(binmap), str(out / "mem-bin.parquet")]),
            "transcode": run_child(me + ["transcode", str(paths["csv"]), str(out / "mem-tc.parquet")]),
        }
    return result


def cli_startup(csv: Path, out: Path) -> dict:
    """Wall seconds of ``countmill convert`` on a 100-line file, as its own process."""
    tiny = write_slice(csv, 100, out / "tiny.csv")
    exe = Path(sys.executable).with_name("countmill")
    command = [str(exe)] if exe.exists() else [sys.executable, "-m", "countmill.cli"]
    walls = []
    for _ in range(3):
        start = time.perf_counter()
        done = subprocess.run(command + ["convert", str(tiny), "--map", str(MAP), "-o", str(out / "tiny.parquet"), "-q"],
                              capture_output=True)
        walls.append(time.perf_counter() - start)
        if done.returncode not in (0, 3):
            raise SystemExit(f"countmill convert failed ({done.returncode}):\n{done.stderr.decode(errors='replace')}")
    return {"lines": 100, "wall_s": statistics.median(walls)}


# --- the report -------------------------------------------------------------------------------

def machine() -> dict:
    import pandas
    import pyarrow

    import countmill

    cpu = ""
    try:
        for line in Path("/proc/cpuinfo").read_text().splitlines():
            if line.startswith("model name"):
                cpu = line.split(":", 1)[1].strip()
                break
    except OSError:
        pass
    try:
        mem_gib = os.sysconf("SC_PAGE_SIZE") * os.sysconf("SC_PHYS_PAGES") / 2**30
    except (ValueError, OSError):
        mem_gib = None
    try:
        commit = subprocess.run(["git", "-C", str(ROOT), "rev-parse", "--short", "HEAD"], capture_output=True,
                                text=True, timeout=10).stdout.strip() or None
    except OSError:
        commit = None
    return {
        "cpu": cpu,
        "cores": len(os.sched_getaffinity(0)) if hasattr(os, "sched_getaffinity") else os.cpu_count(),
        "memory_gib": round(mem_gib, 1) if mem_gib else None,
        "platform": platform.platform(),
        "python": platform.python_version(),
        "numpy": np.__version__,
        "pyarrow": pyarrow.__version__,
        "pandas": pandas.__version__,
        "countmill": countmill.__version__,
        "commit": commit,
        "load_average": list(os.getloadavg()),
    }


def med(values: list[float]) -> float:
    return statistics.median(values)


def main(argv: list[str] | None = None) -> int:
    argv = sys.argv[1:] if argv is None else argv
    if argv[:1] == ["--child"]:
        child(argv[1:])
        return 0
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0],
                                     epilog="example: python benchmarks/run.py --lines 3000000 --repeat 5")
    parser.add_argument("--lines", type=int, default=3_000_000, help="data lines of the benchmark file (default 3,000,000)")
    parser.add_argument("--repeat", type=int, default=None, help="rounds of the timed steps (default 5; 1 with --quick)")
    parser.add_argument("--quick", action="store_true", help="tiny files, one round: checks that the harness runs")
    parser.add_argument("--data", type=Path, default=ROOT / "benchmarks" / "data", help="cache of generated logs")
    parser.add_argument("--out", type=Path, default=ROOT / "benchmarks" / "results.json", help="results file")
    parser.add_argument("--slice", type=int, default=None, help="lines of the per-row pandas slice (default 20,000)")
    args = parser.parse_args(argv)
    lines = 20_000 if args.quick else args.lines
    repeat = args.repeat or (1 if args.quick else 5)
    slice_rows = args.slice or (1_000 if args.quick else 20_000)

    from countmill.chanmap import load_map
    from countmill.convert import DEFAULT_CHUNK_ROWS

    started = dt.datetime.now(dt.timezone.utc)
    info = machine()
    args.data.mkdir(parents=True, exist_ok=True)
    me = [sys.executable, str(Path(__file__).resolve()), "--child"]
    for n in (lines, 4 * lines):  # generated in a child: this process stays small
        if not (args.data / f"lines-{n}").exists():
            print(f"generating {n:,} lines in {args.data} (once; cached) ...", file=sys.stderr)
        run_child(me + ["generate", str(args.data), str(n)])
    files = {n: data_files(args.data, n) for n in (lines, 4 * lines)}
    main_files = files[lines]
    binmap_path = binary_map(args.data)
    cmap, binmap = load_map(MAP), load_map(binmap_path)
    size_mb = main_files["csv"].stat().st_size / 1e6
    binary_mb = main_files["binary"].stat().st_size / 1e6

    with tempfile.TemporaryDirectory(prefix="countmill-bench-") as tmp:
        out = Path(tmp)
        csv, binary = main_files["csv"], main_files["binary"]
        large_csv = files[4 * lines]["csv"]
        csv_slice = write_slice(csv, slice_rows, out / "slice.csv")
        csv_slice_2 = write_slice(csv, 2 * slice_rows, out / "slice-2.csv")
        params = per_row_params(MAP)
        steps = {
            "convert": lambda: step_convert(csv, cmap, out / "convert.parquet"),
            "transcode": lambda: step_transcode(csv, out / "transcode.parquet"),
            # countmill's reading and writing alone (records pass through unconverted)
            "convert_io": lambda: step_convert_io(csv, cmap, out / "convert-io.parquet"),
            "convert_binary": lambda: step_convert(binary, binmap, out / "binary.parquet"),
            "read_text": lambda: step_read(csv, cmap.input, cmap.timezone),
            "read_binary": lambda: step_read(binary, binmap.input, binmap.timezone),
            "per_row_slice": lambda: per_row_script(csv_slice, params, out / "per-row.parquet"),
            # twice the slice: the per-line cost is the difference, what is left of the first
            # slice's time is fixed (reading the map, starting pandas' machinery, the file)
            "per_row_slice_2": lambda: per_row_script(csv_slice_2, params, out / "per-row-2.parquet"),
            # the contract's own terms: a file of ten million lines or more
            "convert_large": lambda: step_convert(large_csv, cmap, out / "convert-large.parquet"),
            "transcode_large": lambda: step_transcode(large_csv, out / "transcode-large.parquet"),
        }
        wall: dict[str, list[float]] = {k: [] for k in steps}
        cpu: dict[str, list[float]] = {k: [] for k in steps}
        counts: dict[str, int] = {}
        names = list(steps)
        for round_ in range(repeat):
            for k in range(len(names)):
                name = names[(k + round_) % len(names)]
                gc.collect()
                c0, w0 = time.process_time(), time.perf_counter()
                counts[name] = steps[name]()
                wall[name].append(time.perf_counter() - w0)
                cpu[name].append(time.process_time() - c0)
            print(f"round {round_ + 1}/{repeat}: " + ", ".join(f"{n} {wall[n][-1]:.2f}s" for n in names), file=sys.stderr)

        data_lines = lines
        same = (counts["transcode"] == counts["read_text"] == counts["read_binary"] == lines
                and counts["convert"] == counts["convert_binary"] and counts["transcode_large"] == 4 * lines
                and counts["convert_io"] == lines)
        if not same:
            raise SystemExit(f"the steps did not see the same records: {counts}")
        # The converter comparison times small arrays (13,157 records), whose temporaries
        # cost more on a heap churned by the big conversions above (about +0.1 on the ratio
        # when run in this process afterwards): it runs in a fresh process of its own.
        records = 20_000 if args.quick else 2 * (DEFAULT_CHUNK_ROWS // len(cmap.channels))
        tc = json.loads(subprocess.run(me + ["tc_vs_linear", str(out), str(records), str(repeat)], capture_output=True,
                                       text=True, check=True).stdout.strip().splitlines()[-2])
        tc["end_to_end"] = tc_vs_linear_files(args.data, 20_000 if args.quick else 1_000_000, repeat)
        memory = peak_memory(files, binmap_path, out)
        startup = cli_startup(csv, out)

    m = {k: med(v) for k, v in wall.items()}
    per_round = [c / t for c, t in zip(wall["convert"], wall["transcode"])]
    small, large = str(lines), str(4 * lines)
    rss_small = memory[small]["convert"]["peak_rss_mib"]
    rss_large = memory[large]["convert"]["peak_rss_mib"]
    slice_lines, slice_lines_2 = counts["per_row_slice"], counts["per_row_slice_2"]
    per_line_s = (m["per_row_slice_2"] - m["per_row_slice"]) / (slice_lines_2 - slice_lines)
    fixed_s = m["per_row_slice"] - slice_lines * per_line_s
    if per_line_s <= 0 or fixed_s < 0:  # noise larger than the difference: plain scaling
        per_line_s, fixed_s = m["per_row_slice"] / slice_lines, 0.0
    per_row_s = fixed_s + data_lines * per_line_s
    results = {
        "date": started.isoformat(timespec="seconds"),
        "command": "python benchmarks/run.py " + " ".join(argv),
        "machine": info,
        "file": {"lines": data_lines, "csv_mb": round(size_mb, 1), "binary_mb": round(binary_mb, 1),
                 "rows_out": counts["convert"], "scan_s": SCAN_S, "channels": len(cmap.channels)},
        "large_file": {"lines": 4 * data_lines, "rows_out": counts["convert_large"]},
        "repeat": repeat,
        "seconds_median": m,
        "seconds_all": wall,
        "cpu_seconds_median": {k: med(v) for k, v in cpu.items()},
        "per_row_script": {"slice_lines": [slice_lines, slice_lines_2], "fixed_seconds": fixed_s,
                           "seconds_per_line": per_line_s, "scaled_seconds": per_row_s},
        "memory": memory,
        "cli_startup": startup,
        "thermocouple_vs_linear": tc,
        "ratios": {
            "convert_over_transcode": m["convert"] / m["transcode"],
            "convert_over_transcode_per_round_median": med(per_round),
            "convert_over_transcode_large_file": m["convert_large"] / m["transcode_large"],
            # the profile in two numbers: countmill's input and output alone, and what the
            # conversion adds to them
            "convert_io_over_transcode": m["convert_io"] / m["transcode"],
            "convert_over_convert_io": m["convert"] / m["convert_io"],
            "per_row_script_over_convert": per_row_s / m["convert"],
            "csv_convert_over_binary_convert": m["convert"] / m["convert_binary"],
            "csv_read_over_binary_read": m["read_text"] / m["read_binary"],
            "peak_rss_growth_4x": rss_large / rss_small - 1,
            "thermocouple_over_linear": tc["thermocouple_over_linear"],
        },
        "targets": {
            "convert_over_transcode": "<= 1.3",
            "per_row_script_over_convert": ">= 50",
            "peak_rss_mib": "<= 512",
            "peak_rss_growth_4x": "< 0.20",
            "csv_over_binary": ">= 2",
            "thermocouple_over_linear": "<= 2",
        },
    }
    results["machine"]["load_average_end"] = list(os.getloadavg())
    args.out.parent.mkdir(parents=True, exist_ok=True)
    args.out.write_text(json.dumps(results, indent=2) + "\n")
    print_table(results)
    print(f"\nwritten {args.out}")
    return 0


def print_table(r: dict) -> None:
    m, ratios, f = r["seconds_median"], r["ratios"], r["file"]
    mem = r["memory"]
    small, large = sorted(mem, key=int)
    print(f"\ncountmill benchmark  {r['date']}  {r['machine']['cpu']} ({r['machine']['cores']} cores)")
    print(f"file: {f['lines']:,} lines, {f['csv_mb']} MB CSV / {f['binary_mb']} MB binary -> {f['rows_out']:,} rows;"
          f" median of {r['repeat']} interleaved rounds")
    print(f"{'step':<28}{'wall s':>9}{'CPU s':>9}")
    for name in ("transcode", "convert_io", "convert", "convert_binary", "read_text", "read_binary", "transcode_large",
                 "convert_large"):
        print(f"{name:<28}{m[name]:>9.3f}{r['cpu_seconds_median'][name]:>9.3f}")
    pr = r["per_row_script"]
    print(f"{'per-row pandas (scaled)':<28}{pr['scaled_seconds']:>9.1f}"
          f"   (slices of {pr['slice_lines'][0]:,} / {pr['slice_lines'][1]:,} lines: {m['per_row_slice']:.2f} /"
          f" {m['per_row_slice_2']:.2f} s; {pr['seconds_per_line'] * 1e6:.1f} us per line + {pr['fixed_seconds']:.2f} s)")
    print(f"{'CLI start-up (100 lines)':<28}{r['cli_startup']['wall_s']:>9.3f}")
    print(f"\n{'peak RSS MiB':<28}{small + ' lines':>16}{large + ' lines':>18}")
    for name in ("convert", "convert_binary", "transcode"):
        print(f"{name:<28}{mem[small][name]['peak_rss_mib']:>16.0f}{mem[large][name]['peak_rss_mib']:>18.0f}")
    tc = r["thermocouple_vs_linear"]
    print(f"\nper record in the converter: linear {tc['linear_us_per_record']:.3f} us, type K "
          f"{tc['thermocouple_us_per_record']:.3f} us; whole chunk with type K / with linear "
          f"{tc['chunk_with_type_k_over_chunk_with_linear']:.2f}")
    ee = tc["end_to_end"]
    print(f"per added line, whole conversion: linear {ee['linear_us_per_line']:.3f} us, type K "
          f"{ee['thermocouple_us_per_line']:.3f} us ({ee['thermocouple_over_linear']:.2f}x); "
          f"file with type K / file with linear {ee['file_with_type_k_over_file_with_linear']:.2f}")
    print("\nratios (target)")
    targets = r["targets"]
    print(f"  convert / transcode            {ratios['convert_over_transcode']:8.2f}   ({targets['convert_over_transcode']})")
    print(f"  same, {r['large_file']['lines']:,} lines{'':<4}{ratios['convert_over_transcode_large_file']:8.2f}")
    print(f"  I/O alone / transcode          {ratios['convert_io_over_transcode']:8.2f}   (convert_io: no conversion)")
    print(f"  convert / I/O alone            {ratios['convert_over_convert_io']:8.2f}")
    print(f"  per-row pandas / convert       {ratios['per_row_script_over_convert']:8.1f}   ({targets['per_row_script_over_convert']})")
    print(f"  CSV / binary, convert          {ratios['csv_convert_over_binary_convert']:8.2f}   ({targets['csv_over_binary']})")
    print(f"  CSV / binary, reader alone     {ratios['csv_read_over_binary_read']:8.2f}")
    print(f"  peak RSS growth at 4x lines    {ratios['peak_rss_growth_4x'] * 100:7.1f} %  ({targets['peak_rss_growth_4x']})")
    tco = ratios["thermocouple_over_linear"]
    print(f"  thermocouple / linear channel  {tco:8.2f}   ({targets['thermocouple_over_linear']})" if tco is not None else "")


if __name__ == "__main__":
    sys.exit(main())
