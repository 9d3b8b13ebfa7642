"""``bandmeter exposure``: daily noise exposure LEX,8h of a set of tasks (indicative only)."""

from __future__ import annotations

import math
import textwrap
from pathlib import Path
from typing import Any

import click

from ..assess.exposure import (
    DOSE_CRITERIA,
    DoseResult,
    ExposureAssessment,
    Task,
    ValueComparison,
    assess_exposure,
    parse_duration_h,
    tasks_from_batch,
)
from ..cli import cli, echo_json, warn
from ..engine import analyse_file
from ..errors import SettingsError
from ..results import LevelResult
from ..tables import write_csv
from ..textout import fmt_db, key_values, table
from .options import calibration_options, channel_option, output_options, resolve_calibration

TASK_FORMAT = "NAME:LAEQ:DURATION[:LCPEAK]"
CRITERION_NAMES = ("eu", *DOSE_CRITERIA)


def _number(text: str, what: str) -> float:
    try:
        return float(text)
    except ValueError:
        raise SettingsError(f"{what} must be a number, got {text!r}") from None


def parse_task(spec: str) -> Task:
    """A task from ``NAME:LAEQ:DURATION[:LCPEAK]``, e.g. ``"grinding:92.5:2.5h:131"``.

    LAEQ in dB(A), DURATION with a unit (2.5h, 90min, 1h30min), LCPEAK in dB(C).
    """
    parts = [p.strip() for p in spec.split(":")]
    if len(parts) not in (3, 4):
        raise SettingsError(
            f"--task {spec!r}: use {TASK_FORMAT}, e.g. grinding:92.5:2.5h or cutting:91:90min:128"
        )
    try:
        laeq_db = _number(parts[1], "LAeq")
        duration_h = parse_duration_h(parts[2])
        lcpeak_db = _number(parts[3], "LCpeak") if len(parts) == 4 and parts[3] else None
        return Task(parts[0], laeq_db, duration_h, lcpeak_db)
    except SettingsError as exc:
        raise SettingsError(f"--task {spec!r}: {exc}") from None


def recorded_task(
    path: str, hours: float, name: str | None, calibration: Any, channel: int
) -> tuple[Task, LevelResult]:
    """A task whose LAeq and LCpeak are measured from a recording representing it.

    Parameters
    ----------
    path : str
        Recording.
    hours : float
        Daily duration of the task, h.
    name : str or None
        Task name (default: the file name without extension).
    calibration : Calibration
        Chain calibration (required: exposure needs levels re 20 uPa).
    channel : int
        Channel, 1-based.
    """
    result = analyse_file(path, calibration, None, channel=channel)
    metrics = result.overall.metrics
    task = Task(name or Path(path).stem, float(metrics["LAeq"]), hours,
                None if metrics.get("LCpeak") is None else float(metrics["LCpeak"]))
    return task, result


def _wrapped(text: str, indent: str = "") -> str:
    return textwrap.fill(text, width=96, initial_indent=indent, subsequent_indent=indent + "  ")


def _comparison_text(c: ValueComparison) -> str:
    reasons = [what for what, hit in (("LEX,8h", c.lex_exceeded), ("peak", c.peak_exceeded))
               if hit]
    if reasons:
        return f"EXCEEDED ({', '.join(reasons)})"
    return "not exceeded" + (" (peak unknown)" if c.peak_exceeded is None else "")


def _tasks_text(assessment: ExposureAssessment) -> str:
    rows = [[c.task.name, fmt_db(c.task.laeq_db), f"{c.task.duration_h:.2f}",
             fmt_db(c.partial_lex_8h_db), f"{c.energy_share_percent:.1f}",
             fmt_db(c.task.lcpeak_db)] for c in assessment.contributions]
    head = ("task", "LAeq dB(A)", "hours", "partial LEX,8h dB(A)", "share %", "LCpeak dB(C)")
    totals = key_values([
        ("total duration", f"{assessment.total_duration_h:.2f} h"),
        ("LAeq over it", f"{fmt_db(assessment.laeq_total_db)} dB(A)"),
        ("LEX,8h", f"{fmt_db(assessment.lex_8h_db)} dB(A)"),
        ("highest LCpeak", f"{fmt_db(assessment.max_lcpeak_db)} dB(C)"),
    ])
    return "\n".join(["Daily noise exposure (ISO 9612 task-based, T0 = 8 h)",
                      table(head, rows, indent="  "), "", totals])


def _eu_text(assessment: ExposureAssessment) -> str:
    rows = [[c.value.name, fmt_db(c.value.lex_8h_db, 0), fmt_db(c.value.lcpeak_db, 0),
             _comparison_text(c)] for c in assessment.eu_comparisons]
    lines = ["Directive 2003/10/EC exposure values (levels without hearing protection)",
             table(("value", "LEX,8h dB(A)", "LCpeak dB(C)", "result"), rows, indent="  ")]
    lines += [_wrapped(f"note: {n}", "  ") for n in assessment.notes]
    return "\n".join(lines)


def _dose_basis(d: DoseResult) -> str:
    return f"{d.criterion.name}: {d.criterion.source}"


def _doses_text(assessment: ExposureAssessment) -> str:
    rows = [[d.criterion.name, f"{d.dose_percent:.1f}", f"{d.projected_8h_dose_percent:.1f}",
             "below threshold" if math.isinf(d.twa_db) else fmt_db(d.twa_db)]
            for d in assessment.doses]
    head = ("criterion", "dose %", "8 h projected %", "TWA dB(A)")
    lines = ["Noise dose (each task counted at its LAeq)", table(head, rows, indent="  ")]
    lines += [_wrapped(_dose_basis(d), "  ") for d in assessment.doses]
    return "\n".join(lines)


def render_exposure(assessment: ExposureAssessment) -> str:
    """Readable terminal rendering of an exposure assessment, ending with the caution."""
    parts = [_tasks_text(assessment), _eu_text(assessment)]
    if assessment.doses:
        parts.append(_doses_text(assessment))
    parts.append(_wrapped(f"CAUTION: {assessment.caution}"))
    return "\n\n".join(parts)


def exposure_rows(assessment: ExposureAssessment) -> list[dict[str, Any]]:
    """CSV rows: one per task, then a ``total`` row with LEX,8h and the caution."""
    rows: list[dict[str, Any]] = []
    for i, c in enumerate(assessment.contributions):
        row = {"row": "task", "task": c.task.name, "LAeq_dBA": c.task.laeq_db,
               "duration_h": c.task.duration_h, "LCpeak_dBC": c.task.lcpeak_db,
               "partial_LEX_8h_dBA": c.partial_lex_8h_db,
               "energy_share_percent": c.energy_share_percent}
        row.update({f"{d.criterion.name}_dose_percent": d.task_doses_percent[i]
                    for d in assessment.doses})
        rows.append(row)
    total = {"row": "total", "task": "all tasks", "LAeq_dBA": assessment.laeq_total_db,
             "duration_h": assessment.total_duration_h, "LCpeak_dBC": assessment.max_lcpeak_db,
             "partial_LEX_8h_dBA": assessment.lex_8h_db, "energy_share_percent": 100.0}
    total.update({f"{d.criterion.name}_dose_percent": d.dose_percent for d in assessment.doses})
    total.update({f"{d.criterion.name}_TWA_dBA": d.twa_db for d in assessment.doses})
    total.update({"LEX_8h_dBA": assessment.lex_8h_db,
                  "exceeded": "; ".join(assessment.exceeded_values) or "none",
                  "caution": assessment.caution})
    rows.append(total)
    return rows


def _check_recording_options(from_file: str | None, hours: float | None, name: str | None,
                             calibration_given: bool) -> None:
    if from_file is None:
        extra = [opt for opt, value in (("--hours", hours), ("--name", name)) if value is not None]
        if calibration_given:
            extra.append("calibration options")
        if extra:
            raise SettingsError(f"{' and '.join(extra)} go with --from FILE")
    elif hours is None:
        raise SettingsError("--from needs --hours: the daily duration of the task it represents")


@cli.command("exposure")
@click.option("--task", "task_specs", multiple=True, metavar=TASK_FORMAT,
              help="A task of the day: name, LAeq in dB(A), duration with a unit (2.5h, 90min, "
                   "1h30min), optional LCpeak in dB(C). Repeat for each task.")
@click.option("--from", "from_file", type=click.Path(dir_okay=False),
              help="A recording representing one task: its LAeq and LCpeak are measured "
                   "(needs a calibration and --hours).")
@click.option("--from-batch", "from_batch", type=click.Path(file_okay=False, exists=True),
              metavar="BATCH_DIR",
              help="A batch output folder: each analysed recording is a task with its "
                   "measured LAeq, LCpeak and duration (with --hours: together one task of "
                   "that many hours at their average LAeq).")
@click.option("--hours", type=float,
              help="Daily duration of the --from task (or of the --from-batch recordings "
                   "together), h.")
@click.option("--name", "from_name", help="Name of the --from task (default: the file name).")
@calibration_options
@channel_option
@click.option("--criterion", "criteria", multiple=True, default=("eu",), show_default=True,
              type=click.Choice(CRITERION_NAMES, case_sensitive=False),
              help="Also the noise dose for niosh, osha-hc or osha-pel (repeatable); the "
                   "LEX,8h and the Directive 2003/10/EC values are always shown.")
@output_options
def exposure_command(
    task_specs: tuple[str, ...], from_file: str | None, from_batch: str | None,
    hours: float | None,
    from_name: str | None, cal_path: str | None, cal_tone: str | None, cal_level: float | None,
    cal_span: str | None, full_scale_level: float | None, channel: int,
    criteria: tuple[str, ...], as_json: bool, output: str | None, force: bool,
) -> None:
    """Daily noise exposure LEX,8h of a working day's tasks, with doses (indicative only).

    \b
    Example (invented workshop day):
      bandmeter exposure --task "cutting:91.5:2h:128" --task "bench work:83:5h30min"
      bandmeter exposure --from press_line.wav --cal day1.cal.json --hours 6 \\
          --task "break room:68:1h" --criterion osha-hc -o day.csv
      bandmeter exposure --from-batch fitter_day/results --criterion niosh
    LEX,8h = 10 lg[sum (Tm/8 h) 10^(0.1 LAeq,Tm)] (ISO 9612), compared with the
    Directive 2003/10/EC values 80/85/87 dB(A) and 135/137/140 dB(C) peak (the limit value
    allows for hearing protectors, the action values do not; levels here are without them).
    Noise dose D = 100 sum(C/T) % with T = 8 h / 2^((L - criterion)/exchange) (29 CFR
    1910.95 App. A; NIOSH REL). The results are indicative only: not a substitute for an
    assessment by a competent person under the applicable local regulations.
    """
    cal_args = (cal_path, cal_tone, cal_level, cal_span, full_scale_level)
    if from_batch is not None:
        if from_file is not None:
            raise SettingsError("give --from FILE or --from-batch DIR, not both")
        if any(v is not None for v in cal_args) or from_name is not None:
            raise SettingsError("--from-batch uses the batch's own calibrations; drop the "
                                "calibration options and --name")
    else:
        _check_recording_options(from_file, hours, from_name,
                                 any(v is not None for v in cal_args))
    tasks = [parse_task(spec) for spec in task_specs]
    if from_batch is not None:
        tasks.extend(tasks_from_batch(from_batch, hours))
    if output is not None:
        from ..outputs import check_writable

        check_writable(output, force)  # fail before the analysis, not after
    recording = None
    if from_file is not None and hours is not None:
        calibration = resolve_calibration(*cal_args, channel)
        task, recording = recorded_task(from_file, hours, from_name, calibration, channel)
        tasks.append(task)
    if not tasks:
        raise SettingsError(f"no task given: use --task {TASK_FORMAT}, --from FILE --hours H "
                            "or --from-batch DIR")
    doses = [c.lower() for c in dict.fromkeys(criteria) if c.lower() != "eu"]
    assessment = assess_exposure(tasks, doses)
    if output is not None:
        write_csv(output, exposure_rows(assessment), force=force)
    if as_json:
        data = assessment.to_dict()
        if recording is not None:
            data["recording"] = {"file": recording.file, "channel": recording.channel,
                                 "duration_s": recording.duration_s, "task": tasks[-1].name}
        echo_json(data)
    else:
        if recording is not None:
            click.echo(f"{tasks[-1].name}: measured from {recording.file} (channel "
                       f"{recording.channel}, {recording.duration_s:.1f} s), counted as "
                       f"{tasks[-1].duration_h:g} h\n")
        click.echo(render_exposure(assessment))
        if output is not None:
            click.echo(f"\nwritten: {output}")
    if recording is not None:
        for message in recording.warnings:
            warn(message)

