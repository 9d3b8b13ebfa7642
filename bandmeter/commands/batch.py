"""``bandmeter batch``: many recordings into tables, resumable, parallel, on Dask."""

from __future__ import annotations

import os
import sys

import click

from ..batch import BatchOptions, run_batch
from ..cli import cli, warn
from .levels import settings_from_options
from .options import analysis_options, calibration_options, channel_option, resolve_calibration


@cli.command("batch")
@click.argument("inputs", nargs=-1, required=True)
@click.option("--out", "out_dir", required=True, type=click.Path(file_okay=False),
              help="Output folder (created): results, tables and the manifest.")
@calibration_options
@click.option("--cal-map", type=click.Path(dir_okay=False),
              help="CSV of rules: recording path or glob -> calibration file or tone + level.")
@channel_option
@click.option("--dbfs", is_flag=True, help="Without calibration: levels re full scale.")
@analysis_options
@click.option("--start", metavar="ISO8601", help="Clock time of the first sample.")
@click.option("--start-from-name", "name_pattern", metavar="PATTERN",
              help="strftime pattern of the start time in file names, e.g. MP2_%Y%m%d_%H%M%S.")
@click.option("--timezone", metavar="TZ",
              help="Zone of start times that carry none (broadcast-WAV, names): +01:00, UTC, "
                   "Europe/Paris.")
@click.option("--align", is_flag=True, help="Clock-aligned intervals (15 min at :00, :15...).")
@click.option("--join", is_flag=True,
              help="Join gapless consecutive recordings of one recorder into one measurement.")
@click.option("--workers", type=click.IntRange(min=1), default=None,
              help="Local worker processes (default: all cores).")
@click.option("--dask", metavar="ADDRESS|local",
              help="Run on Dask distributed: 'local' starts a local cluster, or a scheduler "
                   "address such as tcp://10.0.0.5:8786.")
@click.option("--progress/--no-progress", default=None,
              help="Progress line (default: on a terminal only).")
@click.option("--force", is_flag=True, help="Analyse everything again, replacing outputs.")
def batch_command(
    inputs: tuple[str, ...], out_dir: str, cal_path: str | None, cal_tone: str | None,
    cal_level: float | None, cal_span: str | None, full_scale_level: float | None,
    cal_map: str | None, channel: int, dbfs: bool, interval: str | None, percentiles: str,
    bands: str | None, fmin: float | None, fmax: float | None, band_weighting: str,
    band_max: bool, start: str | None, name_pattern: str | None, timezone: str | None,
    align: bool, join: bool, workers: int | None, dask: str | None, progress: bool | None,
    force: bool,
) -> None:
    """Analyse folders of recordings into per-file results and tidy tables.

    \b
    Example (invented survey):
      bandmeter batch survey/day1 survey/day2 --cal-map survey/cals.csv \\
          --interval 15min --bands third --start-from-name "MP2_%Y%m%d_%H%M%S" \\
          --timezone +01:00 --align --out survey/results
    INPUTS are files, folders (searched recursively) and glob patterns. In --out: summary.csv
    (one row per recording), intervals.csv/.parquet (one row per recording x interval),
    bands.csv/.parquet (x band, with --bands), results/*.json (each recording's full result)
    and manifest.json (hashes, calibration, settings, status). A rerun skips recordings whose
    bytes, calibration and settings are unchanged. A recording that fails is reported and the
    others go on; the exit status is then 1.
    """
    calibration = resolve_calibration(cal_path, cal_tone, cal_level, cal_span,
                                      full_scale_level, channel)
    settings = settings_from_options(interval, percentiles, bands, fmin, fmax,
                                     band_weighting, band_max)
    options = BatchOptions(
        settings=settings, channel=channel, calibration=calibration, calibration_map=cal_map,
        allow_uncalibrated=dbfs, workers=workers or os.cpu_count() or 1, dask=dask,
        start=start, name_pattern=name_pattern, timezone=timezone, align=align, join=join,
        force=force,
    )
    report = run_batch(inputs, out_dir, options, progress=progress)
    for path, error in report.failed:
        warn(f"failed: {error}" if error.startswith(path) else f"failed: {path}: {error}")
    click.echo(report.line())
    for name, path in report.tables.items():
        click.echo(f"  {name:18s} {path}")
    if report.interrupted:
        sys.exit(130)
    if report.failed:
        sys.exit(1)
