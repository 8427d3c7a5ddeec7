"""The ``countmill`` command line: a thin layer over the library.

Library errors (:class:`countmill.errors.CountmillError`) become one clear message and the
contract's exit code; anything unexpected is reported in one line with exit code 1.
"""

from __future__ import annotations

import sys

import click

from countmill import __version__
from countmill.cli.batch import batch_command
from countmill.cli.convert import convert_command
from countmill.cli.mapinfo import check_command, describe_command
from countmill.cli.report import report_command
from countmill.errors import CountmillError

EPILOG = """\b
Exit codes:
  0  converted; every line became a row
  3  converted; some lines were rejected (see the rejects file)
  2  usage or channel-map error: nothing written
  1  failed (I/O error, corrupt input): nothing left at the final path
  4  (batch) another run holds the output folder's lock

\b
Example:
  countmill convert day.csv --map channel_maps/brewhouse.toml -o day.parquet
"""


class _Failure(click.ClickException):
    """A library error on its way out of a command: its message and the contract's exit code."""

    def __init__(self, error: CountmillError):
        super().__init__(str(error))
        self.exit_code = error.exit_code

    def show(self, file=None) -> None:
        click.echo(f"countmill: {self.format_message()}", err=True)


class _Group(click.Group):
    """Turns :class:`CountmillError` raised by any command into a clean message and exit code,
    so ``cli`` behaves the same whether run from the console script or embedded (CliRunner)."""

    def invoke(self, ctx: click.Context):
        try:
            return super().invoke(ctx)
        except CountmillError as exc:
            raise _Failure(exc) from None


@click.group(cls=_Group, epilog=EPILOG, context_settings={"help_option_names": ["-h", "--help"]})
@click.version_option(__version__, prog_name="countmill")
def cli() -> None:
    """Turn data-logger raw codes into engineering units with quality flags."""


cli.add_command(convert_command)
cli.add_command(check_command)
cli.add_command(describe_command)
cli.add_command(batch_command)
cli.add_command(report_command)


def main(argv: list[str] | None = None) -> None:
    try:
        cli.main(args=argv, prog_name="countmill", standalone_mode=False)
    except click.exceptions.Exit as exc:
        sys.exit(exc.exit_code)
    except click.ClickException as exc:
        exc.show()
        sys.exit(exc.exit_code)
    except click.exceptions.Abort:
        click.echo("countmill: aborted", err=True)
        sys.exit(1)
    except CountmillError as exc:
        click.echo(f"countmill: {exc}", err=True)
        sys.exit(exc.exit_code)
    except KeyboardInterrupt:
        click.echo("countmill: interrupted", err=True)
        sys.exit(1)
    except Exception as exc:  # never a traceback for the user; say what failed
        click.echo(f"countmill: failed: {type(exc).__name__}: {exc}", err=True)
        sys.exit(1)
