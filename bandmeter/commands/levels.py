"""``bandmeter levels``: broadband (and band) levels of one recording, per interval."""

from __future__ import annotations

import os
from datetime import datetime

import click

from ..cli import cli, echo_json, warn
from ..engine import BAND_NAMES, AnalysisSettings, analyse_file
from ..errors import SettingsError
from ..intervals import parse_duration
from ..results import LevelResult
from ..tables import tidy_band_rows, wide_rows, write_csv
from ..textout import fmt_db, key_values, table
from .options import (
    analysis_options,
    calibration_options,
    channel_option,
    output_options,
    resolve_calibration,
)

#: Columns of the per-interval terminal table (all metrics go to CSV and JSON).
INTERVAL_COLUMNS = ("LAeq", "LAFmax", "LAFmin", "LAF10", "LAF90", "LCpeak")


def parse_percentiles(text: str) -> tuple[float, ...]:
    """``"1,10,90"`` -> (1.0, 10.0, 90.0)."""
    try:
        values = tuple(float(v) for v in text.split(",") if v.strip())
    except ValueError:
        raise SettingsError(f"percentiles must be numbers separated by commas, got {text!r}") \
            from None
    if not values:
        raise SettingsError(f"no percentile given in {text!r}")
    return values


def parse_start(text: str | None) -> datetime | None:
    """ISO 8601 start time with a time zone offset."""
    if text is None:
        return None
    try:
        when = datetime.fromisoformat(text)
    except ValueError:
        raise SettingsError(f"start time must be ISO 8601, e.g. 2026-05-14T22:00:00+01:00, "
                            f"got {text!r}") from None
    if when.tzinfo is None:
        raise SettingsError(f"start time {text!r} needs a time zone offset, e.g. +00:00")
    return when


def settings_from_options(
    interval: str | None, percentiles: str, bands: str | None, fmin: float | None,
    fmax: float | None, band_weighting: str, band_max: bool,
) -> AnalysisSettings:
    """Analysis settings from the CLI options shared by `levels` and `batch`."""
    b = None
    if bands is not None:
        if bands.lower() not in BAND_NAMES:
            raise SettingsError(f"--bands must be octave, third, 6, 12 or 24, got {bands!r}")
        b = BAND_NAMES[bands.lower()]
    elif fmin is not None or fmax is not None or band_max or band_weighting.upper() != "Z":
        raise SettingsError("--fmin, --fmax, --band-weighting and --band-max need --bands")
    return AnalysisSettings(
        interval_s=None if interval is None else parse_duration(interval),
        percentiles=parse_percentiles(percentiles),
        bands=b, fmin_hz=fmin, fmax_hz=fmax, band_weighting=band_weighting,
        band_max=band_max,
    )


def render_levels(result: LevelResult) -> str:
    """Readable terminal rendering of a level analysis."""
    lines = [result.file]
    cal = result.calibration
    pairs: list[tuple[str, object]] = [
        ("channel", result.channel),
        ("duration", f"{result.duration_s:.3f} s at {result.sample_rate} Hz"),
        ("levels in", result.unit),
        ("calibration", "none" if cal is None else f"full scale = "
                        f"{cal['full_scale_level_db']:.2f} dB re 20 uPa ({cal['source_file']})"),
    ]
    if result.overall.overload:
        pairs.append(("OVERLOAD", f"{result.overall.full_scale_samples} sample(s) at or beyond "
                                  "full scale; levels there may be too low"))
    lines.append(key_values(pairs))
    metrics = result.overall.metrics
    keys = list(metrics)
    half = (len(keys) + 1) // 2
    grid = []
    for i in range(half):
        row = [keys[i], fmt_db(metrics[keys[i]])]
        if i + half < len(keys):
            row += [keys[i + half], fmt_db(metrics[keys[i + half]])]
        else:
            row += ["", ""]
        grid.append(row)
    lines.append("")
    lines.append("Whole recording (dB)")
    lines.append(table(("metric", "value", "metric", "value"), grid, indent="  "))
    suffix = "" if result.calibrated else "_dBFS"
    if len(result.intervals) > 1 or (result.intervals and result.intervals[0].partial):
        cols = [c + suffix for c in INTERVAL_COLUMNS]
        rows = []
        for iv in result.intervals:
            when = iv.start_time[11:19] if iv.start_time else f"{iv.start_s:.1f}"
            flags = ("partial " if iv.partial else "") + ("OVERLOAD" if iv.overload else "")
            rows.append([when, f"{iv.duration_s:g}"]
                        + [fmt_db(iv.metrics.get(c)) for c in cols] + [flags.strip()])
        lines.append("")
        lines.append(f"Intervals ({len(result.intervals)})")
        head = ("start" if not result.intervals[0].start_time else "clock", "dur s",
                *INTERVAL_COLUMNS, "flags")
        lines.append(table(head, rows, indent="  "))
    if result.overall.bands:
        band_keys = list(result.overall.bands[0].levels)
        rows = [[b.label, f"{b.exact_hz:.1f}"] + [fmt_db(b.levels[k]) for k in band_keys]
                for b in result.overall.bands]
        lines.append("")
        lines.append("Bands, whole recording (dB)")
        lines.append(table(("band Hz", "exact Hz", *band_keys), rows, indent="  "))
        if len(result.intervals) > 1:
            lines.append("  (band levels per interval: --json, or -o with or without --tidy)")
    return "\n".join(lines)


def tone_screen(result: LevelResult):
    """The one-third-octave tone screen of a result with Z-weighted one-third octaves."""
    settings = result.settings
    if settings.get("bands") != 3 or settings.get("band_weighting") != "Z":
        return None
    from ..assess.tonality import screen_result

    return screen_result(result, "LZeq" if result.calibrated else "LZeq_dBFS")


def render_tones(screening) -> str:
    """Terminal lines of a tone screen."""
    def describe(tones) -> str:
        return ", ".join(f"{t.nominal_hz:g} Hz (+{t.margin_db:.1f} dB over the required "
                         f"{t.required_db:g} dB)" for t in tones) or "no tone"

    lines = ["", "Tone screen (one-third-octave bands above both neighbours by 15/8/5 dB,",
             "  ISO 1996-2 Annex K / BS 4142 Annex C; differences from memory, unconfirmed)",
             f"  whole recording: {describe(screening.overall)}"]
    if screening.assessed_intervals > 1:
        counts = ", ".join(f"{f:g} Hz {n}" for f, n in screening.band_counts().items())
        lines.append(f"  intervals with a tone: {len(screening.intervals)} of "
                     f"{screening.assessed_intervals}" + (f" ({counts})" if counts else ""))
    return "\n".join(lines)


@cli.command("levels")
@click.argument("file", type=click.Path(dir_okay=True, readable=False))  # checked in audio
@calibration_options
@channel_option
@click.option("--dbfs", is_flag=True,
              help="Without calibration: report dB re full scale (keys end in _dBFS).")
@analysis_options
@click.option("--tidy", is_flag=True,
              help="With -o and --bands: one CSV row per interval x band instead of wide rows.")
@click.option("--start", "start", metavar="ISO8601",
              help="Clock time of the first sample, e.g. 2026-05-14T22:00:00+01:00.")
@click.option("--report", "report", type=click.Path(readable=False), metavar="REPORT.html",
              help="Also write a self-contained HTML report of the result (atomic).")
@output_options
def levels_command(
    file: str, cal_path: str | None, cal_tone: str | None, cal_level: float | None,
    cal_span: str | None, full_scale_level: float | None, channel: int, dbfs: bool,
    interval: str | None, percentiles: str, bands: str | None, fmin: float | None,
    fmax: float | None, band_weighting: str, band_max: bool, tidy: bool, start: str | None,
    report: str | None, as_json: bool, output: str | None, force: bool,
) -> None:
    """Sound levels of a recording: Leq, maxima, minima, peaks, LE and percentiles.

    \b
    Example (invented survey):
      bandmeter levels mp2_night.wav --cal day1.cal.json --interval 15min -o mp2.csv
    Metrics (dB re 20 uPa): LAeq, LCeq, LZeq, LAE, LAFmax, LAFmin, LASmax, LASmin, LAImax,
    LCpeak, LZpeak and LAFN (level exceeded for N % of the time), for the whole recording
    and for each interval. Without a calibration the command refuses, unless --dbfs is
    given. Intervals with samples at full scale are flagged (possible overload).
    """
    calibration = resolve_calibration(cal_path, cal_tone, cal_level, cal_span,
                                      full_scale_level, channel)
    if calibration is not None and dbfs:
        raise SettingsError("--dbfs is for uncalibrated analysis; drop it or the calibration")
    if tidy and (output is None or bands is None):
        raise SettingsError("--tidy needs --bands and -o")
    settings = settings_from_options(interval, percentiles, bands, fmin, fmax,
                                     band_weighting, band_max)
    from ..outputs import check_writable

    for path in (output, report):
        if path is not None:
            check_writable(path, force)  # fail before the analysis, not after
    if output is not None and report is not None and os.path.abspath(output) == \
            os.path.abspath(report):
        raise SettingsError("-o and --report name the same file; give two names")
    result = analyse_file(file, calibration, settings, channel=channel,
                          start_time=parse_start(start), allow_uncalibrated=dbfs)
    if output is not None:
        rows = tidy_band_rows(result) if tidy else wide_rows(result)
        write_csv(output, rows, force=force)
    screening = tone_screen(result)
    if as_json:
        data = result.to_dict()
        if screening is not None:
            data["tonality"] = screening.to_dict()
        echo_json(data)
    else:
        click.echo(render_levels(result))
        if screening is not None:
            click.echo(render_tones(screening))
        if output is not None:
            click.echo(f"\nwritten: {output}")
    if report is not None:
        from ..report import build_report, source_from_result, write_report

        write_report(report, build_report(source_from_result(result, file)), force=force)
        if not as_json:
            click.echo(f"report: {report}")
    for message in result.warnings:
        warn(message)
