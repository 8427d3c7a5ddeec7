"""``countmill report``."""

from __future__ import annotations

from pathlib import Path

import click


@click.command("report")
@click.argument("converted", type=click.Path(dir_okay=False, path_type=Path))
@click.option("-o", "--output", required=True, type=click.Path(dir_okay=False, path_type=Path), help="The HTML page to write.")
@click.option("--quiet", "-q", is_flag=True, help="Print nothing on success.")
def report_command(converted, output, quiet):
    """Write a day report of CONVERTED (a tidy .parquet or .csv from countmill convert).

    One self-contained HTML page: the file's provenance, a summary table per channel,
    per channel a plot over the period with suspect and bad samples marked and the
    limits drawn, the ADC codes and gain codes used with advice, and the safety cautions.

    \b
    Example:
      countmill report demo_out/brewhouse-2026-11-03.parquet -o demo_out/report.html
    """
    from countmill.report import write_report

    result = write_report(converted, output)
    if not quiet:
        advised = f"; ADC advice for {', '.join(result.advice)}" if result.advice else ""
        click.echo(f"{converted.name}: {result.channels} channels, {result.rows} rows -> {result.output}{advised}", err=True)
