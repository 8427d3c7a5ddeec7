"""``countmill report``."""

from __future__ import annotations

import click

from countmill.errors import UsageError


@click.command("report")
@click.argument("converted")
@click.option("-o", "--output", required=True)
def report_command(converted, output):
    """Write a day report (not yet available)."""
    raise UsageError("report is not available yet")
