"""Time history: the A-weighted level of a recording step by step (e.g. every 100 ms).

Events, exclusions and plots need the level as a function of time, not just per reporting
interval. :class:`HistoryRecorder` rides along the engine's streaming pass and keeps, per
step of ``step_s`` seconds, the A-weighted energy (short Leq), the maxima of the F and S
time-weighted levels within the step and the F level at the step's end (the sampled F level
that the percentile statistics of many instruments use; common practice, no source). Memory
is four numbers per step: 24 hours at 100 ms is 864 000 steps, 28 MB.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from datetime import datetime

import numpy as np

from .clock import after
from .intervals import IntervalPlan
from .levels import db_from_power_ratio

_TEN_LG_2 = 10.0 * math.log10(2.0)


class _Column:
    """A growable 1-d array indexed by step number."""

    def __init__(self, fill: float) -> None:
        self.fill = fill
        self.data = np.full(1024, fill)

    def ensure(self, k: int) -> None:
        if k >= self.data.size:
            grown = np.full(max(k + 1, 2 * self.data.size), self.fill)
            grown[: self.data.size] = self.data
            self.data = grown


@dataclass
class TimeHistory:
    """Levels step by step (arrays of one value per step).

    Attributes
    ----------
    step_s : float
        Nominal step, s.
    start_s, duration_s : ndarray
        Start (s from the first sample) and true duration of each step, s.
    laeq : ndarray
        A-weighted Leq of each step, dB.
    lafmax, lasmax : ndarray
        Maximum F and S time-weighted A level within each step, dB (NaN during settling).
    laf : ndarray
        F time-weighted A level at the end of each step, dB (NaN during settling).
    clock_origin : datetime or None
        Clock time of the first sample.
    unit : str
        Unit of the levels (dB re 20 uPa, or dB re full scale).
    """

    step_s: float
    start_s: np.ndarray
    duration_s: np.ndarray
    laeq: np.ndarray
    lafmax: np.ndarray
    lasmax: np.ndarray
    laf: np.ndarray
    clock_origin: datetime | None = None
    unit: str = ""
    band_leq: np.ndarray | None = None  # (steps, bands) Leq per step of each band, dB
    bands: list | None = None  # BandInfo of the columns of band_leq
    band_key: str = "LZeq"  # level key of the band values (weighting letter)

    def __len__(self) -> int:
        return int(self.start_s.size)

    def energy(self) -> np.ndarray:
        """A-weighted sound exposure of each step, in units of p0^2 s (10^(LAeq/10) T)."""
        return np.power(10.0, self.laeq / 10.0) * self.duration_s

    def clock(self, t_s: float) -> str | None:
        """Clock time (ISO 8601) of ``t_s`` seconds from the first sample, when known."""
        if self.clock_origin is None:
            return None
        return after(self.clock_origin, float(t_s)).isoformat()


class HistoryRecorder:
    """Accumulates a :class:`TimeHistory` during the engine's pass.

    Parameters
    ----------
    fs : float
        Sampling rate, Hz.
    step_s : float
        Step, s (rounded to whole samples).
    first_boundary : int
        Sample index of a step boundary (steps follow the reporting intervals' alignment).
    n_bands : int
        Bands of the engine's filter bank whose energy is also kept per step (8 bytes per
        band and step: 31 bands at 100 ms over 24 hours is 214 MB).
    """

    def __init__(self, fs: float, step_s: float, first_boundary: int = 0,
                 n_bands: int = 0) -> None:
        self.fs = float(fs)
        self.step_s = float(step_s)
        self.step_samples = max(1, int(round(step_s * fs)))
        self.plan = IntervalPlan(self.step_samples, first_boundary % self.step_samples)
        self.columns = {"sum_a2": _Column(0.0), "count": _Column(0.0),
                        "max_f": _Column(-np.inf), "max_s": _Column(-np.inf),
                        "end_f": _Column(np.nan)}
        self.n_bands = n_bands
        self.band_energy = np.zeros((1024, n_bands)) if n_bands else None

    def _split(self, start: int, n: int) -> tuple[np.ndarray, np.ndarray]:
        cuts = self.plan.boundaries_between(start, start + n) - start
        seg = np.concatenate(([0], cuts)).astype(np.intp)
        ids = self.plan.interval_index(start + seg)
        for column in self.columns.values():
            column.ensure(int(ids[-1]))
        return seg, ids

    def add_energy(self, start: int, a2: np.ndarray) -> None:
        """A-weighted squared samples from absolute sample ``start`` on."""
        if a2.size == 0:
            return
        seg, ids = self._split(start, a2.size)
        self.columns["sum_a2"].data[ids] += np.add.reduceat(a2, seg)
        self.columns["count"].data[ids] += np.diff(np.append(seg, a2.size))

    def add_band_energy(self, band: int, ids: np.ndarray, energy: np.ndarray) -> None:
        """Band energy (sum of squares x decimation factor) for steps ``ids``."""
        assert self.band_energy is not None
        need = int(ids[-1]) + 1
        if need > self.band_energy.shape[0]:
            grown = np.zeros((max(need, 2 * self.band_energy.shape[0]), self.n_bands))
            grown[: self.band_energy.shape[0]] = self.band_energy
            self.band_energy = grown
        np.add.at(self.band_energy[:, band], ids, energy)

    def add_levels(self, start: int, f: np.ndarray, s: np.ndarray) -> None:
        """F and S time-weighted mean squares (settled samples) from ``start`` on."""
        if f.size == 0:
            return
        seg, ids = self._split(start, f.size)
        cols = self.columns
        cols["max_f"].data[ids] = np.maximum(cols["max_f"].data[ids], np.maximum.reduceat(f, seg))
        cols["max_s"].data[ids] = np.maximum(cols["max_s"].data[ids], np.maximum.reduceat(s, seg))
        ends = np.append(seg[1:], f.size) - 1
        cols["end_f"].data[ids] = f[ends]

    def result(self, n_samples: int, level_offset_db: float, clock_origin: datetime | None,
               unit: str) -> TimeHistory:
        """The history of the first ``n_samples`` samples; levels = 10 lg(2 ms) + offset."""
        if n_samples == 0:
            k = 0
        else:
            k = int(self.plan.interval_index(n_samples - 1)) + 1
        cols = {name: c.data[:k] for name, c in self.columns.items()}
        count = cols["count"]
        offset = level_offset_db + _TEN_LG_2

        def level(ms: np.ndarray) -> np.ndarray:
            with np.errstate(divide="ignore", invalid="ignore"):
                out = db_from_power_ratio(ms) + offset
            return np.where(np.isfinite(ms), out, np.nan)

        step, first = self.step_samples, self.plan.first_boundary
        index = np.arange(k, dtype=np.float64)
        starts = index * step if first == 0 else np.maximum(first + (index - 1) * step, 0.0)
        with np.errstate(divide="ignore", invalid="ignore"):
            ms = np.where(count > 0, cols["sum_a2"] / np.maximum(count, 1), np.nan)
        band_leq = None
        if self.band_energy is not None:
            rows = np.zeros((k, self.n_bands))
            have = min(k, self.band_energy.shape[0])
            rows[:have] = self.band_energy[:have]
            with np.errstate(divide="ignore", invalid="ignore"):
                band_leq = np.where(count[:, None] > 0,
                                    db_from_power_ratio(rows / np.maximum(count, 1)[:, None])
                                    + offset, np.nan)
        return TimeHistory(
            step_s=self.step_samples / self.fs,
            band_leq=band_leq,
            start_s=starts / self.fs,
            duration_s=count / self.fs,
            laeq=level(ms),
            lafmax=level(np.where(np.isinf(cols["max_f"]), np.nan, cols["max_f"])),
            lasmax=level(np.where(np.isinf(cols["max_s"]), np.nan, cols["max_s"])),
            laf=level(cols["end_f"]),
            clock_origin=clock_origin,
            unit=unit,
        )
