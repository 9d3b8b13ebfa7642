"""``bandmeter calibrate`` and ``bandmeter check-calibrator``."""

from __future__ import annotations

import click

from ..calibration import Calibration, CalibratorCheck, calibrate, check_calibrator
from ..cli import cli, echo_json, warn
from ..textout import fmt_db, key_values, table
from .options import channel_option, parse_span


def _span_text(span: tuple[float, float] | None) -> str:
    return "-" if span is None else f"{span[0]:.2f} s to {span[1]:.2f} s"


def calibration_lines(cal: Calibration) -> str:
    """The readable summary of a calibration."""
    pairs: list[tuple[str, object]] = [
        ("full-scale level", f"{cal.full_scale_level_db:.2f} dB re 20 uPa "
                             "(SPL of a full-scale sine)"),
        ("Pa per unit", f"{cal.pascal_per_unit:.6g}"),
    ]
    if not cal.is_stated:
        pairs += [
            ("calibrator level", f"{cal.reference_level_db:.2f} dB re 20 uPa"),
            ("tone frequency", f"{cal.frequency_hz:.2f} Hz"),
            ("tone level", f"{cal.tone_level_dbfs:.2f} dBFS"),
            ("span used", _span_text(cal.span_s)),
            ("stability", f"{fmt_db(cal.stability_db, 3)} dB (std of 1 s levels)"),
            ("signal-to-noise", f"{fmt_db(cal.snr_db)} dB"),
            ("THD+N", f"{cal.thdn_percent:.3f} %"),
            ("source", f"{cal.source_file} (channel {cal.channel})"),
        ]
    if cal.post is not None:
        pairs += [
            ("post tone", f"{cal.post.tone_level_dbfs:.2f} dBFS at {cal.post.frequency_hz:.2f} Hz"
                          f", {_span_text(cal.post.span_s)} of {cal.post.source_file}"),
        ]
    if cal.drift_db is not None:
        pairs.append(("drift (post - pre)", f"{cal.drift_db:+.2f} dB"))
    return key_values(pairs)


@cli.command("calibrate")
@click.argument("tone_file", type=click.Path(dir_okay=True, readable=False))
@click.option("--level", "level_db", required=True, type=float,
              help="Calibrator level from its certificate, dB re 20 uPa (e.g. 94 or 114).")
@channel_option
@click.option("--span", metavar="START:END",
              help="Part of TONE_FILE with the steady tone, s (default: found automatically).")
@click.option("--frequency", "nominal_hz", type=float,
              help="Nominal calibrator frequency, Hz (default: nearest octave frequency).")
@click.option("--after", "after_file", type=click.Path(dir_okay=True, readable=False),
              help="Post-survey recording of the same calibrator: reports the drift.")
@click.option("--after-span", metavar="START:END", help="Part of --after with the tone, s.")
@click.option("--save", "save_path", type=click.Path(readable=False),
              help="Write the calibration to this JSON file (atomic, see --force).")
@click.option("--force", is_flag=True, help="Replace the --save file if it exists.")
@click.option("--json", "as_json", is_flag=True, help="Print the calibration as JSON.")
def calibrate_command(
    tone_file: str, level_db: float, channel: int, span: str | None, nominal_hz: float | None,
    after_file: str | None, after_span: str | None, save_path: str | None, force: bool,
    as_json: bool,
) -> None:
    """Derive the chain's sensitivity from a recorded calibrator tone.

    \b
    Example (invented survey day):
      bandmeter calibrate cal_pre.wav --level 94 --after cal_post.wav --save day1.cal.json
    The tone's frequency and steady part are found automatically; the result is the
    full-scale level: the SPL (dB re 20 uPa) a full-scale sine would produce in this chain.
    With --after the post-survey tone gives the drift (post minus pre, dB); more than
    0.5 dB is warned about.
    """
    if save_path is not None:
        from ..outputs import check_writable

        check_writable(save_path, force)  # before the measurement, not after
    cal = calibrate(tone_file, level_db, channel=channel, span_s=parse_span(span),
                    after_path=after_file, after_span_s=parse_span(after_span),
                    nominal_frequency_hz=nominal_hz)
    if save_path is not None:
        cal.save(save_path, force=force)
    if as_json:
        echo_json(cal.to_dict())
    else:
        click.echo(calibration_lines(cal))
        if save_path is not None:
            click.echo(f"saved: {save_path}")
    for message in cal.warnings:
        warn(message)


def check_table(result: CalibratorCheck) -> str:
    """Criteria of a calibrator check as an aligned table."""

    def verdict(passed: bool | None) -> str:
        return "n/a" if passed is None else ("pass" if passed else "FAIL")

    rows = [
        ("level", f"{result.level_deviation_db:+.2f} dB", f"+-{result.level_limit_db:.2f} dB",
         verdict(result.level_pass)),
        ("frequency", f"{result.frequency_deviation_percent:+.2f} %",
         f"+-{result.frequency_limit_percent:.1f} %", verdict(result.frequency_pass)),
        ("THD+N", f"{result.thdn_percent:.2f} %", f"<= {result.distortion_limit_percent:.1f} %",
         verdict(result.distortion_pass)),
    ]
    return table(("criterion", "measured", "limit", "result"), rows, indent="  ")


@cli.command("check-calibrator")
@click.argument("tone_file", type=click.Path(dir_okay=True, readable=False))
@click.option("--cal", "cal_path", required=True,
              type=click.Path(dir_okay=True, readable=False),
              help="Calibration of the chain (made with a reference calibrator).")
@click.option("--nominal", "nominal_level", required=True, type=float,
              help="Stated level of the calibrator under check, dB re 20 uPa.")
@click.option("--nominal-freq", "nominal_hz", default=1000.0, show_default=True, type=float,
              help="Stated frequency of the calibrator under check, Hz.")
@click.option("--class", "calibrator_class", default="1", show_default=True,
              type=click.Choice(["LS", "1", "2"]), help="IEC 60942 class claimed for it.")
@channel_option
@click.option("--span", metavar="START:END", help="Part of TONE_FILE with the tone, s.")
@click.option("--json", "as_json", is_flag=True, help="Print the check as JSON.")
def check_calibrator_command(
    tone_file: str, cal_path: str, nominal_level: float, nominal_hz: float,
    calibrator_class: str, channel: int, span: str | None, as_json: bool,
) -> None:
    """Check a sound calibrator against IEC 60942 through a calibrated chain.

    \b
    Example:
      bandmeter check-calibrator spare_cal.wav --cal day1.cal.json --nominal 94 --class 1
    Reports level, frequency and distortion against the tolerances of the class, and exits
    with status 1 when the calibrator fails. A field check, not a laboratory verification.
    """
    cal = Calibration.load(cal_path)
    result = check_calibrator(tone_file, cal, nominal_level, nominal_hz, calibrator_class,
                              channel=channel, span_s=parse_span(span))
    if as_json:
        echo_json(result.to_dict())
    else:
        click.echo(result.describe())
        click.echo(check_table(result))
        for note in result.notes:
            click.echo(f"note: {note}")
    for message in result.warnings:
        warn(message)
    if not result.passed:
        raise click.exceptions.Exit(1)
