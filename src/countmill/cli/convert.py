"""``countmill convert``."""

from __future__ import annotations

import sys
from pathlib import Path

import click

from countmill.cli.options import chunk_rows_option, map_option, quiet_option
from countmill.cli.summary import print_summary
from countmill.errors import CountmillError, UsageError


@click.command("convert")
@click.argument("raw", nargs=-1, required=True, type=click.Path(dir_okay=False, path_type=Path))
@map_option
@click.option("-o", "--output", "output", type=click.Path(path_type=Path), help="Output file (.parquet or .csv); with several RAW files, a folder.")
@chunk_rows_option
@click.option("--layout", type=click.Choice(["tidy", "wide"]), default="tidy", show_default=True, help="One row per record (tidy) or one row per time bin (wide).")
@click.option("--every", default=None, help="Bin width for --layout wide, e.g. 1s, 10s, 1min.")
@click.option("--summary", is_flag=True, help="Print rows, rejects and quality counts per channel.")
@quiet_option
def convert_command(raw, map_path, output, chunk_rows, layout, every, summary, quiet):
    """Convert raw logger files RAW... to engineering units.

    The output suffix picks the format: .parquet (default) or .csv (with a CSVW
    -metadata.json sidecar). Lines that cannot be read go to OUT.rejects.csv.

    \b
    Example:
      countmill convert day.csv --map brewhouse.toml -o day.parquet --summary
    """
    from countmill.chanmap import load_map
    from countmill.convert import convert_file, default_output

    cmap = load_map(map_path)
    if layout == "wide" and not every:
        raise UsageError("--layout wide needs --every, e.g. --every 1min")
    targets = []
    if len(raw) > 1 and output is not None and not output.is_dir():
        raise UsageError("with several RAW files, -o must be an existing folder")
    for path in raw:
        if output is None:
            targets.append((path, default_output(path)))
        elif output.is_dir():
            targets.append((path, output / default_output(path).name))
        else:
            targets.append((path, output))

    worst = 0
    for path, out in targets:
        show_bar = not quiet and sys.stderr.isatty()
        try:
            if show_bar:
                with click.progressbar(length=max(path.stat().st_size, 1), label=path.name, file=sys.stderr, show_pos=False) as bar:
                    last = [0]

                    def progress(done, total, bar=bar, last=last):
                        bar.update(done - last[0])
                        last[0] = done

                    result = convert_file(path, cmap, out, chunk_rows=chunk_rows, layout=layout, every=every, progress=progress)
            else:
                result = convert_file(path, cmap, out, chunk_rows=chunk_rows, layout=layout, every=every)
        except CountmillError as exc:
            if len(targets) == 1:
                raise
            click.echo(f"countmill: {exc}", err=True)
            worst = max(worst, exc.exit_code) if exc.exit_code != 2 else 2
            continue
        if summary and not quiet:
            print_summary(result)
        elif not quiet:
            note = f", {result.rejects} rejected (see {result.rejects_path})" if result.rejects else ""
            click.echo(f"{path.name}: {result.rows} rows -> {result.output}{note}", err=True)
        for line in getattr(result, "notes", ()):  # e.g. wide layout: samples too late for their bin
            click.echo(f"countmill: note: {line}", err=True)
        worst = max(worst, result.exit_code) if worst != 1 else 1
    sys.exit(worst)
