"""One-screen summary of a conversion."""

from __future__ import annotations

import click

from countmill.flags import Quality

LEVELS = [(Quality.GOOD, "good"), (Quality.NOT_EVALUATED, "n/e"), (Quality.SUSPECT, "suspect"), (Quality.BAD, "bad"), (Quality.MISSING, "missing")]


def print_summary(result) -> None:
    click.echo(f"source   {result.source}  (sha256 {result.source_sha256[:12]}…)")
    click.echo(f"output   {result.output}")
    click.echo(f"lines    {result.data_lines} data lines: {result.records} records, {result.rejects} rejected")
    if result.rejects_path:
        click.echo(f"rejects  {result.rejects_path}")
    click.echo(f"rows     {result.rows} (derived rows included)")
    click.echo("")
    header = f"{'channel':<22}" + "".join(f"{label:>9}" for _, label in LEVELS)
    click.echo(header)
    click.echo("-" * len(header))
    for name, counts in result.quality_counts.items():
        label = name if name is not None else "(unmapped)"
        click.echo(f"{label:<22}" + "".join(f"{counts.get(int(q), 0):>9}" for q, _ in LEVELS))
    if result.flag_events:
        click.echo("")
        click.echo(f"{'channel':<22} {'reason':<20} {'count':>7}  first … last (UTC)")
        click.echo("-" * 96)
        for event in result.flag_events:
            label = event["channel"] if event["channel"] is not None else "(unmapped)"
            click.echo(f"{label:<22} {event['flag']:<20} {event['count']:>7}  {event['first'][:19]} … {event['last'][:19]}")
