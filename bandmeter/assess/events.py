"""Noise events: when the A-weighted level rises above a threshold long enough to count.

Detection runs on a :class:`~bandmeter.history.TimeHistory` (the level step by step, e.g.
every 100 ms, from the same streaming pass as every other metric):

1. The detector level is the maximum F (or S) time-weighted A level within each step.
2. The threshold is absolute (``threshold_db``), or relative to the running background:
   ``background_offset_db`` above the LAF90 (``background_percentile``) of the surrounding
   ``background_window_s`` block, interpolated linearly between block centres. An event
   shorter than a tenth of the window barely moves the LAF90 of its block (by definition,
   the level exceeded 90 % of the time ignores the loudest 10 %).
3. An event starts at the first step at or above the threshold and ends at the first step
   below ``threshold - hysteresis_db`` (hysteresis keeps a fluctuating level from splitting
   one pass-by into many events).
4. Events separated by less than ``merge_gap_s`` are merged; events shorter than
   ``min_duration_s`` are dropped.

Per event: start, end, duration, LAFmax (or LASmax), LAE (sound exposure level over the
event's steps) and LAeq. Times are step-resolved: an event's edges are exact to one step.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import asdict, dataclass, field
from typing import Any

import numpy as np

from ..errors import SettingsError
from ..history import TimeHistory


@dataclass(frozen=True)
class EventCriteria:
    """How events are detected (see the module docstring); levels in dB, times in s."""

    threshold_db: float | None = None
    background_offset_db: float = 10.0
    background_percentile: float = 90.0
    background_window_s: float = 300.0
    hysteresis_db: float = 3.0
    min_duration_s: float = 1.0
    merge_gap_s: float = 2.0
    time_weighting: str = "F"

    def __post_init__(self) -> None:
        if self.time_weighting.upper() not in ("F", "S"):
            raise SettingsError(f"time weighting must be F or S, got {self.time_weighting!r}")
        object.__setattr__(self, "time_weighting", self.time_weighting.upper())
        for name in ("hysteresis_db", "min_duration_s", "merge_gap_s"):
            if not getattr(self, name) >= 0:
                raise SettingsError(f"{name} must be >= 0, got {getattr(self, name)!r}")
        if not self.background_window_s > 0:
            raise SettingsError("the background window must be > 0 s")
        if not 0 < self.background_percentile < 100:
            raise SettingsError("the background percentile must lie between 0 and 100")

    def describe(self) -> str:
        """The rule in words, for the output."""
        if self.threshold_db is not None:
            rule = f"L{'A' + self.time_weighting} >= {self.threshold_db:g} dB"
        else:
            rule = (f"L{'A' + self.time_weighting} >= LAF{self.background_percentile:g} of "
                    f"the surrounding {self.background_window_s:g} s + "
                    f"{self.background_offset_db:g} dB")
        return (f"{rule}, ends {self.hysteresis_db:g} dB below the threshold, at least "
                f"{self.min_duration_s:g} s, gaps under {self.merge_gap_s:g} s merged")


@dataclass
class NoiseEvent:
    """One detected event (levels in dB, times in s from the first sample)."""

    start_s: float
    end_s: float
    duration_s: float
    LAFmax: float
    LAE: float
    LAeq: float
    threshold_db: float
    start_time: str | None = None
    end_time: str | None = None
    bands: list[dict[str, Any]] | None = None  # band Leq over the event, when analysed

    def to_dict(self) -> dict[str, Any]:
        out = asdict(self)
        if self.start_time is None:
            out.pop("start_time")
            out.pop("end_time")
        if self.bands is None:
            out.pop("bands")
        return out


def _band_spectrum(history: TimeHistory, a: int, b: int) -> list[dict[str, Any]] | None:
    """Band Leq over steps [a, b) (energy average weighted by step duration), dB."""
    if history.band_leq is None or history.bands is None:
        return None
    weights = history.duration_s[a:b, None]
    energy = np.nansum(np.power(10.0, history.band_leq[a:b] / 10.0) * weights, axis=0)
    with np.errstate(divide="ignore"):
        levels = 10 * np.log10(energy / np.sum(weights))
    return [{"nominal_hz": band.nominal_hz, "label": band.label, history.band_key: float(v)}
            for band, v in zip(history.bands, levels, strict=True)]


@dataclass
class EventResult:
    """Events of one recording, with the rule that found them."""

    events: list[NoiseEvent]
    criteria: EventCriteria
    rule: str
    duration_s: float
    per_hour: list[dict[str, Any]] = field(default_factory=list)

    def to_dict(self) -> dict[str, Any]:
        return {"rule": self.rule, "criteria": asdict(self.criteria),
                "duration_s": self.duration_s, "count": len(self.events),
                "events": [e.to_dict() for e in self.events], "per_hour": self.per_hour}


def background_threshold(history: TimeHistory, criteria: EventCriteria) -> np.ndarray:
    """Per-step threshold: LAFN of each background block + offset, interpolated, dB."""
    laf = history.laf
    n = len(history)
    per_block = max(1, int(round(criteria.background_window_s / history.step_s)))
    centres, values = [], []
    for a in range(0, n, per_block):
        block = laf[a : a + per_block]
        block = block[np.isfinite(block)]
        if block.size:
            # level exceeded N % of the time = the (100 - N)th percentile of the samples
            values.append(float(np.percentile(block, 100.0 - criteria.background_percentile)))
            centres.append(a + (min(a + per_block, n) - a - 1) / 2.0)
    if not values:
        return np.full(n, np.nan)
    return np.interp(np.arange(n), centres, values) + criteria.background_offset_db


def _runs(above: np.ndarray, below: np.ndarray) -> list[tuple[int, int]]:
    """[start, end) step ranges: start where ``above``, end at the next ``below`` step."""
    runs, k, n = [], 0, above.size
    starts = np.flatnonzero(above)
    ends = np.flatnonzero(below)
    i = 0
    while i < starts.size:
        k = starts[i]
        j = np.searchsorted(ends, k, side="right")
        end = int(ends[j]) if j < ends.size else n
        runs.append((int(k), end))
        i = int(np.searchsorted(starts, end, side="left"))
    return runs


def detect_events(history: TimeHistory, criteria: EventCriteria | None = None) -> EventResult:
    """Noise events in a time history (see the module docstring).

    Parameters
    ----------
    history : TimeHistory
        Step-by-step levels (:attr:`bandmeter.engine.AnalysisSettings.history_s`).
    criteria : EventCriteria, optional
        Detection rule; default: 10 dB above the running LAF90 of 5-minute blocks, 3 dB
        hysteresis, at least 1 s, gaps under 2 s merged.

    Returns
    -------
    EventResult
    """
    criteria = criteria or EventCriteria()
    level = history.lafmax if criteria.time_weighting == "F" else history.lasmax
    if criteria.threshold_db is not None:
        threshold = np.full(len(history), float(criteria.threshold_db))
    else:
        threshold = background_threshold(history, criteria)
    valid = np.isfinite(level) & np.isfinite(threshold)
    above = valid & (level >= threshold)
    below = ~valid | (level < threshold - criteria.hysteresis_db)
    runs = _runs(above, below)
    merged: list[list[int]] = []
    starts, durations = history.start_s, history.duration_s
    for a, b in runs:
        if merged and starts[a] - (starts[merged[-1][1] - 1] + durations[merged[-1][1] - 1]) \
                < criteria.merge_gap_s - 1e-9:
            merged[-1][1] = b
        else:
            merged.append([a, b])
    energy = history.energy()
    events = []
    for a, b in merged:
        start = float(starts[a])
        end = float(starts[b - 1] + durations[b - 1])
        if end - start < criteria.min_duration_s - 1e-9:
            continue
        exposure = float(np.sum(energy[a:b]))
        events.append(NoiseEvent(
            start_s=start, end_s=end, duration_s=end - start,
            LAFmax=float(np.nanmax(level[a:b])),
            LAE=10 * math.log10(exposure) if exposure > 0 else -math.inf,
            LAeq=10 * math.log10(exposure / (end - start)) if exposure > 0 else -math.inf,
            threshold_db=float(np.nanmin(threshold[a:b])),
            start_time=history.clock(start), end_time=history.clock(end),
            bands=_band_spectrum(history, a, b),
        ))
    total = float(np.sum(durations))
    return EventResult(events, criteria, criteria.describe(), total,
                       per_hour=_per_hour(events, history, total))


def _per_hour(events: Sequence[NoiseEvent], history: TimeHistory, total_s: float
              ) -> list[dict[str, Any]]:
    """Event counts per clock hour (when the start is known) or per hour from the start."""
    counts: dict[str, int] = {}
    if history.clock_origin is not None:
        from datetime import timedelta

        from ..clock import after

        origin = history.clock_origin
        hour = origin.replace(minute=0, second=0, microsecond=0)
        end = after(origin, total_s)
        while hour < end:
            counts[hour.isoformat()] = 0
            hour += timedelta(hours=1)
        for e in events:
            when = after(origin, e.start_s)
            counts[when.replace(minute=0, second=0, microsecond=0).isoformat()] += 1
        return [{"hour": k, "count": v} for k, v in counts.items()]
    hours = max(1, math.ceil(total_s / 3600.0))
    per = [0] * hours
    for e in events:
        per[min(int(e.start_s // 3600), hours - 1)] += 1
    return [{"hour": f"+{h}h", "count": c} for h, c in enumerate(per)]
