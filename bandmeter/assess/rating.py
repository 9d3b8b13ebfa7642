"""Day-evening-night rating levels (Lden, Ldn) from clock-timed LAeq intervals.

Formula (Directive 2002/49/EC Annex I; confirmed, see REFERENCE_VALUES.md 7.1)::

    Lden = 10 lg{ (1/24) [12 x 10^(Lday/10) + 4 x 10^((Levening + 5)/10)
                          + 8 x 10^((Lnight + 10)/10)] }

with the default periods day 07-19, evening 19-23, night 23-07 (Member States may shift
them). Generalised here to any period hours and penalties: each period's weight is its
nominal wall-clock length in hours, so the weights add up to 24. The "ldn" preset is the
US day-night level (US EPA 550/9-74-004, 1974; confirmed): day 07-22, night 22-07 with a
10 dB night penalty and no evening.

Conventions (choices of this module, stated so results can be checked):

- Wall clock. Periods follow the local wall clock of each interval's ``tzinfo``. With an
  IANA zone (``zoneinfo.ZoneInfo``) a daylight-saving day has 23 or 25 h: the night that
  contains the change lasts 7 h or 9 h of elapsed time (default hours). A fixed-offset zone
  (``+01:00``) has no clock changes. A period boundary that falls in a clock change is read
  with ``fold=0``.
- Calendar day. A night belongs to the date on which it STARTS: 23:00 on the 14th to 07:00
  on the 15th is the night of the 14th. The 14th's Lden combines the day (07-19) and the
  evening (19-23) of the 14th with that night. The hours 00:00-07:00 of the 14th belong to
  the night of the 13th.
- Splitting. An interval that straddles a period boundary is split in proportion to time:
  its energy is taken as uniform within the interval (the only assumption an Leq allows).
- Energy averages only. A period's level is the energy (time-weighted) average of the
  interval pieces in it: ``10 lg(sum t_i 10^(L_i/10) / sum t_i)`` over the measured time,
  never a dB average.
- Coverage. Measured time divided by the elapsed length of the period on that date. Below
  ``min_coverage`` (default 0.5, a choice of this module: no standard value is used) the
  period's level is still reported and used, with a warning. A day's rating needs every
  period measured (some time in each); otherwise it is NaN with a warning.
- Survey. Each period's survey level is the energy average over all measured time in that
  period on all days (the Directive's "long-term level over all the day periods"): days
  count by their measured time, which equals the plain energy mean of the daily levels when
  every day is fully covered. The survey rating combines these period levels.
- Weights. The rating weights are the nominal lengths (12/4/8 h by default), also on a
  daylight-saving day, as in the formula.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass, field
from datetime import date, datetime, time, timedelta, tzinfo
from itertools import pairwise
from typing import Any

import numpy as np

from ..errors import SettingsError
from ..levels import average_levels, db_from_power_ratio, power_ratio_from_db

#: Default minimum fraction of a period that must be measured before a warning (a choice of
#: this module, no source).
DEFAULT_MIN_COVERAGE = 0.5

#: Overlap of consecutive intervals below this is taken as rounding, s.
OVERLAP_TOLERANCE_S = 0.002

_PERIOD_NAMES = ("day", "evening", "night")
_SYMBOLS = {"day": "Lday", "evening": "Levening", "night": "Lnight"}


@dataclass(frozen=True)
class Periods:
    """Rating periods on the local wall clock, and their penalties.

    Parameters
    ----------
    day_start_h, evening_start_h, night_start_h : float
        Start of each period, hours after local midnight; the night ends at the next day's
        ``day_start_h``. ``evening_start_h=None`` means no evening (the day runs to the
        night). Need ``0 <= day < evening < night < 24``.
    evening_penalty_db, night_penalty_db : float
        Penalties added to the period levels in the rating, dB.
    name : str
        Name of the rating level, e.g. ``"Lden"`` or ``"Ldn"``.

    Defaults are Lden of Directive 2002/49/EC Annex I: 07, 19, 23 h, +5 dB, +10 dB.
    """

    day_start_h: float = 7.0
    evening_start_h: float | None = 19.0
    night_start_h: float = 23.0
    evening_penalty_db: float = 5.0
    night_penalty_db: float = 10.0
    name: str = "Lden"

    def __post_init__(self) -> None:
        hours = [self.day_start_h, self.night_start_h]
        if self.evening_start_h is not None:
            hours.insert(1, self.evening_start_h)
        if not all(isinstance(h, (int, float)) and math.isfinite(h) for h in hours):
            raise SettingsError(f"period start hours must be numbers, got {hours!r}")
        if not (0 <= hours[0] and all(a < b for a, b in pairwise(hours)) and
                hours[-1] < 24):
            raise SettingsError(
                f"period start hours must satisfy 0 <= day < evening < night < 24, got "
                f"day {self.day_start_h:g}, evening {self.evening_start_h}, "
                f"night {self.night_start_h:g}"
            )
        for name in ("evening_penalty_db", "night_penalty_db"):
            if not math.isfinite(getattr(self, name)):
                raise SettingsError(f"{name} must be a finite number of dB")

    @property
    def names(self) -> tuple[str, ...]:
        """Period names in clock order from the day's start."""
        return _PERIOD_NAMES if self.evening_start_h is not None else ("day", "night")

    def starts_h(self) -> tuple[float, ...]:
        """Start hours of :attr:`names`."""
        if self.evening_start_h is None:
            return (self.day_start_h, self.night_start_h)
        return (self.day_start_h, self.evening_start_h, self.night_start_h)

    def nominal_hours(self) -> dict[str, float]:
        """Nominal wall-clock length of each period, h (the rating weights; sum 24)."""
        starts = self.starts_h()
        ends = starts[1:] + (starts[0] + 24.0,)
        return {n: e - s for n, s, e in zip(self.names, starts, ends, strict=True)}

    def penalties(self) -> dict[str, float]:
        """Penalty of each period, dB (0 for the day)."""
        out = {"day": 0.0, "night": float(self.night_penalty_db)}
        if self.evening_start_h is not None:
            out["evening"] = float(self.evening_penalty_db)
        return {n: out[n] for n in self.names}

    def to_dict(self) -> dict[str, Any]:
        hours = self.nominal_hours()
        starts = dict(zip(self.names, self.starts_h(), strict=True))
        return {
            "name": self.name,
            "periods": [
                {"period": n, "start_h": starts[n], "hours": hours[n],
                 "penalty_db": self.penalties()[n]}
                for n in self.names
            ],
        }


#: Presets: "lden" (Directive 2002/49/EC Annex I), "ldn" (US EPA 1974 DNL, night 22-07).
PRESETS: dict[str, Periods] = {
    "lden": Periods(),
    "ldn": Periods(day_start_h=7.0, evening_start_h=None, night_start_h=22.0,
                   night_penalty_db=10.0, name="Ldn"),
}


def preset(name: str) -> Periods:
    """The :data:`PRESETS` entry ``"lden"`` or ``"ldn"`` (case-insensitive)."""
    try:
        return PRESETS[str(name).lower()]
    except KeyError:
        raise SettingsError(
            f"unknown rating preset {name!r}; use {' or '.join(PRESETS)}"
        ) from None


def rating_level(levels_db: dict[str, float], periods: Periods) -> float:
    """Rating level (e.g. Lden) from the period levels.

    ``10 lg( sum_p T_p 10^((L_p + P_p)/10) / 24 )`` with nominal lengths ``T_p`` (h) and
    penalties ``P_p`` (dB); Directive 2002/49/EC Annex I for the default periods.

    Parameters
    ----------
    levels_db : dict
        Level of each period name of ``periods``, dB. A missing or NaN level gives NaN.
    periods : Periods

    Returns
    -------
    float
        Rating level, dB.
    """
    values = [levels_db.get(n, math.nan) for n in periods.names]
    if any(v is None or math.isnan(v) for v in values):
        return math.nan
    hours = periods.nominal_hours()
    penalties = periods.penalties()
    return average_levels([v + penalties[n] for n, v in zip(periods.names, values, strict=True)],
                          weights=[hours[n] for n in periods.names])


# --------------------------------------------------------------------------- results


@dataclass
class PeriodLevel:
    """Level of one period of one rating day.

    Attributes
    ----------
    period : str
        ``"day"``, ``"evening"`` or ``"night"``.
    start, end : datetime
        Local wall-clock limits of the period (aware).
    leq_db : float
        Energy-average LAeq over the measured time, dB (NaN when nothing was measured).
    measured_s : float
        Measured time in the period, s.
    length_s : float
        Elapsed length of the period, s (7 h or 9 h for the default night of a DST change).
    """

    period: str
    start: datetime
    end: datetime
    leq_db: float
    measured_s: float
    length_s: float

    @property
    def coverage(self) -> float:
        """Measured fraction of the period (may exceed 1 when intervals overlap)."""
        return self.measured_s / self.length_s if self.length_s > 0 else math.nan

    def to_dict(self) -> dict[str, Any]:
        return {"period": self.period, "start": self.start.isoformat(),
                "end": self.end.isoformat(), "leq_db": self.leq_db,
                "measured_s": self.measured_s, "length_s": self.length_s,
                "coverage": self.coverage}


@dataclass
class DayRating:
    """Period levels and rating level of one calendar day (night = the one starting that day)."""

    date: date
    periods: dict[str, PeriodLevel]
    rating_db: float
    warnings: list[str] = field(default_factory=list)

    def level(self, period: str) -> float:
        """LAeq of a period, dB (NaN when absent)."""
        p = self.periods.get(period)
        return math.nan if p is None else p.leq_db

    def to_dict(self, periods: Periods) -> dict[str, Any]:
        out: dict[str, Any] = {"date": self.date.isoformat()}
        for n in periods.names:
            out[_SYMBOLS[n]] = self.level(n)
        out[periods.name] = self.rating_db
        out["coverage"] = {n: (self.periods[n].coverage if n in self.periods else 0.0)
                           for n in periods.names}
        out["periods"] = [self.periods[n].to_dict() for n in periods.names
                          if n in self.periods]
        out["warnings"] = list(self.warnings)
        return out


@dataclass
class RatingResult:
    """Rating of a survey: per-day levels and the survey (all days) levels.

    Attributes
    ----------
    periods : Periods
    days : list of DayRating
        Dates with any measured time, ascending.
    overall : dict
        Survey level of each period symbol (``Lday``...), dB, and the rating level under
        ``periods.name``; ``measured_s`` per period.
    warnings : list of str
    """

    periods: Periods
    days: list[DayRating]
    overall: dict[str, Any]
    warnings: list[str] = field(default_factory=list)

    @property
    def rating_db(self) -> float:
        """Survey rating level, dB."""
        return float(self.overall[self.periods.name])

    def to_dict(self) -> dict[str, Any]:
        return {"periods": self.periods.to_dict(),
                "days": [d.to_dict(self.periods) for d in self.days],
                "overall": dict(self.overall), "warnings": list(self.warnings)}


# --------------------------------------------------------------------------- clock windows


def interval_starts(origin: datetime, offsets_s: Sequence[float] | np.ndarray) -> list[datetime]:
    """Clock times of intervals that start ``offsets_s`` seconds after ``origin``.

    Elapsed-time arithmetic (through UTC), returned in ``origin``'s zone, so a start after a
    daylight-saving change carries the new offset. (Adding a timedelta to an aware datetime
    directly would add wall-clock time.)
    """
    from ..clock import after

    return [after(origin, float(s)) for s in offsets_s]


def _wall(day: date, hour: float, tz: tzinfo) -> datetime:
    naive = datetime.combine(day, time()) + timedelta(seconds=round(hour * 3600.0, 6))
    return naive.replace(tzinfo=tz, fold=0)


def _windows(tz: tzinfo, first: date, last: date,
             periods: Periods) -> tuple[np.ndarray, list[tuple[date, str]], list[datetime]]:
    """Contiguous period windows from ``first`` to ``last``'s night, in POSIX seconds.

    Returns the boundaries (n + 1 values), the (rating date, period) of each of the n
    windows and the boundaries as local datetimes.
    """
    edges: list[datetime] = []
    keys: list[tuple[date, str]] = []
    day = first
    while day <= last:
        for name, hour in zip(periods.names, periods.starts_h(), strict=True):
            edges.append(_wall(day, hour, tz))
            keys.append((day, name))
        day += timedelta(days=1)
    edges.append(_wall(day, periods.day_start_h, tz))
    return np.array([e.timestamp() for e in edges]), keys, edges


def _accumulate(t0: np.ndarray, t1: np.ndarray, energy: np.ndarray,
                bounds: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Per window: sum of overlap x mean-square ratio, and overlap seconds."""
    n = bounds.size - 1
    e_sum = np.zeros(n)
    t_sum = np.zeros(n)
    first = np.clip(np.searchsorted(bounds, t0, side="right") - 1, 0, n - 1)
    last = np.clip(np.searchsorted(bounds, t1, side="left") - 1, 0, n - 1)
    span = int(np.max(last - first)) if t0.size else -1
    for j in range(span + 1):
        w = first + j
        ok = w <= last
        w = w[ok]
        overlap = np.minimum(t1[ok], bounds[w + 1]) - np.maximum(t0[ok], bounds[w])
        overlap = np.maximum(overlap, 0.0)
        np.add.at(e_sum, w, overlap * energy[ok])
        np.add.at(t_sum, w, overlap)
    return e_sum, t_sum


def _check_inputs(starts: Sequence[datetime], durations_s: Any,
                  laeq_db: Any) -> tuple[np.ndarray, np.ndarray]:
    d = np.asarray(durations_s, dtype=np.float64).ravel()
    lv = np.asarray(laeq_db, dtype=np.float64).ravel()
    if not (len(starts) == d.size == lv.size):
        raise SettingsError(
            f"starts, durations and levels differ in length: {len(starts)}, {d.size}, {lv.size}"
        )
    if not len(starts):
        raise SettingsError("no interval to rate")
    if not (np.isfinite(d) & (d >= 0)).all():
        raise SettingsError("interval durations must be finite and >= 0 s")
    for s in starts:
        if not isinstance(s, datetime) or s.utcoffset() is None:
            raise SettingsError(
                f"interval start {s!r} is not a timezone-aware datetime; rating needs clock "
                "times with a UTC offset"
            )
    return d, lv


def overlap_seconds(t0: np.ndarray, t1: np.ndarray) -> float:
    """Total time (s) by which intervals [t0, t1) overlap earlier ones, after sorting by start."""
    order = np.argsort(t0, kind="stable")
    a, b = t0[order], t1[order]
    reach = np.maximum.accumulate(b)
    over = np.minimum(reach[:-1], b[1:]) - a[1:]
    over = over[over > OVERLAP_TOLERANCE_S]
    return float(np.sum(over))


# --------------------------------------------------------------------------- rating


def rate_intervals(
    starts: Sequence[datetime],
    durations_s: Sequence[float] | np.ndarray,
    laeq_db: Sequence[float] | np.ndarray,
    periods: Periods | None = None,
    min_coverage: float = DEFAULT_MIN_COVERAGE,
) -> RatingResult:
    """Rate clock-timed LAeq intervals: per-day Lday/Levening/Lnight/Lden and the survey.

    See the module docstring for the conventions (calendar day of a night, splitting,
    coverage, DST, survey average).

    Parameters
    ----------
    starts : sequence of datetime
        Interval starts, timezone-aware; the periods follow the wall clock of each one's
        ``tzinfo`` (use an IANA zone for daylight saving time).
    durations_s : array_like of float
        Interval durations, s.
    laeq_db : array_like of float
        A-weighted Leq of each interval, dB. NaN intervals are skipped with a warning.
    periods : Periods, optional
        Rating periods (default: Lden of Directive 2002/49/EC).
    min_coverage : float
        Fraction of a period that must be measured, in [0, 1]; below it a warning.

    Returns
    -------
    RatingResult
    """
    periods = periods or Periods()
    if not 0.0 <= min_coverage <= 1.0:
        raise SettingsError(f"minimum coverage must lie in [0, 1], got {min_coverage!r}")
    d, lv = _check_inputs(starts, durations_s, laeq_db)
    warnings: list[str] = []
    bad = np.isnan(lv)
    if bad.any():
        warnings.append(f"{int(bad.sum())} interval(s) without an LAeq (NaN) skipped")
    t0 = np.array([s.timestamp() for s in starts])
    t1 = t0 + d
    over = overlap_seconds(t0, t1)
    if over > 0:
        warnings.append(
            f"intervals overlap in time by {over:g} s in total (several positions or "
            "channels rated together?); their energies are averaged and coverage may "
            "exceed 100 %"
        )
    keep = ~bad & (d > 0)
    sums = _period_sums(starts, t0, t1, power_ratio_from_db(np.where(bad, 0.0, lv)), keep,
                        periods)
    days = [_day_rating(day, sums[day], periods, min_coverage) for day in sorted(sums)
            if any(p.measured_s > 0 for p in sums[day].values())]
    for day in days:
        warnings.extend(f"{day.date.isoformat()}: {w}" for w in day.warnings)
    overall = _survey(days, periods)
    if math.isnan(overall[periods.name]):
        missing = [n for n in periods.names if overall["measured_s"][n] <= 0]
        warnings.append(f"survey {periods.name} not computed: no measured "
                        f"{', '.join(missing)} period")
    return RatingResult(periods, days, overall, warnings)


def _period_sums(starts: Sequence[datetime], t0: np.ndarray, t1: np.ndarray,
                 energy: np.ndarray, keep: np.ndarray,
                 periods: Periods) -> dict[date, dict[str, PeriodLevel]]:
    """Measured time and Leq of every (date, period) window touched, per time zone."""
    groups: dict[tzinfo, list[int]] = {}
    for i in np.flatnonzero(keep):
        tz = starts[int(i)].tzinfo
        assert tz is not None
        groups.setdefault(tz, []).append(int(i))
    out: dict[date, dict[str, PeriodLevel]] = {}
    acc: dict[tuple[date, str], list[float]] = {}
    for tz, idx in groups.items():
        sel = np.array(idx)
        first = datetime.fromtimestamp(float(t0[sel].min()), tz).date() - timedelta(days=1)
        last = datetime.fromtimestamp(float(t1[sel].max()), tz).date()
        bounds, keys, edges = _windows(tz, first, last, periods)
        e_sum, t_sum = _accumulate(t0[sel], t1[sel], energy[sel], bounds)
        for k in np.flatnonzero(t_sum > 0):
            day, name = keys[k]
            cell = acc.setdefault((day, name), [0.0, 0.0])
            cell[0] += float(e_sum[k])
            cell[1] += float(t_sum[k])
            if name not in out.setdefault(day, {}):
                out[day][name] = PeriodLevel(name, edges[k], edges[k + 1], math.nan, 0.0,
                                             float(bounds[k + 1] - bounds[k]))
    for (day, name), (e, t) in acc.items():
        p = out[day][name]
        p.measured_s = t
        p.leq_db = float(db_from_power_ratio(e / t))
    return out


def _day_rating(day: date, found: dict[str, PeriodLevel], periods: Periods,
                min_coverage: float) -> DayRating:
    warnings = []
    for name in periods.names:
        p = found.get(name)
        if p is None:
            continue
        if p.coverage < min_coverage:
            warnings.append(
                f"{name} {p.start:%H:%M}-{p.end:%H:%M}: {_span(p.measured_s)} of "
                f"{_span(p.length_s)} measured ({100 * p.coverage:.0f} %), below the "
                f"minimum coverage {100 * min_coverage:.0f} %"
            )
    missing = [n for n in periods.names if n not in found]
    if missing:
        warnings.append(f"{periods.name} not computed: no measured {', '.join(missing)} period")
    levels = {n: p.leq_db for n, p in found.items()}
    return DayRating(day, dict(sorted(found.items(), key=lambda kv: periods.names.index(kv[0]))),
                     rating_level(levels, periods), warnings)


def _span(seconds: float) -> str:
    """A duration for a message: ``"2 s"``, ``"12.5 min"``, ``"4.00 h"``."""
    if seconds < 60:
        return f"{seconds:.3g} s"
    if seconds < 3600:
        return f"{seconds / 60:.3g} min"
    return f"{seconds / 3600:.2f} h"


def _survey(days: Sequence[DayRating], periods: Periods) -> dict[str, Any]:
    """Energy average of each period over all measured time on all days, then the rating."""
    levels: dict[str, float] = {}
    measured: dict[str, float] = {}
    for name in periods.names:
        parts = [d.periods[name] for d in days if name in d.periods]
        measured[name] = float(sum(p.measured_s for p in parts))
        levels[name] = (average_levels([p.leq_db for p in parts],
                                       weights=[p.measured_s for p in parts])
                        if parts else math.nan)
    out: dict[str, Any] = {_SYMBOLS[n]: levels[n] for n in periods.names}
    out[periods.name] = rating_level(levels, periods)
    out["measured_s"] = measured
    out["days"] = {n: sum(1 for d in days if n in d.periods) for n in periods.names}
    return out


def period_symbol(name: str) -> str:
    """``"day"`` -> ``"Lday"``, ``"evening"`` -> ``"Levening"``, ``"night"`` -> ``"Lnight"``."""
    return _SYMBOLS[name]
