"""``bandmeter plot``: figures of a level result, a batch folder or a calibration file."""

from __future__ import annotations

import click

from ..cli import cli
from ..engine import percentile_key
from ..plots import FIGURE_KINDS, plot_path, read_events
from .levels import parse_percentiles


def _labels(text: str | None) -> list[str] | None:
    if text is None:
        return None
    return [part.strip() for part in text.split(",") if part.strip()]


@cli.command("plot")
@click.argument("result", type=click.Path(readable=False))
@click.option("--png-dir", type=click.Path(file_okay=False),
              help="Write PNG files (150 dpi) into this folder (created when missing).")
@click.option("--svg-dir", type=click.Path(file_okay=False),
              help="Write SVG files (self-contained) into this folder.")
@click.option("--kind", "kinds", multiple=True, type=click.Choice(FIGURE_KINDS),
              help="Figure to make (repeatable; default: every kind the data allows).")
@click.option("--percentiles", default="90", show_default=True,
              help="N of the LAFN levels drawn in the time history, %, comma separated.")
@click.option("--events", "events_path", type=click.Path(dir_okay=False),
              help="Events to shade in the time history (`bandmeter events --json` output).")
@click.option("--exclude", "exclude_path", type=click.Path(dir_okay=False),
              help="CSV of excluded time ranges (start,end[,label]) to hatch.")
@click.option("--tones", metavar="LABELS",
              help="Bands to mark as tonal, e.g. 630,1k (default: the one-third-octave "
                   "tone screen).")
@click.option("--stem", help="File name prefix (default: the recording's stem).")
@click.option("--force", is_flag=True, help="Replace figure files that exist.")
def plot_command(
    result: str, png_dir: str | None, svg_dir: str | None, kinds: tuple[str, ...],
    percentiles: str, events_path: str | None, exclude_path: str | None, tones: str | None,
    stem: str | None, force: bool,
) -> None:
    """Figures of a level result: time history, band spectrum, band-time map, level
    distribution and calibration, as PNG and/or SVG.

    \b
    Example (invented survey):
      bandmeter levels mp2_night.wav --cal mp2.cal.json --interval 1min --bands third \\
          --json > mp2_night.json
      bandmeter plot mp2_night.json --png-dir figures --svg-dir figures
      bandmeter plot survey/results --png-dir figures --kind time --kind spectrum
      bandmeter plot mp2.cal.json --png-dir figures
    RESULT is a `levels --json` file, a `batch` output folder (every recording, files
    prefixed by its stem) or a calibration file. Files are NAME_KIND.png / .svg; existing
    files are not replaced without --force. Levels in dB re 20 uPa (dB re full scale for an
    uncalibrated result), frequencies in Hz, time as clock time when the start is known.
    """
    written = plot_path(
        result, png_dir=png_dir, svg_dir=svg_dir, kinds=list(kinds) or None, force=force,
        percentile_keys=[percentile_key(n) for n in parse_percentiles(percentiles)],
        events=read_events(events_path) if events_path else None,
        exclusions_csv=exclude_path, tonal_labels=_labels(tones), stem=stem,
    )
    for path in written:
        click.echo(f"written: {path}")
