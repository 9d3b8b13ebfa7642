"""Option bundles shared by several commands (decorators), and their resolution."""

from __future__ import annotations

from collections.abc import Callable
from typing import Any, TypeVar

import click

from ..calibration import Calibration, from_full_scale_level, from_tone
from ..errors import SettingsError

F = TypeVar("F", bound=Callable[..., Any])


def parse_span(text: str | None) -> tuple[float, float] | None:
    """Parse ``START:END`` (seconds) into a tuple; None passes through."""
    if text is None:
        return None
    parts = text.split(":")
    try:
        if len(parts) != 2:
            raise ValueError
        start, end = float(parts[0]), float(parts[1])
    except ValueError:
        raise SettingsError(
            f"span must be START:END in seconds, e.g. 2.5:14, got {text!r}"
        ) from None
    if not 0 <= start < end:
        raise SettingsError(f"span needs 0 <= START < END, got {text!r}")
    return start, end


def channel_option(func: F) -> F:
    """``--channel N`` (1-based)."""
    return click.option(
        "--channel", "-c", default=1, show_default=True, type=click.IntRange(min=1),
        help="Channel of the recording to analyse, numbered from 1.",
    )(func)


def calibration_options(func: F) -> F:
    """The calibration option group: a calibration file, a tone on the fly, or a stated level."""
    options = [
        click.option("--cal", "cal_path", type=click.Path(dir_okay=True, readable=False),
                     help="Calibration file made by `bandmeter calibrate --save`."),
        click.option("--cal-tone", type=click.Path(dir_okay=True, readable=False),
                     help="Calibrator recording to calibrate from on the fly (with --cal-level)."),
        click.option("--cal-level", type=float,
                     help="Level of the calibrator in --cal-tone, dB re 20 uPa (e.g. 94)."),
        click.option("--cal-span", metavar="START:END",
                     help="Part of --cal-tone holding the steady tone, s (default: found)."),
        click.option("--full-scale-level", type=float,
                     help="Known chain sensitivity: SPL of a full-scale sine, dB re 20 uPa."),
    ]
    for option in reversed(options):
        func = option(func)
    return func


def resolve_calibration(
    cal_path: str | None,
    cal_tone: str | None,
    cal_level: float | None,
    cal_span: str | None,
    full_scale_level: float | None,
    channel: int,
) -> Calibration | None:
    """Turn the calibration options into a Calibration (None when none was given).

    Exactly one source may be given; --cal-tone needs --cal-level and vice versa.
    """
    given = [name for name, value in (("--cal", cal_path), ("--cal-tone", cal_tone),
                                      ("--full-scale-level", full_scale_level))
             if value is not None]
    if len(given) > 1:
        raise SettingsError(f"give one calibration source, not {' and '.join(given)}")
    if cal_tone is None and (cal_level is not None or cal_span is not None):
        raise SettingsError("--cal-level and --cal-span go with --cal-tone")
    if cal_path is not None:
        return Calibration.load(cal_path)
    if cal_tone is not None:
        if cal_level is None:
            raise SettingsError("--cal-tone needs --cal-level (the calibrator's level in dB)")
        return from_tone(cal_tone, cal_level, channel=channel, span_s=parse_span(cal_span))
    if full_scale_level is not None:
        return from_full_scale_level(full_scale_level)
    return None


def output_options(func: F) -> F:
    """``--json``, ``-o/--output`` and ``--force``."""
    options = [
        click.option("--json", "as_json", is_flag=True, help="Print the result as JSON."),
        click.option("--output", "-o", type=click.Path(readable=False),
                     help="Write the table to this CSV file (atomic)."),
        click.option("--force", is_flag=True, help="Replace output files that exist."),
    ]
    for option in reversed(options):
        func = option(func)
    return func


def analysis_options(func: F) -> F:
    """What to compute: ``--interval``, ``--percentiles`` and the band options (see
    :func:`bandmeter.commands.levels.settings_from_options`)."""
    options = [
        click.option("--interval", metavar="T",
                     help="Reporting interval, e.g. 100ms, 1s, 1min, 15min, 1h "
                          "(default: whole file)."),
        click.option("--percentiles", default="1,5,10,50,90,95,99", show_default=True,
                     help="N of the percentile levels LAFN, %, comma separated."),
        click.option("--bands", metavar="octave|third|6|12|24",
                     help="Fractional-octave band analysis (1/1, 1/3, 1/6, 1/12, 1/24 "
                          "octave)."),
        click.option("--fmin", type=float, help="Lowest band, mid-band frequency in Hz."),
        click.option("--fmax", type=float, help="Highest band, mid-band frequency in Hz."),
        click.option("--band-weighting", default="Z", show_default=True,
                     type=click.Choice(["Z", "A", "C"], case_sensitive=False),
                     help="Frequency weighting applied before the band filters."),
        click.option("--band-max", is_flag=True,
                     help="Also the F-weighted maximum of each band."),
    ]
    for option in reversed(options):
        func = option(func)
    return func
