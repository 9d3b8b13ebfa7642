"""``bandmeter demo``: the invented survey, end to end."""

from __future__ import annotations

import csv

import click

from ..cli import cli, warn
from ..demo import CALIBRATOR_DB, CHAIN_DRIFT_DB, CHAIN_FULL_SCALE_DB, DEMO_START, run_demo
from ..textout import fmt_db, table
from .calibrate import calibration_lines
from .levels import render_levels


@cli.command("demo")
@click.option("--out", "out_dir", type=click.Path(file_okay=False),
              help="Folder for the demo's recordings and results (default: a new temporary "
                   "folder; never the current folder unless given).")
@click.option("--force", is_flag=True, help="Replace the files of an earlier demo in --out.")
def demo_command(out_dir: str | None, force: bool) -> None:
    """Run bandmeter on a built-in invented survey and print the results.

    \b
    Example:
      bandmeter demo --out ./demo
    Synthesises (seeded, the same on every machine) a night recording at the fictional
    Larkspur Lane depot, position MP2, with a pre and a post calibrator tone, then
    calibrates the chain from the tones and analyses the recording with the real engine.
    """
    result = run_demo(out_dir, force=force)
    click.echo("bandmeter demo: night survey at the (invented) Larkspur Lane depot, MP2")
    click.echo(f"files in {result.out_dir}")
    click.echo("")
    click.echo(f"1. Calibration ({CALIBRATOR_DB:.1f} dB calibrator; the synthetic chain is "
               f"{CHAIN_FULL_SCALE_DB:.1f} dB full scale and drifts {CHAIN_DRIFT_DB:+.2f} dB)")
    click.echo(calibration_lines(result.calibration))
    click.echo("")
    click.echo("2. Sound levels and one-third-octave bands of the night recording, "
               "10 s intervals")
    click.echo(render_levels(result.levels))
    loudest = max(result.levels.overall.bands, key=lambda band: band.levels["LZeq"])
    remark = " (the chiller's hum)" if loudest.label == "100" else ""
    click.echo(f"  loudest band: {loudest.label} Hz at {loudest.levels['LZeq']:.1f} dB{remark}")
    click.echo("")
    click.echo(f"3. The night recording as a batch (start {DEMO_START}, clock-aligned 30 s "
               "intervals)")
    click.echo(f"  {result.batch.line()}")
    with open(result.batch.tables["intervals"], newline="") as handle:
        rows = list(csv.DictReader(handle))
    click.echo(table(("clock", "dur s", "LAeq", "LAFmax", "LAF90"),
                     [[r["start_time"][11:19], f"{float(r['duration_s']):g}",
                       fmt_db(float(r["LAeq"])), fmt_db(float(r["LAFmax"])),
                       fmt_db(float(r["LAF90"]))] for r in rows], indent="  "))
    click.echo("")
    click.echo("Files written:")
    for role, path in result.files.items():
        click.echo(f"  {role:12s} {path}")
    click.echo("")
    click.echo("Results are indicative: a measurement for a report or a compliance decision "
               "follows the applicable standards, local regulations and licensed practice.")
    for message in result.calibration.warnings + result.levels.warnings:
        warn(message)
