"""``bandmeter events``: noise events of a recording, and levels without them."""

from __future__ import annotations

import os

import click

from ..assess.events import EventCriteria, detect_events
from ..assess.exclusions import apply_exclusions, read_ranges
from ..cli import cli, echo_json, warn
from ..engine import AnalysisSettings, analyse_file
from ..errors import SettingsError
from ..intervals import parse_duration
from ..tables import write_csv
from ..textout import fmt_db, key_values, table
from .levels import parse_start
from .options import calibration_options, channel_option, resolve_calibration


def _exclusion_lines(title: str, data: dict) -> list[str]:
    rows = []
    for name in ("ambient", "residual", "excluded"):
        part = data[name]
        rows.append([name, f"{part['duration_s']:.1f}", fmt_db(part["LAeq"]),
                     fmt_db(part["LAF10"]), fmt_db(part["LAF90"])])
    return ["", title, table(("part", "dur s", "LAeq", "LAF10", "LAF90"), rows, indent="  ")]


EVENT_COLUMNS = ["start_s", "end_s", "duration_s", "start_time", "end_time", "LAFmax", "LAE",
                 "LAeq", "threshold_db"]


def _band_designator(bands: str | None) -> int | None:
    if bands is None:
        return None
    from ..engine import BAND_NAMES

    if bands.lower() not in BAND_NAMES:
        raise SettingsError(f"--bands must be octave, third, 6, 12 or 24, got {bands!r}")
    return BAND_NAMES[bands.lower()]


def _batch_folder(folder: str, criteria: EventCriteria, step_s: float, b: int | None,
                  as_json: bool, output: str | None, force: bool) -> None:
    """``events BATCH_DIR``: the events of every recording of a batch."""
    from ..assess.batch_events import batch_events

    if output is not None:
        from ..outputs import check_writable

        check_writable(output, force)
    found = batch_events(folder, criteria, step_s, b)
    rows = [{"id": m.id, "file": m.file, **e.to_dict()}
            for m in found if m.result for e in m.result.events]
    if output is not None:
        write_csv(output, rows, force=force, columns=["id", "file", *EVENT_COLUMNS])
    if as_json:
        echo_json({"folder": folder, "rule": criteria.describe(), "measurements": [
            {"id": m.id, "file": m.file, "error": m.error,
             **(m.result.to_dict() if m.result else {})} for m in found]})
    else:
        lines = [folder, key_values([("rule", criteria.describe()),
                                     ("measurements", len(found))])]
        table_rows = [[m.file, str(len(m.result.events)) if m.result else "-",
                       m.error or ""] for m in found]
        lines += ["", table(("recording", "events", "error"), table_rows, indent="  ")]
        click.echo("\n".join(lines))
    for m in found:
        if m.error:
            warn(f"{m.file}: {m.error}")
    if any(m.error for m in found):
        raise SystemExit(1)


@cli.command("events")
@click.argument("file", type=click.Path(readable=False))
@calibration_options
@channel_option
@click.option("--threshold", type=float, help="Absolute threshold, dB (default: relative).")
@click.option("--above-background", type=float, default=10.0, show_default=True,
              help="Without --threshold: dB above the running LAF90.")
@click.option("--background-window", default="5min", show_default=True,
              help="Block over which the running background LAF90 is taken.")
@click.option("--hysteresis", type=float, default=3.0, show_default=True,
              help="An event ends this many dB below the threshold.")
@click.option("--min-duration", default="1s", show_default=True, help="Shortest event.")
@click.option("--merge-gap", default="2s", show_default=True,
              help="Events closer than this are merged.")
@click.option("--time-weighting", type=click.Choice(["F", "S"], case_sensitive=False),
              default="F", show_default=True, help="Detector time weighting.")
@click.option("--step", default="100ms", show_default=True,
              help="Time resolution of the level history.")
@click.option("--bands", metavar="octave|third|6|12|24",
              help="Also the band spectrum (Leq) of each event and of the exclusions.")
@click.option("--exclude", "exclude_path", type=click.Path(dir_okay=False),
              help="CSV of time ranges (start,end[,label]) to exclude: levels with and without.")
@click.option("--start", metavar="ISO8601", help="Clock time of the first sample.")
@click.option("--json", "as_json", is_flag=True, help="Print the result as JSON.")
@click.option("--output", "-o", type=click.Path(readable=False),
              help="Write the event table to this CSV file (atomic).")
@click.option("--force", is_flag=True, help="Replace an existing output file.")
def events_command(
    file: str, cal_path: str | None, cal_tone: str | None, cal_level: float | None,
    cal_span: str | None, full_scale_level: float | None, channel: int,
    threshold: float | None, above_background: float, background_window: str,
    hysteresis: float, min_duration: str, merge_gap: str, time_weighting: str, step: str,
    bands: str | None, exclude_path: str | None, start: str | None, as_json: bool,
    output: str | None, force: bool,
) -> None:
    """Noise events: where the A level exceeds a threshold long enough, and the levels
    with and without them (ambient and residual).

    \b
    Example (invented survey):
      bandmeter events mp2_night.wav --cal mp2.cal.json --min-duration 3s
      bandmeter events mp2_night.wav --cal mp2.cal.json --exclude speech.csv --json
    With no --threshold an event is 10 dB above the running LAF90 of 5-minute blocks. Per
    event: start, end, duration, LAFmax, LAE and LAeq; counts per hour. FILE may also be a
    `bandmeter batch` output folder: every recording in it is read again with the
    calibration and start time the batch recorded.
    """
    criteria = EventCriteria(
        threshold_db=threshold, background_offset_db=above_background,
        background_window_s=parse_duration(background_window), hysteresis_db=hysteresis,
        min_duration_s=parse_duration(min_duration), merge_gap_s=parse_duration(merge_gap),
        time_weighting=time_weighting,
    )
    b = _band_designator(bands)
    if os.path.isdir(file):
        given = [n for n, v in (("--cal", cal_path), ("--cal-tone", cal_tone),
                                ("--full-scale-level", full_scale_level),
                                ("--exclude", exclude_path), ("--start", start)) if v]
        if given:
            raise SettingsError(f"{file} is a batch folder: its recordings keep their own "
                                f"calibration and start; drop {', '.join(given)}")
        _batch_folder(file, criteria, parse_duration(step), b, as_json, output, force)
        return
    calibration = resolve_calibration(cal_path, cal_tone, cal_level, cal_span,
                                      full_scale_level, channel)
    if calibration is None:
        raise SettingsError("no calibration given; pass --cal, --cal-tone with --cal-level or "
                            "--full-scale-level")
    if output is not None:
        from ..outputs import check_writable

        check_writable(output, force)
    origin = parse_start(start)
    result = analyse_file(file, calibration,
                          AnalysisSettings(history_s=parse_duration(step), bands=b),
                          channel=channel, start_time=origin)
    history = result.history
    found = detect_events(history, criteria)
    ranges = read_ranges(exclude_path, origin) if exclude_path else []
    from ..assess.exclusions import TimeRange

    without_events = apply_exclusions(history, [TimeRange(e.start_s, e.end_s, "event")
                                                for e in found.events])
    user = apply_exclusions(history, ranges) if ranges else None
    if output is not None:
        write_csv(output, [e.to_dict() for e in found.events], force=force,
                  columns=EVENT_COLUMNS)
    if as_json:
        data = {"file": file, **found.to_dict(), "without_events": without_events,
                "exclusions": user, "warnings": result.warnings}
        echo_json(data)
    else:
        lines = [file, key_values([("rule", found.rule), ("step", f"{history.step_s:g} s"),
                                   ("events", len(found.events))])]
        rows = [[e.start_time[11:19] if e.start_time else f"{e.start_s:.1f}",
                 f"{e.duration_s:.1f}", fmt_db(e.LAFmax), fmt_db(e.LAE), fmt_db(e.LAeq)]
                for e in found.events]
        if rows:
            lines += ["", table(("start", "dur s", "LAFmax", "LAE", "LAeq"), rows,
                                indent="  ")]
        lines += _exclusion_lines("Without the events (residual)", without_events)
        if user is not None:
            lines += _exclusion_lines(f"Without the ranges of {exclude_path} "
                                      f"({user['excluded_s']:.1f} s excluded)", user)
        click.echo("\n".join(lines))
        if output is not None:
            click.echo(f"\nwritten: {output}")
    for message in result.warnings:
        warn(message)
