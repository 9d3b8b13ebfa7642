"""Exclusions: levels with and without chosen time ranges ("ambient" and "residual").

A practitioner removes what is not the noise under assessment (operator speech, rain, a dog
passing) or, the other way round, separates a source's events from the residual sound.
Given a :class:`~bandmeter.history.TimeHistory` and time ranges (from a table, or detected
events), :func:`apply_exclusions` reports the A-weighted Leq and percentile levels of all the
time (ambient), of the time left after removing the ranges (residual) and of the removed
time itself, with the durations, and the band levels when the history carries bands.
Ranges are applied to whole steps of the history: a step counts as excluded when its
midpoint lies inside a range, so the excluded time is a whole number of steps and is
reported exactly as used.

Range table (CSV): columns ``start`` and ``end`` (seconds from the first sample, or ISO 8601
clock times when the recording's start is known) and an optional ``label``.
"""

from __future__ import annotations

import csv
import math
from collections.abc import Sequence
from dataclasses import dataclass
from datetime import datetime
from typing import Any

import numpy as np

from ..errors import SettingsError
from ..history import TimeHistory


@dataclass(frozen=True)
class TimeRange:
    """[start_s, end_s) in seconds from the first sample, with a label."""

    start_s: float
    end_s: float
    label: str = ""


def _seconds(text: str, origin: datetime | None, where: str) -> float:
    try:
        return float(text)
    except ValueError:
        pass
    try:
        when = datetime.fromisoformat(text)
    except ValueError:
        raise SettingsError(f"{where}: {text!r} is neither seconds nor an ISO 8601 time") \
            from None
    if origin is None:
        raise SettingsError(f"{where}: clock time {text!r} needs the recording's start time")
    if when.tzinfo is None:
        raise SettingsError(f"{where}: clock time {text!r} needs a time zone offset")
    return (when - origin).total_seconds()


def read_ranges(path: str, origin: datetime | None = None) -> list[TimeRange]:
    """Time ranges from a CSV table (see the module docstring)."""
    try:
        with open(path, newline="", encoding="utf-8") as handle:
            rows = list(csv.DictReader(handle))
    except (OSError, UnicodeDecodeError, csv.Error) as exc:
        raise SettingsError(f"{path}: cannot read the exclusion table ({exc})") from None
    if rows and not {"start", "end"} <= set(rows[0]):
        raise SettingsError(f"{path}: an exclusion table needs the columns start and end")
    ranges = []
    for line, row in enumerate(rows, start=2):
        where = f"{path}, line {line}"
        start = _seconds((row.get("start") or "").strip(), origin, where)
        end = _seconds((row.get("end") or "").strip(), origin, where)
        if not end > start:
            raise SettingsError(f"{where}: end must be after start")
        ranges.append(TimeRange(start, end, (row.get("label") or "").strip()))
    return ranges


def excluded_mask(history: TimeHistory, ranges: Sequence[TimeRange]) -> np.ndarray:
    """True for the steps whose midpoint lies in one of the ranges."""
    mid = history.start_s + history.duration_s / 2.0
    mask = np.zeros(len(history), dtype=bool)
    for r in ranges:
        mask |= (mid >= r.start_s) & (mid < r.end_s)
    return mask


def _levels(history: TimeHistory, keep: np.ndarray, percentiles: Sequence[float]
            ) -> dict[str, Any]:
    duration = float(np.sum(history.duration_s[keep]))
    out: dict[str, Any] = {"duration_s": duration}
    if duration <= 0:
        out["LAeq"] = math.nan
        for p in percentiles:
            out[f"LAF{p:g}"] = math.nan
        return out
    energy = float(np.sum(history.energy()[keep]))
    out["LAeq"] = 10 * math.log10(energy / duration) if energy > 0 else -math.inf
    if history.band_leq is not None and history.bands is not None:
        weights = history.duration_s[keep][:, None]
        band_energy = np.nansum(np.power(10.0, history.band_leq[keep] / 10.0) * weights, axis=0)
        with np.errstate(divide="ignore"):
            band_levels = 10 * np.log10(band_energy / duration)
        out["bands"] = [{"nominal_hz": b.nominal_hz, "label": b.label,
                         history.band_key: float(v)}
                        for b, v in zip(history.bands, band_levels, strict=True)]
    sampled = history.laf[keep]
    sampled = sampled[np.isfinite(sampled)]
    for p in percentiles:
        value = float(np.percentile(sampled, 100.0 - p)) if sampled.size else math.nan
        out[f"LAF{p:g}"] = value
    return out


def apply_exclusions(history: TimeHistory, ranges: Sequence[TimeRange],
                     percentiles: Sequence[float] = (10.0, 50.0, 90.0)) -> dict[str, Any]:
    """Ambient (all), residual (without the ranges) and excluded levels.

    Percentile levels here come from the F level sampled at the end of each step (the
    history), not from the engine's per-sample level histogram: with 100 ms steps they
    follow the same distribution for sounds that change slowly against 100 ms.

    Returns
    -------
    dict
        ``ambient``, ``residual`` and ``excluded`` (each with ``duration_s``, ``LAeq`` and
        ``LAFN``), ``excluded_s``, ``ranges`` (as given) and ``step_s``.
    """
    mask = excluded_mask(history, ranges)
    every = np.ones(len(history), dtype=bool)
    return {
        "step_s": history.step_s,
        "ambient": _levels(history, every, percentiles),
        "residual": _levels(history, ~mask, percentiles),
        "excluded": _levels(history, mask, percentiles),
        "excluded_s": float(np.sum(history.duration_s[mask])),
        "ranges": [{"start_s": r.start_s, "end_s": r.end_s, "label": r.label} for r in ranges],
    }
