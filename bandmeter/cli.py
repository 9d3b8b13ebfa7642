"""The ``bandmeter`` command line: a thin layer over the library.

Each command parses its options, calls one library function and formats the result. Library
errors (:class:`bandmeter.errors.BandmeterError`) become one-line messages with exit status 1
in one place (:class:`_Group`); ``--debug`` shows the traceback instead.
"""

from __future__ import annotations

import sys
from typing import Any

import click

from . import __version__
from .errors import BandmeterError
from .outputs import json_text

EXIT_INPUT_ERROR = 1
EXIT_INTERNAL_ERROR = 3


class _Group(click.Group):
    """Click group that turns library errors into one-line messages."""

    def invoke(self, ctx: click.Context) -> Any:
        try:
            return super().invoke(ctx)
        except (click.exceptions.ClickException, click.exceptions.Exit, click.Abort):
            raise
        except BandmeterError as exc:
            if ctx.meta.get("bandmeter.debug"):
                raise
            raise click.ClickException(str(exc)) from exc
        except KeyboardInterrupt:
            click.echo("Interrupted.", err=True)
            ctx.exit(130)
        except Exception as exc:  # an error we did not foresee: still one line unless --debug
            if ctx.meta.get("bandmeter.debug"):
                raise
            err = click.ClickException(
                f"internal error: {type(exc).__name__}: {exc} (rerun with --debug for the "
                "traceback, and please report it)"
            )
            err.exit_code = EXIT_INTERNAL_ERROR
            raise err from exc


def _set_debug(ctx: click.Context, _param: click.Parameter, value: bool) -> bool:
    ctx.meta["bandmeter.debug"] = value
    return value


@click.group(cls=_Group, context_settings={"help_option_names": ["-h", "--help"]})
@click.version_option(__version__, prog_name="bandmeter")
@click.option(
    "--debug",
    is_flag=True,
    is_eager=True,
    expose_value=False,
    callback=_set_debug,
    help="Show the full traceback of an error.",
)
def cli() -> None:
    """Calibrated sound levels, bands and assessments from field recordings.

    \b
    Typical session:
      bandmeter calibrate cal_pre.wav --level 94 --after cal_post.wav --save day1.cal.json
      bandmeter levels site.wav --cal day1.cal.json --interval 15min
    Run `bandmeter demo` for a complete invented example.
    """


def echo_json(obj: object) -> None:
    """Print one JSON object (NaN/inf written as null)."""
    click.echo(json_text(obj))


def warn(message: str) -> None:
    """Print a warning line to stderr."""
    click.echo(f"warning: {message}", err=True)


def main(argv: list[str] | None = None) -> None:
    """Console-script entry point."""
    cli.main(args=argv, prog_name="bandmeter")


# Commands register themselves on ``cli`` when their modules are imported.
from . import commands  # noqa: E402,F401

if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
