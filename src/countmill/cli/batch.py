"""``countmill batch`` (nightly conversion of an inbox)."""

from __future__ import annotations

import click

from countmill.errors import UsageError


@click.command("batch")
@click.argument("inbox", type=click.Path(file_okay=False, path_type=str))
@click.option("--map", "map_path", required=True)
@click.option("--out", "out_dir", required=True)
def batch_command(inbox, map_path, out_dir):
    """Convert every new raw file in INBOX (not yet available)."""
    raise UsageError("batch is not available yet")
