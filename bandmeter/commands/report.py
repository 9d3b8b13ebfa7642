"""``bandmeter report``: one self-contained HTML report of a batch folder or a level result."""

from __future__ import annotations

import click

from ..cli import cli
from ..errors import SettingsError
from ..plots import FIGURE_KINDS
from ..report import report_path


@cli.command("report")
@click.argument("source", type=click.Path(exists=True, readable=False))
@click.option("--output", "-o", required=True, type=click.Path(readable=False),
              metavar="REPORT.html", help="The HTML file to write (atomic).")
@click.option("--include", "include", multiple=True, type=click.Path(dir_okay=False),
              metavar="JSON",
              help="An assessment to include: the --json output of events, rating or "
                   "exposure (repeatable). Events are also drawn on the time histories.")
@click.option("--title", help="Report title (default: from the source's name).")
@click.option("--figures", "figures", default="all", show_default=True, metavar="LIST",
              help=f"Figures to include, comma-separated from {', '.join(FIGURE_KINDS)}, "
                   "or all, or none.")
@click.option("--force", is_flag=True, help="Replace the report file if it exists.")
def report_command(source: str, output: str, include: tuple[str, ...], title: str | None,
                   figures: str, force: bool) -> None:
    """Write a self-contained HTML report (figures inline, nothing linked, prints on A4).

    \b
    Examples (invented survey):
      bandmeter report survey_out/ -o survey_report.html
      bandmeter report mp2_night.json -o mp2.html --include mp2_events.json
    SOURCE is a batch output folder or a `levels --json` file. The report holds the summary,
    per-recording metrics, figures, band tables, tone screen, calibration and drift, the
    interval tables, the included assessments, provenance (file hashes, tool version,
    settings), the warnings and the cautions.
    """
    text = figures.strip().lower()
    if text == "all":
        kinds: tuple[str, ...] = FIGURE_KINDS
    elif text == "none":
        kinds = ()
    else:
        kinds = tuple(k.strip() for k in text.split(",") if k.strip())
        bad = [k for k in kinds if k not in FIGURE_KINDS]
        if bad:
            raise SettingsError(f"--figures: unknown kind(s) {', '.join(bad)}; choose from "
                                f"{', '.join(FIGURE_KINDS)}, all or none")
    written = report_path(source, output, include, force=force, title=title,
                          figure_kinds=kinds)
    click.echo(f"report: {written}")
