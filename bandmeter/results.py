"""Result objects of a level analysis and their conversion to plain data.

A :class:`LevelResult` holds the whole-recording metrics (``overall``) and the per-interval
metrics (``intervals``) as :class:`IntervalResult` rows. Metric keys are the trade symbols
(``LAeq``, ``LAFmax``, ``LCpeak``, ``LAF90``...); values are levels in dB re 20 uPa, or in dB
re full scale for an uncalibrated analysis, where every key carries the suffix ``_dBFS`` so an
uncalibrated number can never pass for a sound pressure level.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

#: Unit label of calibrated levels.
UNIT_SPL = "dB re 20 uPa"
#: Unit label of uncalibrated levels (a full-scale sine is 0 dBFS).
UNIT_DBFS = "dB re full scale (full-scale sine = 0 dBFS)"
#: Suffix appended to every metric key of an uncalibrated analysis.
DBFS_SUFFIX = "_dBFS"


@dataclass
class BandLevels:
    """Levels of one fractional-octave band in one interval."""

    nominal_hz: float
    exact_hz: float
    label: str
    levels: dict[str, float]

    def to_dict(self) -> dict[str, Any]:
        return {"nominal_hz": self.nominal_hz, "exact_hz": self.exact_hz, "label": self.label,
                **self.levels}


@dataclass
class IntervalResult:
    """Metrics of one interval (or of the whole recording).

    Attributes
    ----------
    index : int
        Interval number from 0 (-1 for the whole recording).
    start_s : float
        Start, seconds from the first sample of the recording.
    duration_s : float
        True duration in seconds (shorter than nominal for a partial interval).
    partial : bool
        True when the interval is shorter than the nominal interval length.
    start_time : str or None
        Clock time of the start (ISO 8601 with offset) when the recording's start is known.
    full_scale_samples : int
        Samples at or beyond full scale (possible overload) in the interval.
    metrics : dict
        Levels keyed by symbol, dB.
    bands : list of BandLevels or None
        Band levels when a band analysis was asked.
    """

    index: int
    start_s: float
    duration_s: float
    partial: bool = False
    start_time: str | None = None
    full_scale_samples: int = 0
    metrics: dict[str, float] = field(default_factory=dict)
    bands: list[BandLevels] | None = None

    @property
    def overload(self) -> bool:
        """True when samples reached full scale: levels of this interval may be wrong."""
        return self.full_scale_samples > 0

    def to_dict(self) -> dict[str, Any]:
        out: dict[str, Any] = {
            "index": self.index,
            "start_s": self.start_s,
            "duration_s": self.duration_s,
            "partial": self.partial,
        }
        if self.start_time is not None:
            out["start_time"] = self.start_time
        out["overload"] = self.overload
        out["full_scale_samples"] = self.full_scale_samples
        out.update(self.metrics)
        if self.bands is not None:
            out["bands"] = [b.to_dict() for b in self.bands]
        return out


@dataclass
class LevelResult:
    """Everything one analysis of one recording channel produced."""

    file: str
    channel: int
    sample_rate: int
    frames: int
    unit: str
    overall: IntervalResult
    intervals: list[IntervalResult]
    settings: dict[str, Any]
    calibration: dict[str, Any] | None
    recording: dict[str, Any]
    provenance: dict[str, Any]
    warnings: list[str] = field(default_factory=list)

    @property
    def duration_s(self) -> float:
        return self.frames / self.sample_rate

    @property
    def calibrated(self) -> bool:
        return self.calibration is not None

    def metric_keys(self) -> list[str]:
        """Metric keys in their report order."""
        return list(self.overall.metrics)

    def to_dict(self) -> dict[str, Any]:
        """Plain data for JSON: see the ``levels --json`` documentation."""
        out: dict[str, Any] = {
            "file": self.file,
            "channel": self.channel,
            "sample_rate": self.sample_rate,
            "duration_s": self.duration_s,
            "frames": self.frames,
            "unit": self.unit,
            "calibration": self.calibration,
            "settings": self.settings,
            "recording": self.recording,
            "provenance": self.provenance,
            "warnings": list(self.warnings),
            "overall": self.overall.to_dict(),
            "intervals": [iv.to_dict() for iv in self.intervals],
        }
        return out
