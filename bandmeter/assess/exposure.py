"""Occupational noise exposure: daily exposure level LEX,8h, action values and noise dose.

Indicative arithmetic only (see :data:`CAUTION`). Sources and their confidence, as recorded in
``REFERENCE_VALUES.md`` section 7:

* LEX,8h = LAeq,Te + 10 lg(Te/T0), T0 = 8 h: ISO 9612:2009; Directive 2003/10/EC Art. 2 via
  ISO 1999:1990 3.5-3.6 (confirmed). The task-based sum
  10 lg[sum_m (Tm/T0) 10^(0.1 LAeq,Tm)] is ISO 9612:2009 (from memory; algebraically
  identical to the single-task formula).
* Exposure values: Directive 2003/10/EC Art. 3 (confirmed).
* Noise dose and TWA: 29 CFR 1910.95 Appendix A (confirmed); NIOSH REL: NIOSH Criteria
  Document 98-126 (1998) (confirmed).
"""

from __future__ import annotations

import math
import re
from collections.abc import Iterable, Sequence
from dataclasses import dataclass
from typing import Any

from ..errors import SettingsError
from ..intervals import parse_duration
from ..levels import average_levels, combine_levels, db_from_power_ratio

#: Reference duration of the daily exposure level, h (ISO 9612:2009, T0 = 8 h; confirmed).
T0_H = 8.0

#: Longest working day accepted, h.
MAX_DAY_H = 24.0

#: Printed with every assessment, in text and JSON.
CAUTION = (
    "Indicative only: not a substitute for an assessment by a competent person under the "
    "applicable local regulations; hearing-protection decisions follow local codes, "
    "standards and licensed practice."
)

#: Directive 2003/10/EC Art. 3 on hearing protectors (confirmed).
PROTECTOR_NOTE = (
    "Directive 2003/10/EC Art. 3: the exposure limit values take account of the attenuation "
    "of the hearing protectors worn, the action values do not. The levels here are without "
    "hearing protection, so exceeding the limit value here does not by itself mean the limit "
    "is exceeded at the ear."
)


@dataclass(frozen=True)
class Task:
    """One task of a working day.

    Parameters
    ----------
    name : str
        Task name.
    laeq_db : float
        A-weighted equivalent level of the task, LAeq,Tm, dB(A) re 20 uPa.
    duration_h : float
        Daily duration of the task, Tm, h (> 0).
    lcpeak_db : float, optional
        C-weighted peak level during the task, LCpeak, dB(C) re 20 uPa.
    """

    name: str
    laeq_db: float
    duration_h: float
    lcpeak_db: float | None = None

    def __post_init__(self) -> None:
        if not self.name.strip():
            raise SettingsError("a task needs a name")
        _require_finite(self.laeq_db, f"task {self.name!r}: LAeq")
        _require_finite(self.duration_h, f"task {self.name!r}: duration")
        if not self.duration_h > 0:
            raise SettingsError(
                f"task {self.name!r}: duration must be positive, got {self.duration_h!r} h"
            )
        if self.lcpeak_db is not None:
            _require_finite(self.lcpeak_db, f"task {self.name!r}: LCpeak")


def _require_finite(value: float, what: str) -> None:
    if not isinstance(value, (int, float)) or not math.isfinite(value):
        raise SettingsError(f"{what} must be a finite number, got {value!r}")


def _checked_tasks(tasks: Iterable[Task]) -> tuple[Task, ...]:
    """The tasks as a tuple; refuses none, and days longer than :data:`MAX_DAY_H`."""
    checked = tuple(tasks)
    if not checked:
        raise SettingsError("no task given: at least one task (level and duration) is needed")
    total_h = sum(t.duration_h for t in checked)
    if total_h > MAX_DAY_H:
        raise SettingsError(
            f"the tasks add up to {total_h:g} h, more than a {MAX_DAY_H:g} h day"
        )
    return checked


# --------------------------------------------------------------------------------------------
# LEX,8h (ISO 9612)


@dataclass(frozen=True)
class TaskContribution:
    """What one task adds to the daily exposure.

    Attributes
    ----------
    task : Task
    partial_lex_8h_db : float
        LEX,8h of the task alone, LAeq,Tm + 10 lg(Tm/T0), dB(A).
    energy_share_percent : float
        Share of the task in the daily A-weighted sound exposure, %.
    """

    task: Task
    partial_lex_8h_db: float
    energy_share_percent: float


def partial_lex_8h(task: Task) -> float:
    """LEX,8h of one task alone: LAeq,Tm + 10 lg(Tm/T0), dB(A) (ISO 9612:2009; confirmed)."""
    return float(task.laeq_db + db_from_power_ratio(task.duration_h / T0_H))


def lex_8h(tasks: Iterable[Task]) -> float:
    """Task-based daily noise exposure level, dB(A).

    LEX,8h = 10 lg[sum_m (Tm/T0) 10^(0.1 LAeq,Tm)], T0 = 8 h (ISO 9612:2009 task-based
    strategy; from memory, algebraically identical to the confirmed LAeq,Te + 10 lg(Te/T0)).
    E.g. 4 h at 90 dB(A) gives 86.99 dB(A) (computed).

    Parameters
    ----------
    tasks : iterable of Task
        The tasks of the day (total at most 24 h).

    Returns
    -------
    float
        LEX,8h, dB(A).
    """
    return combine_levels([partial_lex_8h(t) for t in _checked_tasks(tasks)])


def task_contributions(tasks: Iterable[Task]) -> list[TaskContribution]:
    """Partial LEX,8h and energy share of each task, in the order given."""
    checked = _checked_tasks(tasks)
    partials = [partial_lex_8h(t) for t in checked]
    total = combine_levels(partials)
    return [
        TaskContribution(t, p, 100.0 * 10.0 ** ((p - total) / 10.0))
        for t, p in zip(checked, partials, strict=True)
    ]


# --------------------------------------------------------------------------------------------
# Directive 2003/10/EC exposure values


@dataclass(frozen=True)
class ExposureValue:
    """One exposure value of Directive 2003/10/EC Art. 3.

    Attributes
    ----------
    name : str
    lex_8h_db : float
        Daily exposure level, dB(A).
    lcpeak_db : float
        Peak sound pressure as a C-weighted peak level, dB(C) re 20 uPa.
    ppeak_pa : float
        The same peak as the Directive states it, Pa.
    includes_hearing_protection : bool
        True for the limit value: compared with the exposure at the ear, protectors worn.
    """

    name: str
    lex_8h_db: float
    lcpeak_db: float
    ppeak_pa: float
    includes_hearing_protection: bool


#: Directive 2003/10/EC Art. 3 (confirmed): 80 dB(A) / 112 Pa, 85 dB(A) / 140 Pa,
#: 87 dB(A) / 200 Pa. The dB(C) values 135 / 137 / 140 are computed from the pascals
#: (134.96, 136.9, 140.0) and confirmed on a secondary page.
EU_EXPOSURE_VALUES: tuple[ExposureValue, ...] = (
    ExposureValue("lower exposure action value", 80.0, 135.0, 112.0, False),
    ExposureValue("upper exposure action value", 85.0, 137.0, 140.0, False),
    ExposureValue("exposure limit value", 87.0, 140.0, 200.0, True),
)


@dataclass(frozen=True)
class ValueComparison:
    """An exposure compared with one exposure value.

    ``*_exceeded`` means strictly above the value; ``peak_exceeded`` is None when no task has
    a peak level.
    """

    value: ExposureValue
    lex_exceeded: bool
    peak_exceeded: bool | None

    @property
    def exceeded(self) -> bool:
        """The LEX,8h or the peak is above the value."""
        return self.lex_exceeded or bool(self.peak_exceeded)


def compare_with_eu_values(lex_db: float, max_lcpeak_db: float | None) -> list[ValueComparison]:
    """Compare a daily exposure (without hearing protection) with the Directive's values."""
    return [
        ValueComparison(
            v,
            lex_db > v.lex_8h_db,
            None if max_lcpeak_db is None else max_lcpeak_db > v.lcpeak_db,
        )
        for v in EU_EXPOSURE_VALUES
    ]


# --------------------------------------------------------------------------------------------
# Noise dose (OSHA, NIOSH)


@dataclass(frozen=True)
class DoseCriterion:
    """A noise-dose criterion.

    Parameters
    ----------
    name : str
    criterion_db : float
        Level giving 100 % dose in ``criterion_hours``, dB(A).
    exchange_db : float
        Exchange rate: level change that halves or doubles the allowed time, dB.
    threshold_db : float, optional
        Levels below it add no dose, dB(A); None counts every level.
    criterion_hours : float
        Criterion duration, h.
    source : str
        Citation and confidence.
    """

    name: str
    criterion_db: float
    exchange_db: float
    threshold_db: float | None = None
    criterion_hours: float = 8.0
    source: str = ""

    def __post_init__(self) -> None:
        _require_finite(self.criterion_db, f"criterion {self.name!r}: criterion level")
        if not (math.isfinite(self.exchange_db) and self.exchange_db > 0):
            raise SettingsError(f"criterion {self.name!r}: exchange rate must be > 0 dB")
        if not (math.isfinite(self.criterion_hours) and self.criterion_hours > 0):
            raise SettingsError(f"criterion {self.name!r}: criterion duration must be > 0 h")


#: Dose criteria by CLI name.
DOSE_CRITERIA: dict[str, DoseCriterion] = {
    # NIOSH REL: 85 dBA 8-h TWA, 3 dB exchange (confirmed). REFERENCE_VALUES.md gives no
    # threshold for the REL, so none is applied.
    "niosh": DoseCriterion(
        "niosh", 85.0, 3.0, None, 8.0,
        "NIOSH REL, Criteria Document 98-126 (1998): 85 dBA, 3 dB exchange (confirmed); "
        "no threshold",
    ),
    # OSHA: 90 dBA, 5 dB exchange (29 CFR 1910.95 App. A, confirmed). The 80 dB lower bound of
    # the hearing-conservation dose (1910.95(d)(2)(i)) is from memory, unconfirmed; the
    # 130 dB upper bound of that range is not applied.
    "osha-hc": DoseCriterion(
        "osha-hc", 90.0, 5.0, 80.0, 8.0,
        "29 CFR 1910.95 App. A: 90 dBA, 5 dB exchange (confirmed); hearing-conservation "
        "dose from 80 dB, 1910.95(d)(2)(i) (from memory, unconfirmed)",
    ),
    # OSHA PEL compliance integrates 90-140 dB (1910.95(d)(2)(i), from memory, unconfirmed).
    "osha-pel": DoseCriterion(
        "osha-pel", 90.0, 5.0, 90.0, 8.0,
        "29 CFR 1910.95 App. A: 90 dBA, 5 dB exchange (confirmed); PEL dose from 90 dB, "
        "1910.95(d)(2)(i) (from memory, unconfirmed)",
    ),
}


def dose_criterion(name: str | DoseCriterion) -> DoseCriterion:
    """A preset of :data:`DOSE_CRITERIA` by name (a DoseCriterion passes through)."""
    if isinstance(name, DoseCriterion):
        return name
    try:
        return DOSE_CRITERIA[name.lower()]
    except KeyError:
        raise SettingsError(
            f"unknown dose criterion {name!r}; use one of {', '.join(DOSE_CRITERIA)}"
        ) from None


def reference_duration_h(level_db: float, criterion: DoseCriterion) -> float:
    """Time at ``level_db`` that gives 100 % dose, h.

    T(L) = criterion_hours / 2^((L - criterion)/exchange) (29 CFR 1910.95 App. A, footnote to
    Table G-16a; confirmed, reproduces every table entry). Infinite below the threshold.
    """
    if criterion.threshold_db is not None and level_db < criterion.threshold_db:
        return math.inf
    return criterion.criterion_hours / 2.0 ** (
        (level_db - criterion.criterion_db) / criterion.exchange_db
    )


def twa_from_dose(dose_percent: float, criterion: DoseCriterion) -> float:
    """Time-weighted average level over ``criterion_hours`` from a dose, dB(A).

    TWA = criterion + exchange/lg 2 * lg(D/100); for OSHA 16.61 lg(D/100) + 90
    (29 CFR 1910.95 App. A; confirmed). A zero dose gives -inf.
    """
    if dose_percent < 0 or not math.isfinite(dose_percent):
        raise SettingsError(f"dose must be a finite percentage >= 0, got {dose_percent!r}")
    ratio_db = float(db_from_power_ratio(dose_percent / 100.0)) / 10.0  # lg(D/100)
    return criterion.criterion_db + criterion.exchange_db / math.log10(2.0) * ratio_db


@dataclass(frozen=True)
class DoseResult:
    """Noise dose of a day under one criterion.

    Attributes
    ----------
    criterion : DoseCriterion
    dose_percent : float
        D = 100 sum(Ci/Ti), %.
    projected_8h_dose_percent : float
        The dose of 8 h with the same exposure pattern, %.
    twa_db : float
        Time-weighted average level from the dose, dB(A).
    task_doses_percent : tuple of float
        Each task's part of the dose, %.
    """

    criterion: DoseCriterion
    dose_percent: float
    projected_8h_dose_percent: float
    twa_db: float
    task_doses_percent: tuple[float, ...]


def noise_dose(tasks: Iterable[Task], criterion: DoseCriterion | str) -> DoseResult:
    """Noise dose D = 100 sum(Ci/Ti) % (29 CFR 1910.95 App. A; confirmed).

    Each task counts as one constant level, its LAeq. Dosimeters apply the threshold and the
    exchange rate to the running slow-weighted level instead; for a fluctuating task with an
    exchange rate above 3 dB the LAeq overstates the dose (the energy mean is the larger one).

    Parameters
    ----------
    tasks : iterable of Task
    criterion : DoseCriterion or str
        A criterion or the name of a preset ("niosh", "osha-hc", "osha-pel").

    Returns
    -------
    DoseResult
    """
    crit = dose_criterion(criterion)
    checked = _checked_tasks(tasks)
    parts = tuple(100.0 * t.duration_h / reference_duration_h(t.laeq_db, crit) for t in checked)
    dose = math.fsum(parts)
    total_h = math.fsum(t.duration_h for t in checked)
    return DoseResult(crit, dose, dose * T0_H / total_h, twa_from_dose(dose, crit), parts)


# --------------------------------------------------------------------------------------------
# The assessment


@dataclass(frozen=True)
class ExposureAssessment:
    """Daily exposure of a set of tasks, compared with exposure values; indicative only.

    Attributes
    ----------
    contributions : tuple of TaskContribution
        The tasks with their partial LEX,8h.
    lex_8h_db : float
        Daily noise exposure level, dB(A).
    total_duration_h : float
        Sum of the task durations, h.
    laeq_total_db : float
        LAeq over the total duration, dB(A).
    max_lcpeak_db : float or None
        Highest LCpeak of the tasks that have one, dB(C).
    eu_comparisons : tuple of ValueComparison
        Directive 2003/10/EC values, without hearing protection.
    doses : tuple of DoseResult
        Noise doses for the criteria asked.
    notes : tuple of str
    caution : str
    """

    contributions: tuple[TaskContribution, ...]
    lex_8h_db: float
    total_duration_h: float
    laeq_total_db: float
    max_lcpeak_db: float | None
    eu_comparisons: tuple[ValueComparison, ...]
    doses: tuple[DoseResult, ...]
    notes: tuple[str, ...] = ()
    caution: str = CAUTION

    @property
    def exceeded_values(self) -> list[str]:
        """Names of the EU exposure values exceeded (without hearing protection)."""
        return [c.value.name for c in self.eu_comparisons if c.exceeded]

    def to_dict(self) -> dict[str, Any]:
        """Plain data for JSON."""
        return {
            "tasks": [_contribution_dict(c) for c in self.contributions],
            "total_duration_h": self.total_duration_h,
            "LAeq_total_dBA": self.laeq_total_db,
            "LEX_8h_dBA": self.lex_8h_db,
            "LCpeak_max_dBC": self.max_lcpeak_db,
            "eu_2003_10_ec": [_comparison_dict(c) for c in self.eu_comparisons],
            "exceeded": self.exceeded_values,
            "doses": [_dose_dict(d) for d in self.doses],
            "notes": list(self.notes),
            "caution": self.caution,
        }


def _contribution_dict(c: TaskContribution) -> dict[str, Any]:
    return {
        "name": c.task.name, "LAeq_dBA": c.task.laeq_db, "duration_h": c.task.duration_h,
        "LCpeak_dBC": c.task.lcpeak_db, "partial_LEX_8h_dBA": c.partial_lex_8h_db,
        "energy_share_percent": c.energy_share_percent,
    }


def _comparison_dict(c: ValueComparison) -> dict[str, Any]:
    return {
        "value": c.value.name, "LEX_8h_dBA": c.value.lex_8h_db,
        "LCpeak_dBC": c.value.lcpeak_db, "ppeak_Pa": c.value.ppeak_pa,
        "includes_hearing_protection": c.value.includes_hearing_protection,
        "LEX_exceeded": c.lex_exceeded, "peak_exceeded": c.peak_exceeded,
        "exceeded": c.exceeded,
    }


def _dose_dict(d: DoseResult) -> dict[str, Any]:
    c = d.criterion
    return {
        "criterion": c.name, "criterion_dBA": c.criterion_db, "exchange_dB": c.exchange_db,
        "threshold_dBA": c.threshold_db, "criterion_hours": c.criterion_hours,
        "source": c.source, "dose_percent": d.dose_percent,
        "projected_8h_dose_percent": d.projected_8h_dose_percent, "TWA_dBA": d.twa_db,
        "task_doses_percent": list(d.task_doses_percent),
    }


def _peak_notes(tasks: Sequence[Task]) -> list[str]:
    missing = [t.name for t in tasks if t.lcpeak_db is None]
    if not missing:
        return []
    if len(missing) == len(tasks):
        return ["peak not compared: no task has an LCpeak"]
    return [f"peak compared for part of the day only: no LCpeak for {', '.join(missing)}"]


def assess_exposure(
    tasks: Iterable[Task], criteria: Iterable[DoseCriterion | str] = ()
) -> ExposureAssessment:
    """LEX,8h, peak, Directive 2003/10/EC comparison and noise doses of a working day.

    Parameters
    ----------
    tasks : iterable of Task
        The tasks of the day (total at most 24 h).
    criteria : iterable of DoseCriterion or str
        Dose criteria to evaluate as well (none by default).

    Returns
    -------
    ExposureAssessment
        With :data:`CAUTION` attached: the result is indicative only.
    """
    checked = _checked_tasks(tasks)
    contributions = tuple(task_contributions(checked))
    lex = combine_levels([c.partial_lex_8h_db for c in contributions])
    peaks = [t.lcpeak_db for t in checked if t.lcpeak_db is not None]
    max_peak = max(peaks) if peaks else None
    durations = [t.duration_h for t in checked]
    return ExposureAssessment(
        contributions=contributions,
        lex_8h_db=lex,
        total_duration_h=math.fsum(durations),
        laeq_total_db=average_levels([t.laeq_db for t in checked], durations),
        max_lcpeak_db=max_peak,
        eu_comparisons=tuple(compare_with_eu_values(lex, max_peak)),
        doses=tuple(noise_dose(checked, c) for c in criteria),
        notes=(PROTECTOR_NOTE, *_peak_notes(checked)),
    )


# --------------------------------------------------------------------------------------------
# Durations

_NUMBER = r"(\d+(?:\.\d*)?|\.\d+)"
_DURATION_PART = re.compile(_NUMBER + r"([a-z]+)")


def parse_duration_h(text: str, require_unit: bool = True) -> float:
    """A duration such as ``"2.5h"``, ``"90min"`` or ``"1h30min"`` in hours.

    Each number-unit part is read by :func:`bandmeter.intervals.parse_duration` and the parts
    are added. A bare number is refused with ``require_unit`` and taken as seconds without.

    Raises
    ------
    SettingsError
        For anything else, and for durations that are not positive.
    """
    s = str(text).strip().lower().replace(" ", "")
    if s.startswith("-"):
        raise SettingsError(f"duration must be positive, got {text!r}")
    if not require_unit and re.fullmatch(_NUMBER, s):
        return parse_duration(s) / 3600.0
    parts = _DURATION_PART.findall(s)
    if not s or "".join(n + u for n, u in parts) != s:
        raise SettingsError(f"cannot read duration {text!r}; use e.g. 2.5h, 90min or 1h30min")
    return math.fsum(parse_duration(n + u) for n, u in parts) / 3600.0


# --------------------------------------------------------------------------------------------
# Tasks measured in a batch


def tasks_from_batch(folder: str, day_hours: float | None = None) -> list[Task]:
    """Tasks measured by the recordings of a batch output folder (``bandmeter batch``).

    Each recording that was analysed is one task: its whole-recording LAeq and LCpeak, named
    after the file, lasting as long as it was measured (ISO 9612 full-day or task-based
    strategy with the task measured for its whole duration). With ``day_hours`` the
    recordings are instead taken as samples of one working day: one task of that duration at
    their energy-average LAeq (weighted by measured duration) and their highest LCpeak.

    Parameters
    ----------
    folder : str
        Batch output folder (holds ``manifest.json`` and ``results/``).
    day_hours : float, optional
        Daily exposure duration the recordings represent together, h.

    Raises
    ------
    SettingsError
        Not a batch folder, no analysed recording, or results not calibrated (exposure needs
        sound pressure levels).
    """
    import json
    import os

    from ..manifest import MANIFEST_NAME, Manifest

    if not os.path.isfile(os.path.join(folder, MANIFEST_NAME)):
        raise SettingsError(f"{folder}: not a batch output folder (no {MANIFEST_NAME})")
    tasks = []
    for entry in Manifest.load(folder).entries.values():
        if entry.get("status") != "ok" or not entry.get("result_file"):
            continue
        path = os.path.join(folder, str(entry["result_file"]))
        try:
            with open(path, encoding="utf-8") as handle:
                result = json.load(handle)
            overall, duration_s = result["overall"], float(result["duration_s"])
        except (OSError, ValueError, KeyError, TypeError) as exc:
            raise SettingsError(f"{path}: unreadable batch result ({exc})") from None
        if not result.get("calibration") or "LAeq" not in overall:
            raise SettingsError(f"{path}: not calibrated; exposure needs levels re 20 uPa "
                                "(rerun the batch with a calibration)")
        name = os.path.splitext(os.path.basename(str(entry.get("path") or path)))[0]
        peak = overall.get("LCpeak")
        tasks.append(Task(name, float(overall["LAeq"]), duration_s / 3600.0,
                          None if peak is None else float(peak)))
    if not tasks:
        raise SettingsError(f"{folder}: the batch holds no analysed recording")
    if day_hours is None:
        return tasks
    peaks = [t.lcpeak_db for t in tasks if t.lcpeak_db is not None]
    laeq = average_levels([t.laeq_db for t in tasks], [t.duration_h for t in tasks])
    return [Task(f"{os.path.basename(os.path.normpath(folder))} ({len(tasks)} recordings)",
                 laeq, float(day_hours), max(peaks) if peaks else None)]
