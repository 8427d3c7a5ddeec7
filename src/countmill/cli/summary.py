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
        for label, event in _grouped(result.flag_events):
            click.echo(f"{label:<22} {event['flag']:<20} {event['count']:>7}  {event['first'][:19]} … {event['last'][:19]}")


def _grouped(events: list[dict]):
    """One line per channel and reason; the same event on many channels (a clock step seen
    by every channel) is one line, so the summary stays on one screen."""
    shared: dict[tuple, list[str]] = {}
    for event in events:
        key = (event["flag"], event["count"], event["first"][:19], event["last"][:19])
        shared.setdefault(key, []).append(event["channel"] if event["channel"] is not None else "(unmapped)")
    shown = set()
    for event in events:
        key = (event["flag"], event["count"], event["first"][:19], event["last"][:19])
        channels = shared[key]
        if len(channels) >= 3:
            if key not in shown:
                shown.add(key)
                yield f"({len(channels)} channels)", event
        else:
            yield (event["channel"] if event["channel"] is not None else "(unmapped)"), event
