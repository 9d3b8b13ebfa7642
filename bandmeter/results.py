"""Result objects of a level analysis and their conversion to plain data.

A :class:`LevelResult` holds the whole-recording metrics (``overall``) and the per-interval
metrics (``intervals``) as :class:`IntervalResult` rows. Metric keys are the trade symbols
(``LAeq``, ``LAFmax``, ``LCpeak``, ``LAF90``...); values are levels in dB re 20 uPa, or in dB
re full scale for an uncalibrated analysis, where every key carries the suffix ``_dBFS`` so an
uncalibrated number can never pass for a sound pressure level.
"""

from __future__ import annotations

from collections.abc import Iterator, Sequence
from dataclasses import dataclass, field
from datetime import datetime
from typing import Any, overload

import numpy as np

from .clock import after

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


@dataclass(frozen=True)
class BandInfo:
    """Identity of one band in a band table: nominal and exact mid-band frequency, label."""

    nominal_hz: float
    exact_hz: float
    label: str


class IntervalSeries(Sequence[IntervalResult]):
    """Per-interval results held as columns, handed out as :class:`IntervalResult` rows.

    A survey with 1 s intervals over 24 hours has 86 400 intervals, each with some twenty
    metrics and perhaps 31 bands x 2 band metrics; as Python objects that would be gigabytes,
    as columns it is tens of megabytes. Rows are built on access (indexing, iteration) and
    can be dropped again, so memory stays proportional to the numbers themselves.

    Parameters
    ----------
    start_s, duration_s : array_like of float, shape (k,)
        Interval starts (seconds from the first sample) and true durations, s.
    partial : array_like of bool, shape (k,)
        Intervals shorter than the nominal interval.
    full_scale_samples : array_like of int, shape (k,)
        Samples at or beyond full scale per interval.
    metric_keys : sequence of str
        Keys of the columns of ``metrics``.
    metrics : array_like of float, shape (k, len(metric_keys))
        Levels, dB.
    clock_origin : datetime, optional
        Clock time of the first sample; interval start times are ``clock_origin + start_s``.
    bands : sequence of BandInfo, optional
        Bands of ``band_values`` (None: no band analysis).
    band_keys : sequence of str
        Keys of the last axis of ``band_values``.
    band_values : array_like of float, shape (k, len(bands), len(band_keys))
        Band levels, dB.
    index_offset : int
        Index of the first row (-1 for the whole-recording row).
    """

    def __init__(
        self,
        start_s: Any,
        duration_s: Any,
        partial: Any,
        full_scale_samples: Any,
        metric_keys: Sequence[str],
        metrics: Any,
        clock_origin: datetime | None = None,
        bands: Sequence[BandInfo] | None = None,
        band_keys: Sequence[str] = (),
        band_values: Any = None,
        index_offset: int = 0,
    ) -> None:
        self.start_s = np.asarray(start_s, dtype=np.float64)
        self.duration_s = np.asarray(duration_s, dtype=np.float64)
        self.partial = np.asarray(partial, dtype=bool)
        self.full_scale_samples = np.asarray(full_scale_samples, dtype=np.int64)
        self.metric_keys = tuple(metric_keys)
        self.metrics = np.asarray(metrics, dtype=np.float64).reshape(len(self.start_s),
                                                                      len(self.metric_keys))
        self.clock_origin = clock_origin
        self.bands = None if bands is None else tuple(bands)
        self.band_keys = tuple(band_keys)
        self.band_values = None if bands is None else np.asarray(band_values, dtype=np.float64)
        self.index_offset = index_offset

    def __len__(self) -> int:
        return int(self.start_s.size)

    @overload
    def __getitem__(self, i: int) -> IntervalResult: ...

    @overload
    def __getitem__(self, i: slice) -> list[IntervalResult]: ...

    def __getitem__(self, i: int | slice) -> IntervalResult | list[IntervalResult]:
        if isinstance(i, slice):
            return [self._row(j) for j in range(*i.indices(len(self)))]
        n = len(self)
        j = int(i) + n if i < 0 else int(i)
        if not 0 <= j < n:
            raise IndexError(f"interval {i} out of range ({n} intervals)")
        return self._row(j)

    def __iter__(self) -> Iterator[IntervalResult]:
        for j in range(len(self)):
            yield self._row(j)

    def _row(self, j: int) -> IntervalResult:
        clock = None
        if self.clock_origin is not None:
            clock = after(self.clock_origin, float(self.start_s[j])).isoformat()
        bands = None
        if self.bands is not None:
            assert self.band_values is not None
            values = self.band_values[j].tolist()
            bands = [BandLevels(b.nominal_hz, b.exact_hz, b.label,
                                dict(zip(self.band_keys, row, strict=True)))
                     for b, row in zip(self.bands, values, strict=True)]
        return IntervalResult(
            index=self.index_offset + j,
            start_s=float(self.start_s[j]),
            duration_s=float(self.duration_s[j]),
            partial=bool(self.partial[j]),
            start_time=clock,
            full_scale_samples=int(self.full_scale_samples[j]),
            metrics=dict(zip(self.metric_keys, self.metrics[j].tolist(), strict=True)),
            bands=bands,
        )

    def column(self, key: str) -> np.ndarray:
        """One metric over all intervals, dB (a read-only view)."""
        try:
            col = self.metrics[:, self.metric_keys.index(key)]
        except ValueError:
            raise KeyError(key) from None
        col.setflags(write=False)
        return col


@dataclass
class LevelResult:
    """Everything one analysis of one recording channel produced."""

    file: str
    channel: int
    sample_rate: int
    frames: int
    unit: str
    overall: IntervalResult
    intervals: Sequence[IntervalResult]
    settings: dict[str, Any]
    calibration: dict[str, Any] | None
    recording: dict[str, Any]
    provenance: dict[str, Any]
    warnings: list[str] = field(default_factory=list)
    history: Any = None  # TimeHistory when AnalysisSettings.history_s was set
    #: Whole-recording LAF level distribution (LevelEngine.distribution), or None.
    distribution: dict[str, Any] | None = None

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
        if self.distribution is not None:
            out["distribution"] = self.distribution
        return out
