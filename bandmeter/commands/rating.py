"""``bandmeter rating``: Lden / Ldn per day and over a survey, with a tone screen."""

from __future__ import annotations

import csv
import math
import os
import textwrap
from collections.abc import Sequence
from dataclasses import dataclass, field
from datetime import datetime, tzinfo
from typing import Any

import click
import numpy as np

from ..assess.rating import (
    DEFAULT_MIN_COVERAGE,
    Periods,
    RatingResult,
    interval_starts,
    period_symbol,
    preset,
    rate_intervals,
)
from ..assess.tonality import IntervalTones, ToneScreening, screen_result, screen_third_octaves
from ..cli import cli, echo_json, warn
from ..errors import SettingsError
from ..results import BandLevels, LevelResult
from ..textout import fmt_db, table
from .options import calibration_options, channel_option, resolve_calibration

#: Printed with every rating.
CAUTION = ("Results are indicative: rating and compliance follow the applicable local "
           "regulations, standards and licensed practice (periods, penalties, tone "
           "adjustments, measurement conditions).")

#: Default interval for a recording.
DEFAULT_INTERVAL = "1h"

_TONE_NOTE = ("one-third-octave screen after ISO 1996-2:2017 Annex K / BS 4142:2014 Annex C; "
              "level differences 15/8/5 dB from memory, unconfirmed")


@dataclass
class _Survey:
    """Clock-timed intervals and band screens of one source (or of one id of a batch)."""

    label: str
    starts: list[datetime]
    durations_s: np.ndarray
    laeq_db: np.ndarray
    tones: list[tuple[str | None, ToneScreening]] = field(default_factory=list)


# --------------------------------------------------------------------------- options


def periods_from_options(preset_name: str, day: float | None, evening: float | None,
                         night: float | None, evening_penalty: float | None,
                         night_penalty: float | None) -> Periods:
    """A preset with the hours and penalties given on the command line."""
    base = preset(preset_name)
    evening_h = base.evening_start_h if evening is None else evening
    return Periods(
        day_start_h=base.day_start_h if day is None else day,
        evening_start_h=evening_h,
        night_start_h=base.night_start_h if night is None else night,
        evening_penalty_db=base.evening_penalty_db if evening_penalty is None
        else evening_penalty,
        night_penalty_db=base.night_penalty_db if night_penalty is None else night_penalty,
        name="Lden" if evening_h is not None else "Ldn",
    )


def _check_folder_options(**given: Any) -> None:
    used = [f"--{k.replace('_', '-')}" for k, v in given.items() if v is not None]
    if used:
        raise SettingsError(f"{', '.join(used)} apply to a recording, not to a batch output "
                            "folder (its intervals and start times are already set)")


# --------------------------------------------------------------------------- recording


def _recording_survey(path: str, calibration: Any, channel: int, interval: str,
                      start: str | None, name_pattern: str | None, tz: tzinfo | None,
                      tonality: bool, warnings: list[str]) -> tuple[_Survey, dict[str, Any]]:
    from ..audio import read_info
    from ..clock import aligned_first_boundary, resolve_start
    from ..engine import AnalysisSettings, analyse_file
    from ..intervals import parse_duration

    interval_s = parse_duration(interval)
    found = resolve_start(path, name_pattern=name_pattern, option=start, tz=tz,
                          prefer=("option", "bext", "name"))
    if found is None:
        raise SettingsError(f"{path}: no start time (no broadcast-WAV time"
                            f"{', no match of the name pattern' if name_pattern else ''}); "
                            "the rating needs clock times: give --start or --start-from-name")
    warnings.extend(found.warnings)
    when = found.when if tz is None else found.when.astimezone(tz)
    info = read_info(path)
    boundary = aligned_first_boundary(when, interval_s, info.sample_rate)
    settings = AnalysisSettings(interval_s=interval_s, bands=3 if tonality else None)
    result = analyse_file(path, calibration, settings, channel=channel, start_time=when,
                          first_boundary=boundary)
    warnings.extend(result.warnings)
    survey = _Survey(path, *_result_columns(result, when))
    if tonality:
        survey.tones.append((None, screen_result(result)))
    return survey, {**found.to_dict(), "when": when.isoformat()}


def _result_columns(result: LevelResult,
                    when: datetime) -> tuple[list[datetime], np.ndarray, np.ndarray]:
    ivs = result.intervals
    if hasattr(ivs, "column"):
        offsets, durations = ivs.start_s, ivs.duration_s
        laeq = ivs.column("LAeq")
    else:
        offsets = np.array([iv.start_s for iv in ivs])
        durations = np.array([iv.duration_s for iv in ivs])
        laeq = np.array([iv.metrics["LAeq"] for iv in ivs])
    return interval_starts(when, offsets), np.asarray(durations), np.asarray(laeq)


# --------------------------------------------------------------------------- batch folder


def _number(value: Any) -> float:
    if value is None or value == "":
        return math.nan
    return float(value)


def read_batch_table(folder: str, name: str) -> dict[str, list[Any]] | None:
    """Columns of ``<name>.parquet`` (pyarrow) or else ``<name>.csv`` of a batch folder.

    CSV cells stay strings (empty for missing); None when neither file exists.
    """
    parquet = os.path.join(folder, f"{name}.parquet")
    if os.path.exists(parquet):
        import pyarrow.parquet as pq

        return pq.read_table(parquet).to_pydict()
    path = os.path.join(folder, f"{name}.csv")
    if not os.path.exists(path):
        return None
    with open(path, newline="", encoding="utf-8") as handle:
        rows = list(csv.DictReader(handle))
    columns = list(rows[0]) if rows else []
    return {c: [r.get(c, "") for r in rows] for c in columns}


def _parse_when(text: Any, tz: tzinfo | None) -> datetime | None:
    from ..clock import parse_start_option

    if text is None or str(text).strip() == "":
        return None
    when = parse_start_option(str(text))
    return when if tz is None else when.astimezone(tz)


def _batch_surveys(folder: str, tz: tzinfo | None, by_file: bool, tonality: bool,
                   warnings: list[str]) -> list[_Survey]:
    table_ = read_batch_table(folder, "intervals")
    if table_ is None:
        raise SettingsError(f"{folder}: no intervals.parquet or intervals.csv; give a "
                            "recording or a `bandmeter batch --out` folder")
    for col in ("id", "start_time", "duration_s", "LAeq"):
        if col not in table_:
            hint = " (an uncalibrated batch? the rating needs calibrated LAeq)" \
                if col == "LAeq" else ""
            raise SettingsError(f"{folder}: the intervals table has no {col!r} column{hint}")
    ids = [str(v) for v in table_["id"]]
    starts = [_parse_when(v, tz) for v in table_["start_time"]]
    timed = [i for i, s in enumerate(starts) if s is not None]
    if not timed:
        raise SettingsError(f"{folder}: no interval has a start time; rerun the batch with "
                            "--start-from-name or broadcast-WAV times")
    if len(timed) < len(starts):
        warnings.append(f"{len(starts) - len(timed)} interval(s) without a start time skipped")
    groups: dict[str, list[int]] = {}
    for i in timed:
        groups.setdefault(ids[i] if by_file else "all", []).append(i)
    durations = np.array([_number(v) for v in table_["duration_s"]])
    laeq = np.array([_number(v) for v in table_["LAeq"]])
    surveys = [_Survey(key, [starts[i] for i in idx], durations[idx], laeq[idx])
               for key, idx in groups.items()]
    if tonality:
        screens = _batch_tones(folder, warnings)
        for s in surveys:
            s.tones = [(k, v) for k, v in screens.items() if not by_file or k == s.label]
    return surveys


def _batch_tones(folder: str, warnings: list[str]) -> dict[str, ToneScreening]:
    """Tone screens per measurement id from the batch band table ({} when not possible)."""
    bands = read_batch_table(folder, "bands")
    if bands is None or "LZeq" not in bands:
        warnings.append("no one-third-octave LZeq band table in the batch folder: tonality "
                        "not screened (run the batch with --bands third)")
        return {}
    cells: dict[tuple[str, int | None], list[BandLevels]] = {}
    meta: dict[tuple[str, int | None], tuple[float, str | None]] = {}
    for j in range(len(bands["id"])):
        iv = bands["interval"][j]
        key = (str(bands["id"][j]), None if iv in (None, "") else int(iv))
        cells.setdefault(key, []).append(BandLevels(
            _number(bands["nominal_hz"][j]), _number(bands["exact_hz"][j]),
            str(bands["band"][j]), {"LZeq": _number(bands["LZeq"][j])}))
        meta[key] = (_number(bands["start_s"][j]), bands["start_time"][j] or None)
    try:
        return _screens(cells, meta)
    except SettingsError as exc:
        warnings.append(f"tonality not screened: {exc}")
        return {}


def _screens(cells: dict[tuple[str, int | None], list[BandLevels]],
             meta: dict[tuple[str, int | None], tuple[float, str | None]]
             ) -> dict[str, ToneScreening]:
    out: dict[str, ToneScreening] = {}
    for (mid, index), band_list in cells.items():
        screen = out.setdefault(mid, ToneScreening([]))
        tones = screen_third_octaves(band_list)
        if index is None:
            screen.overall = tones
            continue
        screen.assessed_intervals += 1
        if tones:
            start_s, start_time = meta[(mid, index)]
            screen.intervals.append(IntervalTones(index, start_s, start_time, tones))
    for screen in out.values():
        screen.intervals.sort(key=lambda iv: iv.index)
    return out


# --------------------------------------------------------------------------- rendering


def _hm(hour: float) -> str:
    minutes = int(round(hour * 60)) % (24 * 60)
    return f"{minutes // 60:02d}:{minutes % 60:02d}"


def describe_periods(periods: Periods) -> str:
    """``day 07:00-19:00, evening 19:00-23:00 (+5 dB), night 23:00-07:00 (+10 dB)``."""
    starts = periods.starts_h()
    ends = starts[1:] + (starts[0],)
    parts = []
    for name, s, e in zip(periods.names, starts, ends, strict=True):
        pen = periods.penalties()[name]
        parts.append(f"{name} {_hm(s)}-{_hm(e)}" + (f" (+{pen:g} dB)" if pen else ""))
    return ", ".join(parts)


def day_rows(rating: RatingResult, label: str | None = None) -> list[dict[str, Any]]:
    """One row per day and a last ``survey`` row: period levels, coverages, rating (dB)."""
    p = rating.periods
    rows = []
    for day in rating.days:
        row: dict[str, Any] = {} if label is None else {"id": label}
        row["date"] = day.date.isoformat()
        row.update({period_symbol(n): day.level(n) for n in p.names})
        row.update({f"coverage_{n}": (day.periods[n].coverage if n in day.periods else 0.0)
                    for n in p.names})
        row[p.name] = day.rating_db
        rows.append(row)
    survey: dict[str, Any] = {} if label is None else {"id": label}
    survey["date"] = "survey"
    survey.update({period_symbol(n): rating.overall[period_symbol(n)] for n in p.names})
    survey[p.name] = rating.rating_db
    rows.append(survey)
    return rows


def render_rating(rating: RatingResult) -> str:
    p = rating.periods
    rows = []
    for r in day_rows(rating):
        cover = "/".join(f"{100 * r[f'coverage_{n}']:.0f}" if f"coverage_{n}" in r else "-"
                         for n in p.names) if r["date"] != "survey" else ""
        rows.append([r["date"], *(fmt_db(r[period_symbol(n)]) for n in p.names), cover,
                     fmt_db(r[p.name])])
    head = ("date", *(period_symbol(n) for n in p.names),
            "coverage " + "/".join(n[0] for n in p.names) + " %", p.name)
    return table(head, rows, indent="  ")


def _render_tones(tones: Sequence[tuple[str | None, ToneScreening]]) -> list[str]:
    lines = ["", *textwrap.wrap(f"Tonality ({_TONE_NOTE})", 88, subsequent_indent="  ")]
    if not tones:
        lines.append("  not screened")
    for mid, screen in tones:
        prefix = "  " if mid is None else f"  {mid}: "
        found = ", ".join(f"{t.nominal_hz:g} Hz (margin {t.margin_db:.1f} dB)"
                          for t in screen.overall) or "no tone"
        lines.append(f"{prefix}whole recording: {found}")
        counts = ", ".join(f"{f:g} Hz {n}" for f, n in screen.band_counts().items())
        lines.append(f"{prefix}intervals with a tone: {len(screen.intervals)} of "
                     f"{screen.assessed_intervals}" + (f" ({counts})" if counts else ""))
    return lines


def render(source: str, ratings: Sequence[tuple[_Survey, RatingResult]],
           start: dict[str, Any] | None, tonality: bool) -> str:
    """Terminal text of a rating."""
    periods = ratings[0][1].periods
    lines = [source, f"  {periods.name}: {describe_periods(periods)}"]
    if start is not None:
        lines.append(f"  start: {start['when']} ({start['detail']})")
    for survey, rating in ratings:
        title = "Per day" if survey.label in ("all", source) else f"{survey.label}, per day"
        lines += ["", f"{title} (LAeq dB; a night belongs to the date it starts)",
                  render_rating(rating)]
    if tonality:
        lines += _render_tones([t for s, _ in ratings for t in s.tones])
    lines += ["", *textwrap.wrap(f"Caution: {CAUTION}", 88)]
    return "\n".join(lines)


def _tone_json(tones: Sequence[tuple[str | None, ToneScreening]]
               ) -> tuple[list[dict[str, Any]], list[dict[str, Any]]]:
    overall, per_interval = [], []
    for mid, screen in tones:
        counts = screen.band_counts()
        for t in screen.overall:
            item = {} if mid is None else {"id": mid}
            item.update(t.to_dict())
            item["intervals_with_tone"] = counts.get(t.nominal_hz, 0)
            overall.append(item)
        summary = {} if mid is None else {"id": mid}
        summary.update({"assessed": screen.assessed_intervals,
                        "with_tones": len(screen.intervals),
                        "band_counts": [{"nominal_hz": f, "intervals": n}
                                        for f, n in counts.items()]})
        per_interval.append(summary)
    return overall, per_interval


def to_json(source: str, kind: str, ratings: Sequence[tuple[_Survey, RatingResult]],
            start: dict[str, Any] | None, tonality: bool, by_file: bool,
            warnings: list[str]) -> dict[str, Any]:
    """The ``--json`` object (see the command help)."""
    def labelled(survey: _Survey, d: dict[str, Any]) -> dict[str, Any]:
        return {"id": survey.label, **d} if by_file else d

    days = [labelled(s, d.to_dict(r.periods)) for s, r in ratings for d in r.days]
    overall = [labelled(s, r.overall) for s, r in ratings]
    tones, per_interval = _tone_json([t for s, _ in ratings for t in s.tones])
    return {
        "source": source, "kind": kind, "start": start,
        "periods": ratings[0][1].periods.to_dict(),
        "days": days, "overall": overall if by_file else overall[0],
        "tonality": tones if tonality else [],
        "tonality_intervals": per_interval if tonality else None,
        "tonality_method": _TONE_NOTE if tonality else None,
        "warnings": warnings, "caution": CAUTION,
    }


# --------------------------------------------------------------------------- command


@cli.command("rating")
@click.argument("source", type=click.Path(exists=True))
@calibration_options
@channel_option
@click.option("--interval", metavar="T",
              help=f"Interval of a recording's analysis, dividing 24 h (default "
                   f"{DEFAULT_INTERVAL}); clock-aligned.")
@click.option("--start", metavar="ISO8601",
              help="Clock time of the first sample, e.g. 2026-05-14T22:00:00+01:00.")
@click.option("--start-from-name", "name_pattern", metavar="PATTERN",
              help="strftime pattern of the start time in the file name, e.g. "
                   "MP2_%Y%m%d_%H%M%S.")
@click.option("--timezone", metavar="TZ",
              help="Local zone of the periods (and of bext/name times), e.g. Europe/London "
                   "(IANA names follow daylight saving time) or +01:00.")
@click.option("--preset", "preset_name", default="lden", show_default=True,
              help="lden (07/19/23 h, +5/+10 dB) or ldn (day 07-22, night 22-07, +10 dB).")
@click.option("--day", type=float, metavar="H", help="Start of the day period, h (7).")
@click.option("--evening", type=float, metavar="H", help="Start of the evening, h (19).")
@click.option("--night", type=float, metavar="H", help="Start of the night, h (23).")
@click.option("--evening-penalty", type=float, metavar="DB", help="Evening penalty, dB (5).")
@click.option("--night-penalty", type=float, metavar="DB", help="Night penalty, dB (10).")
@click.option("--min-coverage", type=float, default=DEFAULT_MIN_COVERAGE, show_default=True,
              help="Fraction of a period to be measured; below it a warning.")
@click.option("--tonality/--no-tonality", default=True, show_default=True,
              help="One-third-octave tone screen.")
@click.option("--by-file", is_flag=True,
              help="Batch folder: rate each measurement id separately.")
@click.option("--json", "as_json", is_flag=True, help="Print the result as JSON.")
@click.option("--output", "-o", type=click.Path(readable=False),
              help="Write the per-day table to this CSV file (atomic).")
@click.option("--force", is_flag=True, help="Replace an output file that exists.")
def rating_command(
    source: str, cal_path: str | None, cal_tone: str | None, cal_level: float | None,
    cal_span: str | None, full_scale_level: float | None, channel: int, interval: str | None,
    start: str | None, name_pattern: str | None, timezone: str | None, preset_name: str,
    day: float | None, evening: float | None, night: float | None,
    evening_penalty: float | None, night_penalty: float | None, min_coverage: float,
    tonality: bool, by_file: bool, as_json: bool, output: str | None, force: bool,
) -> None:
    """Day-evening-night rating (Lden or Ldn) per day and over a survey, with a tone screen.

    \b
    Example (invented survey: a 48 h recording beside a bottling plant):
      bandmeter rating plant_mp1.wav --cal day1.cal.json --start-from-name \\
          MP1_%Y%m%d_%H%M%S --timezone Europe/London -o mp1_lden.csv
      bandmeter rating survey_out/ --by-file --json

    \b
    SOURCE is a recording (analysed in clock-aligned intervals, default 1 h, with
    one-third-octave bands for the tone screen) or a `bandmeter batch --out` folder
    (intervals.parquet or .csv; bands table for the tone screen).

    \b
    Lden = 10 lg{(12x10^(Ld/10) + 4x10^((Le+5)/10) + 8x10^((Ln+10)/10))/24}
    (Directive 2002/49/EC Annex I); period weights are the nominal hours. A night
    belongs to the date it starts (23:00 on the 14th to 07:00 on the 15th: the 14th).
    Intervals crossing a period boundary are split by time (uniform energy). Periods
    follow the local wall clock (--timezone; daylight-saving days have 23/25 h;
    batch start times carry fixed offsets, so give an IANA zone such as
    Europe/London for a survey across a clock change).
    A period measured below --min-coverage gets a warning; a day needs every period
    for its rating. The survey value is the energy average of each period over all
    measured time, then the rating formula.

    \b
    Tone screen (ISO 1996-2:2017 Annex K / BS 4142:2014 Annex C): a band 15 dB
    (25-125 Hz), 8 dB (160-400 Hz) or 5 dB (500 Hz-10 kHz) above both neighbours.
    These differences are quoted from memory, unconfirmed.

    --json: one object with "days", "overall" (a list per id with --by-file),
    "periods", "tonality" (overall tones: nominal_hz, margin_db...), "warnings" and
    "caution". Results are indicative: rating and compliance follow the applicable
    local regulations, standards and licensed practice.
    """
    from ..clock import parse_timezone

    periods = periods_from_options(preset_name, day, evening, night, evening_penalty,
                                   night_penalty)
    if start is not None and name_pattern is not None:
        raise SettingsError("give --start or --start-from-name, not both")
    tz = parse_timezone(timezone) if timezone else None
    if output is not None:
        from ..outputs import check_writable

        check_writable(output, force)
    warnings: list[str] = []
    start_info = None
    if os.path.isdir(source):
        _check_folder_options(cal=cal_path, cal_tone=cal_tone, cal_level=cal_level,
                              cal_span=cal_span, full_scale_level=full_scale_level,
                              interval=interval, start=start, start_from_name=name_pattern)
        surveys = _batch_surveys(source, tz, by_file, tonality, warnings)
        kind = "batch"
    else:
        if by_file:
            raise SettingsError("--by-file applies to a batch output folder")
        calibration = resolve_calibration(cal_path, cal_tone, cal_level, cal_span,
                                          full_scale_level, channel)
        survey, start_info = _recording_survey(
            source, calibration, channel, interval or DEFAULT_INTERVAL, start, name_pattern,
            tz, tonality, warnings)
        surveys, kind = [survey], "recording"
    ratings = _rate(surveys, periods, min_coverage, by_file, kind, warnings)
    if output is not None:
        from ..tables import write_csv

        label = (lambda s: s.label) if by_file else (lambda s: None)
        write_csv(output, [row for s, r in ratings for row in day_rows(r, label(s))],
                  force=force)
    if as_json:
        echo_json(to_json(source, kind, ratings, start_info, tonality, by_file, warnings))
    else:
        click.echo(render(source, ratings, start_info, tonality))
        if output is not None:
            click.echo(f"\nwritten: {output}")
    for message in warnings:
        warn(message)


def _rate(surveys: Sequence[_Survey], periods: Periods, min_coverage: float, by_file: bool,
          kind: str, warnings: list[str]) -> list[tuple[_Survey, RatingResult]]:
    out = []
    for s in surveys:
        rating = rate_intervals(s.starts, s.durations_s, s.laeq_db, periods, min_coverage)
        prefix = f"{s.label}: " if by_file else ""
        warnings.extend(prefix + w for w in rating.warnings)
        if kind == "batch" and not by_file and any("overlap" in w for w in rating.warnings):
            warnings.append("use --by-file to rate each measurement id separately")
        out.append((s, rating))
    return out
