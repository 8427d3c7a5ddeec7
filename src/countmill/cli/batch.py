"""``countmill batch``: nightly conversion of an inbox (the library is :mod:`countmill.batch`)."""

from __future__ import annotations

import signal
import sys
from pathlib import Path

import click

from countmill.cli.options import chunk_rows_option

EPILOG = """\b
Exit codes:
  0  every new file converted, or nothing to do (files left settling included)
  3  converted; some lines were rejected (see DIR/NAME.parquet.rejects.csv)
  1  at least one file failed (the others were converted); see DIR/batch-summary.json
  2  usage or channel-map error: nothing converted
  4  another run holds DIR/.countmill-batch.lock: this run did nothing

\b
Example (crontab, 02:15 every night):
  15 2 * * *  countmill batch /data/inbox --map /etc/countmill/brewhouse.toml --out /data/converted -q
"""


@click.command("batch", epilog=EPILOG)
@click.argument("inbox", type=click.Path(file_okay=False, path_type=Path))
@click.option("--map", "map_path", type=click.Path(dir_okay=False, path_type=Path), help="One channel map for the inbox.")
@click.option(
    "--maps", "maps_dir", type=click.Path(file_okay=False, path_type=Path),
    help='A folder of maps (*.toml); each chooses its files with [map] files = "GLOB".',
)
@click.option(
    "--out", "out_dir", required=True, type=click.Path(file_okay=False, path_type=Path),
    help="Output folder: outputs, manifest, lock and summaries.",
)
@click.option(
    "--settle", type=click.FloatRange(min=0), metavar="SECONDS", default=120.0, show_default=True,
    help="Leave files changed less than this many seconds ago for the next run.",
)
@click.option("--workers", type=click.IntRange(min=1), default=1, show_default=True, help="Files converted in parallel by local processes.")
@click.option(
    "--cluster", metavar="ADDRESS", default=None,
    help="Dask scheduler (e.g. tcp://10.0.0.5:8786): one task per file; storage must be shared.",
)
@click.option(
    "--pattern", "patterns", multiple=True, metavar="GLOB",
    help="Raw file names to take (repeatable); default: the map's [map] files, else *.csv *.tsv *.txt *.log and their .gz.",
)
@click.option("--rehash", is_flag=True, help="Hash every file again instead of trusting the manifest's cache (size, mtime, ctime, inode).")
@chunk_rows_option
@click.option("--quiet", "-q", is_flag=True, help="Print only failures (for cron mail).")
def batch_command(inbox, map_path, maps_dir, out_dir, settle, workers, cluster, patterns, rehash, chunk_rows, quiet):
    """Convert every raw file in INBOX not yet converted into DIR/NAME.parquet.

    Files are known by the SHA-256 of their bytes, recorded in DIR/batch-manifest.sqlite:
    a second run converts nothing; a changed file or a changed map converts again (the old
    output stays until the new one is complete). One line per file goes to stderr, and a
    JSON report to DIR/batch-summary.json (and DIR/summaries/). With -q only failures are
    printed. Details: docs/batch.md.
    """
    from countmill.batch import BatchOptions, run_batch

    def log(line: str) -> None:
        if not quiet or "FAILED" in line or line.startswith("batch: error"):
            click.echo(line, err=True)

    options = BatchOptions(
        inbox=inbox, out_dir=out_dir, map_path=map_path, maps_dir=maps_dir, settle=settle, workers=workers,
        cluster=cluster, chunk_rows=chunk_rows, patterns=tuple(patterns), rehash=rehash,
    )
    # systemd stops a service with SIGTERM: stop converting, clean up, write the summary
    previous = signal.signal(signal.SIGTERM, _interrupt)
    try:
        report = run_batch(options, log=log)
    finally:
        signal.signal(signal.SIGTERM, previous)
    sys.exit(report.exit_code)


def _interrupt(signum, frame):
    raise KeyboardInterrupt
