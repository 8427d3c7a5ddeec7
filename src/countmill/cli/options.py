"""Option decorators shared by several commands."""

from __future__ import annotations

import click

map_option = click.option(
    "--map",
    "map_path",
    required=True,
    type=click.Path(dir_okay=False, path_type=str),
    help="Channel map (TOML).",
)
chunk_rows_option = click.option(
    "--chunk-rows",
    type=click.IntRange(min=1),
    default=250_000,
    show_default=True,
    help="Records per streaming chunk; the output does not depend on it.",
)
quiet_option = click.option("--quiet", "-q", is_flag=True, help="No progress bar and no summary.")
