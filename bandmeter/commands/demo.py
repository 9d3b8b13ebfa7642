"""``bandmeter demo``: the invented survey, end to end."""

from __future__ import annotations

import csv

import click

from ..cli import cli, warn
from ..demo import CALIBRATOR_DB, CHAIN_DRIFT_DB, CHAIN_FULL_SCALE_DB, DEMO_START, run_demo
from ..textout import fmt_db, table
from .calibrate import calibration_lines
from .exposure import render_exposure
from .levels import render_levels, render_tones, tone_screen
from .rating import render_rating


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
    click.echo(render_tones(tone_screen(result.levels)))
    click.echo("")
    click.echo("4. Noise events in the night recording (default rule)")
    click.echo(f"  rule: {result.events.rule}")
    click.echo(table(("clock", "dur s", "LAFmax", "LAE", "LAeq"),
                     [[e.start_time[11:19], f"{e.duration_s:.1f}", fmt_db(e.LAFmax),
                       fmt_db(e.LAE), fmt_db(e.LAeq)] for e in result.events.events],
                     indent="  "))
    amb, res = result.residual["ambient"], result.residual["residual"]
    click.echo(f"  LAeq {fmt_db(amb['LAeq'])} dB with the events, {fmt_db(res['LAeq'])} dB "
               f"without them ({result.residual['excluded_s']:.1f} s excluded)")
    click.echo("")
    click.echo("5. Day-evening-night rating of the depot monitor's hourly LAeq (two invented "
               "days)")
    click.echo(render_rating(result.rating))
    click.echo("")
    click.echo("6. Daily noise exposure of the yard marshal (6 h at MP2, 2 h in the workshop)")
    click.echo(render_exposure(result.exposure))
    click.echo("")
    click.echo(f"7. Report (figures, tables, assessments, provenance): {result.files['report']}")
    click.echo("")
    click.echo("Files written:")
    for role, path in result.files.items():
        click.echo(f"  {role:12s} {path}")
    click.echo("")
    click.echo("Results are indicative: a measurement for a report or a compliance decision "
               "follows the applicable standards, local regulations and licensed practice.")
    for message in result.calibration.warnings + result.levels.warnings:
        warn(message)
