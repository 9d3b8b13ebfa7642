"""The streaming level analysis: one pass over a recording feeds every stage.

:class:`LevelEngine` takes blocks of samples on the +-1 full-scale scale and carries all
filter states across blocks, so memory is bounded by the block length, not the recording
length, and the results do not depend on the block length. Per block it

1. applies the A and C frequency weightings (Z is the signal itself);
2. sums the squared A, C and Z signals per interval (for Leq and LE);
3. applies the F, S and I time weightings to the squared A signal and keeps their maxima and
   minima per interval, and counts the F-weighted level of every sample in a fine level
   histogram (0.01 dB bins) from which the percentile levels LAFN are read;
4. reads the true (inter-sample) C and Z peaks per interval;
5. counts samples at full scale per interval;
6. optionally runs the fractional-octave filter bank and sums each band's energy (and its
   F-weighted maximum) per interval at the band's own sample rate.

Speed: the frequency weightings run on the block state-space kernel
(:mod:`bandmeter.blockfilter`), the time weightings F, S and I together by frames of 8
samples (:class:`bandmeter.timeweight.TimeWeightingSet`; the I detector's maxima without its
per-sample output), the
true peaks with a per-tile pre-test (:mod:`bandmeter.peak`); every sample's F level is counted
over the bins its interval occupies, and band energy is summed per interval piece by dot
products. Blocks are 2**17 samples by default (:data:`ANALYSIS_BLOCK_FRAMES`), and on glibc
the engine lets malloc keep freed memory between blocks (:func:`keep_freed_memory`), which
saves re-faulting the work arrays' pages on every block. Every shortcut gives the results
of the direct computation, to rounding; ``scripts/bench.py`` measures the speed.

Levels are computed in dB re full scale and shifted by the calibration at the end: a sample
value ``x`` corresponds to ``x * pascal_per_unit`` Pa, so a mean square ``ms`` on the +-1
scale is the level ``10 lg(2 ms) + full_scale_level_db`` (a full-scale sine, ``ms = 1/2``,
gives ``full_scale_level_db``).
"""

from __future__ import annotations

import ctypes
import ctypes.util
import functools
import math
import os
import platform
from collections.abc import Iterable, Sequence
from dataclasses import asdict, dataclass, field
from datetime import datetime
from types import ModuleType
from typing import Any

import numpy as np

from .audio import Recording
from .compiled import kernels
from .errors import SettingsError
from .intervals import IntervalPlan
from .levels import LevelHistogram, db_from_power_ratio, exceeded_levels
from .peak import TruePeakMeter
from .provenance import file_sha256, tool_stamp
from .results import (
    DBFS_SUFFIX,
    UNIT_DBFS,
    UNIT_SPL,
    BandInfo,
    IntervalResult,
    IntervalSeries,
    LevelResult,
)
from .timeweight import ExponentialAverager, TimeWeighting, TimeWeightingSet
from .weighting import MultiWeightingFilter, WeightingFilter

#: Default samples per block of the analysis, 2**17 (2.7 s at 48 kHz): long blocks keep the
#: filter bank's deeper stages on its block kernel and spread each stage's per-call cost over
#: more samples (one-third octaves at 48 kHz: about 15 % faster than 2**16, as fast as 2**18
#: with 35 MB less memory; broadband analysis alike). Any value gives the same results.
ANALYSIS_BLOCK_FRAMES = 1 << 17

#: Default percentile levels N (%), giving LAF1 ... LAF99 (common practice, no source).
DEFAULT_PERCENTILES = (1.0, 5.0, 10.0, 50.0, 90.0, 95.0, 99.0)
#: Bin width of the LAF level distribution in the results, dB (common practice, no source).
DISTRIBUTION_BIN_DB = 0.1

#: F time constant for band maxima, s (IEC 61672-1: F = 0.125 s).
MIN_BANDWIDTH_TIME = 10.0  # B x T below which band levels are flagged
BAND_TAU_F_S = 0.125

_TEN_LG_2 = 10.0 * math.log10(2.0)

#: Settling time at the start of a recording, s: counted in Leq and LE but not in the
#: extremes, peaks and percentiles (see LevelEngine notes; common practice, no source).
DEFAULT_SETTLE_S = 0.1

#: Longest window after the settling time whose mean square seeds a detector, s: the F time
#: constant, so that an event in the first moments cannot lift the S detector's start
#: (common practice, no source).
SEED_WINDOW_S = 0.125

#: Time constants used to seed the detectors, s: F 0.125, S 1, I 0.035 (IEC 61672-1:2002).
TIME_CONSTANTS_S = {"F": 0.125, "S": 1.0, "I": 0.035}

#: Band-weighting choices: the bank runs on the Z (unweighted) or the A/C-weighted signal.
BAND_WEIGHTINGS = ("Z", "A", "C")

#: Fractional-octave designators accepted, with the names the CLI uses.
BAND_NAMES = {"octave": 1, "1": 1, "third": 3, "3": 3, "6": 6, "12": 12, "24": 24}


#: The filter bank's decimated stages run on at least this many samples at a time (fewer,
#: cheaper calls; :class:`bandmeter.filterbank.FractionalOctaveBank`, ``hold_samples``).
BANK_HOLD_SAMPLES = 32768

#: Heap memory glibc may keep after frees instead of returning it to the system, bytes
#: (see :func:`keep_freed_memory`).
MALLOC_KEEP_BYTES = 64 << 20


@functools.lru_cache(maxsize=1)
def keep_freed_memory() -> bool:
    """Let glibc's malloc keep freed memory for the next block (once per process).

    Every block allocates and frees some tens of MB of NumPy work arrays (1 MB each at the
    default 2**17 samples). glibc serves large allocations with fresh memory mappings and
    returns the top of its heap to the system as soon as more than twice its (dynamic) mmap
    threshold is free, so each block faults the same pages in again: in a fresh process that
    cost over a third of the broadband analysis time (10 min, one core: 185x real time
    without this, 330x with it). This raises both thresholds (``M_MMAP_THRESHOLD``,
    ``M_TRIM_THRESHOLD``) to :data:`MALLOC_KEEP_BYTES`, a setting of the whole process:
    freed memory up to that amount stays with the process (the peak memory is unchanged; it
    is returned when the process ends). Nothing is done on other C libraries, or when the
    user set ``MALLOC_MMAP_THRESHOLD_`` or ``MALLOC_TRIM_THRESHOLD_``.

    Returns
    -------
    bool
        True when the thresholds were set.
    """
    if platform.libc_ver()[0] != "glibc" or any(
        k in os.environ for k in ("MALLOC_MMAP_THRESHOLD_", "MALLOC_TRIM_THRESHOLD_")
    ):
        return False
    try:
        libc = ctypes.CDLL(ctypes.util.find_library("c") or "libc.so.6")
        m_trim_threshold, m_mmap_threshold = -1, -3  # glibc's malloc.h
        ok = libc.mallopt(m_mmap_threshold, MALLOC_KEEP_BYTES) == 1
        return libc.mallopt(m_trim_threshold, MALLOC_KEEP_BYTES) == 1 and ok
    except (OSError, AttributeError):  # no usable C library: leave the allocator alone
        return False


def percentile_key(n: float) -> str:
    """Key of a percentile level: 90 -> ``"LAF90"``, 99.9 -> ``"LAF99.9"``."""
    return f"LAF{n:g}"


@dataclass(frozen=True)
class AnalysisSettings:
    """What to compute.

    Parameters
    ----------
    interval_s : float or None
        Reporting interval in s; None reports the whole recording only.
    percentiles : sequence of float
        N (%) of the percentile levels LAFN, each 0 < N < 100.
    bands : int or None
        Fractional-octave designator b (1, 3, 6, 12, 24) or None for no band analysis.
    fmin_hz, fmax_hz : float or None
        Band range (nominal or exact mid-band frequencies); None takes the defaults.
    band_weighting : {"Z", "A", "C"}
        Weighting of the signal the band filters see.
    band_max : bool
        Also report each band's F-weighted maximum level.
    block_frames : int
        Samples per block read from the file (any value gives the same result, to rounding);
        default :data:`ANALYSIS_BLOCK_FRAMES`, 2**17.
    histogram_resolution_db : float
        Bin width of the level histogram for percentiles, dB.
    settle_s : float
        Settling time at the start, s: counted in Leq and LE, not in the extremes, peaks and
        percentiles (see :class:`LevelEngine`). 0 reads everything from the first sample.
    history_s : float or None
        Also keep a time history with this step, s (:mod:`bandmeter.history`), for events
        and exclusions; None keeps none.
    """

    interval_s: float | None = None
    percentiles: Sequence[float] = DEFAULT_PERCENTILES
    bands: int | None = None
    fmin_hz: float | None = None
    fmax_hz: float | None = None
    band_weighting: str = "Z"
    band_max: bool = False
    block_frames: int = ANALYSIS_BLOCK_FRAMES
    histogram_resolution_db: float = 0.01
    settle_s: float = DEFAULT_SETTLE_S
    history_s: float | None = None

    def __post_init__(self) -> None:
        if self.interval_s is not None and not (
            self.interval_s > 0 and math.isfinite(self.interval_s)
        ):
            raise SettingsError(f"interval must be a positive number of s, got {self.interval_s!r}")
        pct = tuple(float(p) for p in self.percentiles)
        for p in pct:
            if not 0.0 < p < 100.0:
                raise SettingsError(f"percentile N must satisfy 0 < N < 100, got {p!r}")
        if len(set(pct)) != len(pct):
            raise SettingsError(f"percentiles repeat a value: {list(pct)!r}")
        object.__setattr__(self, "percentiles", tuple(sorted(pct)))
        if self.bands is not None and self.bands not in (1, 3, 6, 12, 24):
            raise SettingsError(f"bands must be 1, 3, 6, 12 or 24, got {self.bands!r}")
        weighting = str(self.band_weighting).upper()
        if weighting not in BAND_WEIGHTINGS:
            raise SettingsError(f"band weighting must be Z, A or C, got {self.band_weighting!r}")
        object.__setattr__(self, "band_weighting", weighting)
        if int(self.block_frames) != self.block_frames or self.block_frames < 1:
            raise SettingsError(
                f"block_frames must be a positive integer, got {self.block_frames!r}"
            )
        if not (0.0 <= self.settle_s <= 10.0):
            raise SettingsError(f"settle_s must lie in [0, 10] s, got {self.settle_s!r}")
        if self.history_s is not None and not (
            self.history_s > 0 and math.isfinite(self.history_s)
        ):
            raise SettingsError(f"history step must be a positive number of s, got "
                                f"{self.history_s!r}")
        if not self.histogram_resolution_db > 0:
            raise SettingsError(
                f"histogram resolution must be > 0 dB, got {self.histogram_resolution_db!r}"
            )

    def to_dict(self) -> dict[str, Any]:
        out = asdict(self)
        out["percentiles"] = list(self.percentiles)
        return out


class _Grow:
    """A 1-d or 2-d float array indexed by interval number that grows on demand."""

    def __init__(self, fill: float, width: int | None = None, dtype: type = np.float64) -> None:
        self.fill = fill
        self.width = width
        shape = (64,) if width is None else (64, width)
        self.data = np.full(shape, fill, dtype=dtype)

    def ensure(self, k: int) -> None:
        if k < self.data.shape[0]:
            return
        rows = max(k + 1, 2 * self.data.shape[0])
        shape = (rows,) if self.width is None else (rows, self.width)
        grown = np.full(shape, self.fill, dtype=self.data.dtype)
        grown[: self.data.shape[0]] = self.data
        self.data = grown


@dataclass
class _BandState:
    """Per-band bookkeeping of the engine."""

    factor: int
    shift: int = 0  # group delay at mid-band, full-rate samples (compensated)
    position: int = 0  # samples produced so far at the band's rate
    averager: ExponentialAverager | None = None


@dataclass
class _Accumulators:
    """Per-interval energy sums, extremes and counts (grow with the number of intervals)."""

    n_percentiles: int
    n_bands: int
    grows: dict[str, _Grow] = field(default_factory=dict)

    def __post_init__(self) -> None:
        for name in ("sum_a2", "sum_c2", "sum_z2"):
            self.grows[name] = _Grow(0.0)
        for name in ("max_f", "max_s", "max_i", "peak_c", "peak_z"):
            self.grows[name] = _Grow(-np.inf)
        for name in ("min_f", "min_s"):
            self.grows[name] = _Grow(np.inf)
        self.grows["count"] = _Grow(0, dtype=np.int64)
        self.grows["full_scale"] = _Grow(0, dtype=np.int64)
        self.grows["pct"] = _Grow(np.nan, self.n_percentiles)
        if self.n_bands:
            self.grows["band_sum"] = _Grow(0.0, self.n_bands)  # sum of y^2 x decimation
            self.grows["band_max"] = _Grow(-np.inf, self.n_bands)

    def __getitem__(self, name: str) -> np.ndarray:
        return self.grows[name].data

    def ensure(self, k: int) -> None:
        for g in self.grows.values():
            g.ensure(k)


#: Longest run summed by one BLAS dot product in :func:`_sum_squares` (OpenBLAS splits
#: longer ones over threads, whose start-up and spinning cost more than they save here).
_DOT_RUN = 8192


#: Band outputs that span at least this many interval boundaries are split into intervals
#: by :func:`_band_segments` (vectorised) instead of one boundary at a time.
_MANY_PIECES = 8


def _sum_squares(v: np.ndarray) -> float:
    """Sum of squares of a 1-D float64 array (BLAS dot products over runs of 8192, the
    whole runs stacked in one NumPy call)."""
    if v.size <= _DOT_RUN:
        return float(np.dot(v, v))
    whole = v.size // _DOT_RUN * _DOT_RUN
    runs = v[:whole].reshape(-1, _DOT_RUN)
    total = float(np.matmul(runs[:, None, :], runs[:, :, None]).sum())
    rest = v[whole:]
    return total + float(np.dot(rest, rest))


def _interval_number(plan: IntervalPlan, t: int) -> int:
    """:meth:`IntervalPlan.interval_index` of one sample index, in Python integers."""
    if plan.interval_samples is None:
        return 0
    if plan.first_boundary == 0:
        return t // plan.interval_samples
    return 0 if t < plan.first_boundary else (t - plan.first_boundary) // plan.interval_samples + 1


def _segment_sums_of_squares(v: np.ndarray, seg: np.ndarray) -> np.ndarray:
    """Sum of squares of ``v`` over each segment ``[seg[i], seg[i+1])`` (the last to the
    end), like ``np.add.reduceat(v * v, seg)`` without the temporary square."""
    if seg.size > 8:
        return np.add.reduceat(v * v, seg)
    edges = [*seg.tolist(), v.size]
    return np.array([_sum_squares(v[lo:hi]) for lo, hi in zip(edges[:-1], edges[1:],
                                                              strict=True)])


def _band_segments(plan: IntervalPlan, j0: int, d: int, shift: int, m: int, lo_t: int,
                   hi_t: int) -> tuple[np.ndarray, np.ndarray]:
    """Split ``m`` band samples (from band sample ``j0``, decimation ``d``, delay ``shift``)
    at the plan's boundaries; return the segment starts and their interval numbers."""
    full = plan.boundaries_between(lo_t, hi_t)
    split = np.unique(-(-(full + shift) // d) - j0)  # first band sample at/after b
    split = split[(split > 0) & (split < m)]
    seg = np.concatenate(([0], split)).astype(np.intp)
    times = np.clip((j0 + seg) * d - shift, lo_t, hi_t - 1)
    return seg, plan.interval_index(times)


def _band_time_span(state: _BandState, m: int, limit: int | None) -> tuple[int, int]:
    """Input-sample span [lo, hi) that the next ``m`` outputs of a band stand for: their
    times at the input rate less the band's delay, from 0, ending at ``limit`` if given."""
    d, shift, j0 = state.factor, state.shift, state.position
    lo_t = max(j0 * d - shift, 0)
    hi_t = max((j0 + m) * d - shift, lo_t + 1)
    if limit is not None:
        hi_t = min(hi_t, limit)
        lo_t = min(lo_t, hi_t - 1)
    return lo_t, hi_t


class LevelEngine:
    """Streaming sound level analysis of one channel.

    Parameters
    ----------
    fs : float
        Sampling rate, Hz.
    settings : AnalysisSettings
        What to compute.
    full_scale_threshold : float
        Magnitude counted as full scale (see :attr:`RecordingInfo.full_scale_threshold`).
    first_boundary : int
        Sample index of the first interval boundary (0, or a clock-aligned offset).
    total_frames : int, optional
        Length of the stream when known; a stream shorter than twice the settling time is
        read from its first sample (with a warning).

    Notes
    -----
    Settling. A recording starts in the middle of a sound, but the filters start at rest, so
    the first milliseconds carry a switch-on transient that no instrument left running would
    show (up to several dB on a steady low-frequency tone). The first ``settle_s`` seconds
    (default 0.1 s, about 13 time constants of the 20.6 Hz weighting poles; common practice,
    no source) therefore count in the energy quantities (Leq, LE) but not in the extremes
    and distributions: LAFmax/min, LASmax/min, LAImax, LCpeak, LZpeak and the percentile
    levels are read from ``settle_s`` on. The F, S and I detectors start at ``settle_s``,
    seeded with the mean square of the A-weighted signal over the following 125 ms (35 ms
    for I), so LAFmin and LASmin do not read a detector rising from zero; a sound that
    starts within that window lifts the seed (a stated bias of the first second of LASmin).
    Call :meth:`prime` with the first ``settle_s`` + 1 s of the recording before the first
    :meth:`process` call (or let the first block serve), then :meth:`process` with
    consecutive blocks and :meth:`finish` once. The fractional-octave filters start at rest
    too: their settling (longest in the lowest bands, a few periods of the band's mid
    frequency) counts in the first interval.
    """

    def __init__(
        self,
        fs: float,
        settings: AnalysisSettings,
        full_scale_threshold: float = 1.0,
        first_boundary: int = 0,
        total_frames: int | None = None,
    ) -> None:
        self.fs = float(fs)
        self.settings = settings
        self.full_scale_threshold = float(full_scale_threshold)
        self.warnings: list[str] = []
        keep_freed_memory()
        interval_samples = None
        if settings.interval_s is not None:
            exact = settings.interval_s * self.fs
            interval_samples = max(1, int(round(exact)))
            if abs(exact - interval_samples) > 1e-6 * exact:
                self.warnings.append(
                    f"interval {settings.interval_s:g} s is not a whole number of samples at "
                    f"{self.fs:g} Hz; using {interval_samples} samples "
                    f"({interval_samples / self.fs:.9g} s)"
                )
        self.interval_samples = interval_samples
        self.plan = IntervalPlan(interval_samples, first_boundary)
        self.weight_ac = MultiWeightingFilter(("A", "C"), self.fs)  # one kernel for both
        self.time_weightings: dict[str, TimeWeighting] = {}
        self.settle_samples = int(round(settings.settle_s * self.fs))
        if total_frames is not None and total_frames < 2 * self.settle_samples:
            self.warnings.append(
                f"recording shorter than twice the settling time ({settings.settle_s:g} s): "
                "extremes and peaks are read from the first sample and include the filters' "
                "switch-on"
            )
            self.settle_samples = 0
        self.peak_c = TruePeakMeter(self.fs, self.plan, origin=self.settle_samples)
        self.peak_z = TruePeakMeter(self.fs, self.plan, origin=self.settle_samples)
        self.bank = None
        self.band_states: list[_BandState] = []
        if settings.bands is not None:
            from .filterbank import FractionalOctaveBank

            self.bank = FractionalOctaveBank(
                self.fs, settings.bands, settings.fmin_hz, settings.fmax_hz,
                hold_samples=BANK_HOLD_SAMPLES,
            )
            if self.bank.dropped:
                names = ", ".join(b.label for b in self.bank.dropped)
                self.warnings.append(
                    f"bands {names} Hz dropped: above what {self.fs:g} Hz sampling supports"
                )
            for factor, rate, delay in zip(self.bank.factors, self.bank.rates_hz,
                                           self.bank.delays_s, strict=True):
                averager = ExponentialAverager(rate, BAND_TAU_F_S) if settings.band_max else None
                shift = int(round(delay * self.fs))
                self.band_states.append(_BandState(int(factor), shift, 0, averager))
            self._warn_slow_bands(total_frames)
        self.sum_x = 0.0  # sum of the samples: the DC offset check
        self.history = None
        if settings.history_s is not None:
            from .history import HistoryRecorder

            self.history = HistoryRecorder(self.fs, settings.history_s, first_boundary,
                                           n_bands=len(self.band_states))
        self.acc = _Accumulators(len(settings.percentiles), len(self.band_states))
        self._hist_proto = LevelHistogram(settings.histogram_resolution_db, -400.0, 60.0)
        self._hist_interval = -1
        # the open interval's counts in the bins of _hist_proto, and the lowest and highest
        # index counted (None: nothing counted yet); see _count_levels
        self._hist_counts = np.zeros_like(self._hist_proto.counts)
        self._hist_span: tuple[int, int] | None = None
        self.overall_histogram = self._hist_proto.copy_empty()
        self.position = 0
        self._primed = False
        self._finished = False

    # -- set-up -----------------------------------------------------------------------------
    def prime(self, prefix: np.ndarray) -> None:
        """Seed the time-weighting detectors from the start of the recording.

        Parameters
        ----------
        prefix : numpy.ndarray
            The first samples of the recording: at least ``settle_s`` + 1 s when available
            (shorter recordings pass all they have).
        """
        if self._primed or self.position:
            raise SettingsError("prime() must be called once, before the first block")
        pre = np.asarray(prefix, dtype=np.float64)
        a = WeightingFilter("A", self.fs).process(pre)
        a2 = a[min(self.settle_samples, len(a)):] ** 2
        seeds = {}
        for name in ("F", "S", "I"):
            window_s = min(TIME_CONSTANTS_S[name], SEED_WINDOW_S)
            m = max(1, min(len(a2), int(round(window_s * self.fs))))
            seeds[name] = float(np.mean(a2[:m])) if len(a2) else 0.0
        # F and S per sample, I only as maxima per interval, from one pass over the block
        self._time_weighting_set = TimeWeightingSet(
            self.fs, ("F", "S", "I"), initial_mean_square=seeds, maxima_only=("I",)
        )
        self.time_weightings = self._time_weighting_set.members
        self._primed = True

    def _segments(self, start: int, n: int) -> tuple[np.ndarray, np.ndarray]:
        """Offsets (within a run of ``n`` samples from ``start``) where intervals begin, and
        the interval number of each piece."""
        splits = self.plan.boundaries_between(start, start + n) - start
        seg = np.concatenate(([0], splits)).astype(np.intp)
        ids = self.plan.interval_index(start + seg)
        self.acc.ensure(int(ids[-1]))
        return seg, ids

    # -- streaming --------------------------------------------------------------------------
    def process(self, block: np.ndarray) -> None:
        """Analyse the next block of samples (+-1 full-scale scale, float64)."""
        if self._finished:
            raise SettingsError("process() called after finish()")
        x = np.asarray(block, dtype=np.float64)
        if not self._primed:
            self.prime(x[: self.settle_samples + int(self.fs)])
        n = len(x)
        if n == 0:
            return
        start = self.position
        seg, ids = self._segments(start, n)
        acc = self.acc
        a, c = self.weight_ac.process(x)
        a2 = a * a
        acc["sum_a2"][ids] += np.add.reduceat(a2, seg)
        acc["sum_c2"][ids] += _segment_sums_of_squares(c, seg)
        acc["sum_z2"][ids] += _segment_sums_of_squares(x, seg)
        self.sum_x += float(np.sum(x))
        acc["count"][ids] += np.diff(np.append(seg, n))
        if max(float(x.max()), -float(x.min())) >= self.full_scale_threshold:
            acc["full_scale"][ids] += np.add.reduceat(
                (np.abs(x) >= self.full_scale_threshold).astype(np.int64), seg
            )
        if self.history is not None:
            self.history.add_energy(start, a2)
        settled = max(0, self.settle_samples - start)
        if settled < n:
            self._process_extremes(start + settled, x[settled:], a2[settled:], c[settled:])
        if self.bank is not None:
            band_input = {"Z": x, "A": a, "C": c}[self.settings.band_weighting]
            self._process_bands(self.bank.process(band_input))
        self.position += n

    def _process_extremes(
        self, start: int, x: np.ndarray, a2: np.ndarray, c: np.ndarray
    ) -> None:
        """Time-weighted extremes, level distribution and peaks of settled samples."""
        acc = self.acc
        seg, ids = self._segments(start, len(x))
        full, maxima, minima = self._time_weighting_set.extremes(a2, seg)
        f, s = full["F"], full["S"]
        acc["max_f"][ids] = np.maximum(acc["max_f"][ids], maxima["F"])
        acc["min_f"][ids] = np.minimum(acc["min_f"][ids], minima["F"])
        acc["max_s"][ids] = np.maximum(acc["max_s"][ids], maxima["S"])
        acc["min_s"][ids] = np.minimum(acc["min_s"][ids], minima["S"])
        acc["max_i"][ids] = np.maximum(acc["max_i"][ids], maxima["I"])
        if self.history is not None:
            self.history.add_levels(start, f, s)
        self._count_levels(f, seg, ids)
        self.peak_c.process(c)
        self.peak_z.process(x)
        self._store_peaks(self.peak_c.completed(), self.peak_z.completed())

    def _count_levels(self, f: np.ndarray, seg: np.ndarray, ids: np.ndarray) -> None:
        """Count the F level of every sample in its interval's level histogram.

        The bins are those of :meth:`LevelHistogram.add_levels`, by the same arithmetic
        (level ``10 lg f``, then ``floor((level - low) / resolution)`` limited to the
        underflow and overflow bins), but counted over the range each interval occupies
        (about 2000 of the 46000 bins) instead of the whole histogram. When every level of
        the block lies inside the bins, the floor is taken after subtracting the block's
        lowest bin number ``m`` (exact: ``pos - m`` has no rounding error for
        ``m <= pos <= 2 m``), so the counts start at bin ``m``. With the compiled kernels
        the counting after ``10 lg f`` is one loop (``count_levels``) by the arithmetic of
        :meth:`LevelHistogram.add_levels`: the same counts.
        """
        proto = self._hist_proto
        compiled = kernels()
        if compiled is not None:
            self._count_levels_compiled(compiled, db_from_power_ratio(f), seg, ids)
            return
        pos = db_from_power_ratio(f)
        pos -= proto.low_db
        pos /= proto.resolution_db
        lowest, highest = float(pos.min()), float(pos.max())
        if math.isnan(lowest) or math.isnan(highest):
            raise SettingsError("NaN level given to the level histogram")
        shift = math.floor(lowest) if lowest >= 1.0 else 0
        if shift and highest < proto.nbins and highest <= 2.0 * shift:
            pos -= shift  # exact (see above); pos >= 0, so truncation is the floor
            index = pos.astype(np.intp)
            base = shift + 1  # counts index of index 0
        else:
            np.floor(pos, out=pos)
            np.maximum(pos, -1.0, out=pos)
            np.minimum(pos, float(proto.nbins), out=pos)
            index = pos.astype(np.intp)
            index += 1
            base = 0
        edges = np.append(seg, len(f))
        for k, lo, hi in zip(ids, edges[:-1], edges[1:], strict=True):
            if k != self._hist_interval:
                self._close_histogram()
                self._hist_interval = int(k)
            part = index[lo:hi]
            lowest_bin = int(part.min())
            offset = lowest_bin if lowest_bin > 64 else 0  # count from near the lowest bin
            counts = np.bincount(part - offset if offset else part)
            start = base + offset
            self._hist_counts[start : start + counts.size] += counts
            span = (base + lowest_bin, start + counts.size - 1)
            self._widen_histogram_span(span)

    def _count_levels_compiled(
        self, compiled: ModuleType, levels: np.ndarray, seg: np.ndarray, ids: np.ndarray
    ) -> None:
        """:meth:`_count_levels` by the compiled kernel (the same bins, counts and spans)."""
        proto = self._hist_proto
        edges = np.append(seg, len(levels))
        for k, lo, hi in zip(ids, edges[:-1], edges[1:], strict=True):
            if k != self._hist_interval:
                self._close_histogram()
                self._hist_interval = int(k)
            if hi == lo:
                continue
            span = compiled.count_levels(levels[lo:hi], proto.low_db, proto.resolution_db,
                                         proto.nbins, self._hist_counts)
            if span is None:
                raise SettingsError("NaN level given to the level histogram")
            self._widen_histogram_span(span)

    def _widen_histogram_span(self, span: tuple[int, int]) -> None:
        """Extend the open interval's occupied counts indices to cover ``span``."""
        old = self._hist_span
        self._hist_span = span if old is None else (min(old[0], span[0]),
                                                    max(old[1], span[1]))

    def _close_histogram(self) -> None:
        if self._hist_span is None:
            return
        lo, hi = self._hist_span
        counts = self._hist_counts
        self.acc["pct"][self._hist_interval] = self._interval_percentiles(lo, hi)
        self.overall_histogram.counts[lo : hi + 1] += counts[lo : hi + 1]
        counts[lo : hi + 1] = 0
        self._hist_span = None

    def _interval_percentiles(self, lo: int, hi: int) -> np.ndarray:
        """Percentile levels of the open interval (counts at indices ``lo .. hi``).

        :meth:`LevelHistogram.exceeded` of the histogram trimmed to the occupied bins
        ``first .. last``, read in place: the counts at ``first - 1`` and ``last + 1`` serve
        as its underflow and overflow counts (they are zero unless ``first - 1`` is the
        underflow bin itself). The same counts and interpolation, the bin edges offset by a
        whole number of bins (they agree with the full histogram's to rounding, about 1e-13
        dB). With values in the overflow bin the full histogram is used (its top edge is the
        reported bound).
        """
        proto, counts = self._hist_proto, self._hist_counts
        first, last = max(lo, 1), min(hi, proto.nbins)  # occupied bins (1 .. nbins)
        res = proto.resolution_db
        if hi <= proto.nbins and first <= last:
            view, low = counts[first - 1 : last + 2], proto.low_db + (first - 1) * res
        else:
            view, low = counts, proto.low_db
        return np.array(exceeded_levels(view, low, res, self.settings.percentiles))

    def _store_peaks(self, peaks_c: dict[int, float], peaks_z: dict[int, float]) -> None:
        for name, peaks in (("peak_c", peaks_c), ("peak_z", peaks_z)):
            for k, value in peaks.items():
                self.acc.ensure(k)
                self.acc[name][k] = max(self.acc[name][k], value)

    def _warn_slow_bands(self, total_frames: int | None) -> None:
        """Warn when bands are too narrow for the interval (or the recording).

        A band of bandwidth B responds in about 1/B seconds, and the Leq of noise over T
        seconds scatters by about 4.34 / sqrt(B T) dB; below B T = 10 (common practice, no
        source) band levels blur across interval boundaries and scatter by more than 1.4 dB.
        """
        assert self.bank is not None
        span = self.interval_samples if self.interval_samples is not None else total_frames
        if span is None:
            return
        span_s = span / self.fs
        narrow = [band for band in self.bank.bands
                  if (band.upper_hz - band.lower_hz) * span_s < MIN_BANDWIDTH_TIME]
        if narrow:
            what = "interval" if self.interval_samples is not None else "recording"
            self.warnings.append(
                f"bands up to {narrow[-1].label} Hz are too narrow for a {span_s:g} s {what} "
                f"(bandwidth x time < {MIN_BANDWIDTH_TIME:g}): their levels blur in time and "
                f"scatter; use a longer {what} for them"
            )

    def _process_bands(self, outputs: list[np.ndarray], limit: int | None = None) -> None:
        """Add band outputs to their intervals.

        Band sample ``m`` of a band decimated by ``d`` is assigned to the full-rate time
        ``m d - shift``, ``shift`` being the band's group delay at mid-band: the energy goes
        to the interval where the sound happened, not where the slower low-band filters
        deliver it. Times before 0 (the filters filling) count in the first interval; with
        ``limit`` (the end flush) times at or after ``limit`` count in the last interval.
        """
        if self.history is None and not self.settings.band_max:
            self._add_band_energy(outputs, limit)
            return
        acc = self.acc
        settle = self.settle_samples
        for j, (y, state) in enumerate(zip(outputs, self.band_states, strict=True)):
            m = len(y)
            if m == 0:
                continue
            d, shift, j0 = state.factor, state.shift, state.position
            lo_t, hi_t = _band_time_span(state, m, limit)
            seg, ids = _band_segments(self.plan, j0, d, shift, m, lo_t, hi_t)
            acc.ensure(int(ids[-1]))
            y2 = y * y
            acc["band_sum"][ids, j] += np.add.reduceat(y2, seg) * d
            if self.history is not None:
                hseg, hids = _band_segments(self.history.plan, j0, d, shift, m, lo_t, hi_t)
                self.history.add_band_energy(j, hids, np.add.reduceat(y2, hseg) * d)
            if state.averager is not None:
                env = state.averager.process(y2)
                if (j0 * d - shift) < settle:  # no band maximum from the settling time
                    first = max(0, min(m, -(-(settle + shift) // d) - j0))
                    env = env.copy()
                    env[:first] = 0.0
                acc["band_max"][ids, j] = np.maximum(
                    acc["band_max"][ids, j], np.maximum.reduceat(env, seg)
                )
            state.position += m

    def _add_band_energy(self, outputs: list[np.ndarray], limit: int | None) -> None:
        """:meth:`_process_bands` when only the band energy is wanted (no history, no band
        maxima): the same assignment of band samples to intervals, worked out in integers
        per band, and the energy of each piece as one sum of products."""
        plan, acc = self.plan, self.acc
        sums = acc["band_sum"]
        for j, (y, state) in enumerate(zip(outputs, self.band_states, strict=True)):
            m = len(y)
            if m == 0:
                continue
            d, shift, j0 = state.factor, state.shift, state.position
            lo_t, hi_t = _band_time_span(state, m, limit)
            k_lo, k_hi = _interval_number(plan, lo_t), _interval_number(plan, hi_t - 1)
            if k_hi >= sums.shape[0]:
                acc.ensure(k_hi)
                sums = acc["band_sum"]
            if k_hi - k_lo >= _MANY_PIECES:  # a held stage's output: split it vectorised
                seg, ids = _band_segments(plan, j0, d, shift, m, lo_t, hi_t)
                sums[ids, j] += _segment_sums_of_squares(y, seg) * d
                state.position += m
                continue
            start = 0
            for k in range(k_lo, k_hi + 1):
                stop = m
                if k < k_hi:  # first band sample at or after the next boundary
                    stop = min(max(-(-(plan.interval_start(k + 1) + shift) // d) - j0, 0), m)
                if stop > start:
                    part = y[start:stop]
                    sums[k, j] += _sum_squares(part) * d
                    start = stop
            state.position += m

    def _flush_bands(self) -> None:
        """Run the bank on zeros after the end so the delayed band energy is counted, then
        drain its held stages."""
        if self.bank is None or self.position == 0:
            return
        longest = max(state.shift for state in self.band_states)
        largest = max(state.factor for state in self.band_states)
        n = 2 * longest + int(0.5 * self.fs)
        n = -(-n // largest) * largest
        zeros = np.zeros(min(n, 65536))
        while n > 0:
            chunk = zeros[: min(n, zeros.size)]
            self._process_bands(self.bank.process(chunk), limit=self.position)
            n -= chunk.size
        self._process_bands(self.bank.drain(), limit=self.position)

    def finish(self) -> None:
        """Flush the detectors at the end of the recording."""
        if self._finished:
            return
        self._close_histogram()
        self._store_peaks(self.peak_c.finish(), self.peak_z.finish())
        self._flush_bands()
        self._finished = True

    # -- results ----------------------------------------------------------------------------
    def n_intervals(self) -> int:
        """Number of intervals that received samples."""
        if self.position == 0:
            return 0
        return int(self.plan.interval_index(self.position - 1)) + 1

    def results(
        self, level_offset_db: float, calibrated: bool, start_time: datetime | None = None
    ) -> tuple[IntervalResult, IntervalSeries]:
        """Whole-recording and per-interval results.

        Parameters
        ----------
        level_offset_db : float
            ``full_scale_level_db`` of the calibration (0 for dB re full scale).
        calibrated : bool
            False gives keys with the ``_dBFS`` suffix.
        start_time : datetime, optional
            Clock time of the first sample (timezone-aware), for interval start times.

        Returns
        -------
        overall : IntervalResult
            The whole recording (``index`` -1).
        intervals : IntervalSeries
            The intervals, held as columns (rows are built on access).
        """
        if not self._finished:
            self.finish()
        k = self.n_intervals()
        if k == 0:
            raise SettingsError("no samples were analysed")
        acc = self.acc
        rows = {name: acc[name][:k] for name in acc.grows}
        starts = np.array([self.plan.interval_start(idx) for idx in range(k)], dtype=np.int64)
        intervals = self._series(rows, starts, self.interval_samples, level_offset_db,
                                 calibrated, start_time, 0)
        overall_rows = {
            "sum_a2": rows["sum_a2"].sum(keepdims=True),
            "sum_c2": rows["sum_c2"].sum(keepdims=True),
            "sum_z2": rows["sum_z2"].sum(keepdims=True),
            "count": rows["count"].sum(keepdims=True),
            "full_scale": rows["full_scale"].sum(keepdims=True),
            "max_f": rows["max_f"].max(keepdims=True),
            "max_s": rows["max_s"].max(keepdims=True),
            "max_i": rows["max_i"].max(keepdims=True),
            "min_f": rows["min_f"].min(keepdims=True),
            "min_s": rows["min_s"].min(keepdims=True),
            "peak_c": rows["peak_c"].max(keepdims=True),
            "peak_z": rows["peak_z"].max(keepdims=True),
            "pct": self.overall_histogram.exceeded(self.settings.percentiles)[None, :],
        }
        if self.band_states:
            overall_rows["band_sum"] = rows["band_sum"].sum(axis=0, keepdims=True)
            overall_rows["band_max"] = rows["band_max"].max(axis=0, keepdims=True)
        overall = self._series(overall_rows, np.zeros(1, dtype=np.int64), None,
                               level_offset_db, calibrated, start_time, -1)[0]
        return overall, intervals

    def distribution(self, level_offset_db: float, calibrated: bool,
                     bin_width_db: float = DISTRIBUTION_BIN_DB) -> dict[str, Any]:
        """Whole-recording distribution of the LAF level (the percentile histogram, coarser).

        Parameters
        ----------
        level_offset_db : float
            ``full_scale_level_db`` of the calibration (0 for dB re full scale).
        calibrated : bool
            Key ``"LAF"`` when True, ``"LAF_dBFS"`` otherwise.
        bin_width_db : float
            Bin width, dB.

        Returns
        -------
        dict
            ``metric`` plus the keys of :meth:`bandmeter.levels.LevelHistogram.distribution`
            (levels in dB re 20 uPa when calibrated, dB re full scale otherwise).
        """
        metric = "LAF" if calibrated else "LAF" + DBFS_SUFFIX
        return {"metric": metric, **self.overall_histogram.distribution(
            bin_width_db, level_offset_db + _TEN_LG_2)}

    def _series(
        self,
        rows: dict[str, np.ndarray],
        starts: np.ndarray,
        nominal: int | None,
        level_offset_db: float,
        calibrated: bool,
        start_time: datetime | None,
        index_offset: int,
    ) -> IntervalSeries:
        """Levels of accumulator rows, as an :class:`IntervalSeries` (vectorised)."""
        offset_ms = level_offset_db + _TEN_LG_2  # 10 lg(2 ms) + L_fs
        offset_peak = level_offset_db + _TEN_LG_2  # 20 lg(peak) + 10 lg 2 + L_fs
        suffix = "" if calibrated else DBFS_SUFFIX
        count = rows["count"].astype(np.float64)
        n = np.maximum(count, 1.0)

        # extremes of an interval that holds no settled sample stay at their +-inf start
        # values: report them as NaN (no reading), not as a level
        def ms_level(value: np.ndarray) -> np.ndarray:
            with np.errstate(divide="ignore", invalid="ignore"):  # -inf: no reading
                level = db_from_power_ratio(value) + offset_ms
            return np.where(np.isinf(value), np.nan, level)

        def peak_level(value: np.ndarray) -> np.ndarray:
            with np.errstate(divide="ignore", invalid="ignore"):  # -inf: no reading
                level = 20.0 * np.log10(value) + offset_peak
            return np.where(np.isinf(value), np.nan, level)

        columns = {
            "LAeq": ms_level(rows["sum_a2"] / n),
            "LCeq": ms_level(rows["sum_c2"] / n),
            "LZeq": ms_level(rows["sum_z2"] / n),
            "LAE": ms_level(rows["sum_a2"] / self.fs),
            "LAFmax": ms_level(rows["max_f"]),
            "LAFmin": ms_level(rows["min_f"]),
            "LASmax": ms_level(rows["max_s"]),
            "LASmin": ms_level(rows["min_s"]),
            "LAImax": ms_level(rows["max_i"]),
            "LCpeak": peak_level(rows["peak_c"]),
            "LZpeak": peak_level(rows["peak_z"]),
        }
        for p, values in zip(self.settings.percentiles, rows["pct"].T, strict=True):
            columns[percentile_key(p)] = values + offset_ms
        keys = [key + suffix for key in columns]
        bands, band_keys, band_values = None, [], None
        if self.band_states:
            assert self.bank is not None
            bands = [BandInfo(b.nominal_hz, b.exact_hz, b.label) for b in self.bank.bands]
            letter = self.settings.band_weighting
            # band energy (sum of y^2 times the decimation factor) per full-rate sample
            with np.errstate(divide="ignore", invalid="ignore"):
                ms = rows["band_sum"] / count[:, None]
                planes = [np.where(count[:, None] > 0,
                                   db_from_power_ratio(ms) + offset_ms, np.nan)]
            band_keys = [f"L{letter}eq" + suffix]
            if self.settings.band_max:
                planes.append(ms_level(rows["band_max"]))
                band_keys.append(f"L{letter}Fmax" + suffix)
            band_values = np.stack(planes, axis=-1)
        return IntervalSeries(
            start_s=starts / self.fs,
            duration_s=count / self.fs,
            partial=(count < nominal) if nominal is not None else np.zeros(count.size, bool),
            full_scale_samples=rows["full_scale"],
            metric_keys=keys,
            metrics=np.column_stack(list(columns.values())),
            clock_origin=start_time,
            bands=bands,
            band_keys=band_keys,
            band_values=band_values,
            index_offset=index_offset,
        )


def prefix_samples(fs: float, settings: AnalysisSettings) -> int:
    """Samples :meth:`LevelEngine.prime` wants: the settling time plus 1 s (the S constant)."""
    return int(round(settings.settle_s * fs)) + int(round(TIME_CONSTANTS_S["S"] * fs))


def analyse_blocks(
    blocks: Iterable[np.ndarray],
    fs: float,
    settings: AnalysisSettings,
    full_scale_level_db: float | None,
    full_scale_threshold: float = 1.0,
    prefix: np.ndarray | None = None,
    start_time: datetime | None = None,
    first_boundary: int = 0,
    total_frames: int | None = None,
) -> tuple[LevelEngine, IntervalResult, IntervalSeries]:
    """Run the engine over an iterable of blocks; see :func:`analyse_file` for the file form.

    ``prefix`` (the first second of the stream) seeds the time weightings; without it the
    first block's start is used.
    """
    engine = LevelEngine(fs, settings, full_scale_threshold, first_boundary, total_frames)
    if prefix is not None:
        engine.prime(prefix)
    for block in blocks:
        engine.process(block)
    engine.finish()
    offset = 0.0 if full_scale_level_db is None else float(full_scale_level_db)
    overall, intervals = engine.results(offset, full_scale_level_db is not None, start_time)
    return engine, overall, intervals


def analyse_array(
    x: np.ndarray,
    fs: float,
    settings: AnalysisSettings | None = None,
    full_scale_level_db: float | None = None,
    start_time: datetime | None = None,
) -> tuple[IntervalResult, IntervalSeries]:
    """Analyse a signal held in memory (samples on the +-1 scale) with the streaming engine.

    Returns the whole-signal result and the interval results; levels in dB re 20 uPa when
    ``full_scale_level_db`` is given, else dB re full scale (keys with ``_dBFS``).
    """
    settings = settings or AnalysisSettings()
    x = np.asarray(x, dtype=np.float64)
    step = settings.block_frames
    blocks = (x[i : i + step] for i in range(0, len(x), step))
    _, overall, intervals = analyse_blocks(
        blocks, fs, settings, full_scale_level_db, prefix=x[: prefix_samples(fs, settings)],
        start_time=start_time, total_frames=len(x)
    )
    return overall, intervals


#: A DC offset that raises LZeq by at least this much is warned about, dB.
DC_WARNING_DB = 0.1


def dc_offset_warning(sum_x: float, sum_x2: float, n: int) -> str | None:
    """A warning when the recording's mean (DC offset) adds >= ``DC_WARNING_DB`` to LZeq.

    The DC part of the mean square is mean(x)^2; removing it lowers the Z-weighted level by
    ``-10 lg(1 - mean^2 / ms)`` (energy arithmetic). A and C weighting block DC, so only the
    Z-weighted quantities (LZeq, LZpeak, Z bands below the lowest band) are affected.
    """
    if n <= 0 or sum_x2 <= 0:
        return None
    mean = sum_x / n
    share = min(mean * mean / (sum_x2 / n), 1.0)
    if share >= 1.0:
        return ("the recording is a constant (DC) value: no sound; check the recorder and "
                "its input")
    raised = -10.0 * math.log10(1.0 - share)
    if raised < DC_WARNING_DB:
        return None
    return (f"DC offset of {mean:+.4g} (full scale 1) raises LZeq and LZpeak by {raised:.2f} "
            "dB (A and C are not affected); check the recorder's input or high-pass the file")


def analyse_file(
    path: str,
    calibration: Any | None,
    settings: AnalysisSettings | None = None,
    channel: int = 1,
    start_time: datetime | None = None,
    allow_uncalibrated: bool = False,
    first_boundary: int = 0,
) -> LevelResult:
    """Analyse one channel of a recording in one streaming pass.

    Parameters
    ----------
    path : str
        Recording file.
    calibration : Calibration or None
        Chain calibration (see :mod:`bandmeter.calibration`). None is only accepted with
        ``allow_uncalibrated=True`` and gives levels in dB re full scale.
    settings : AnalysisSettings, optional
        What to compute (defaults: whole recording, default percentiles, no bands).
    channel : int
        Channel, 1-based.
    start_time : datetime, optional
        Clock time of the first sample (timezone-aware).
    allow_uncalibrated : bool
        Accept a missing calibration and report dB re full scale.
    first_boundary : int
        Sample index of the first interval boundary (clock alignment; 0: intervals start
        with the recording). The samples before it form a first, partial interval.

    Returns
    -------
    LevelResult
    """
    return analyse_recordings([path], calibration, settings, channel, start_time,
                              allow_uncalibrated, first_boundary)


def _open_all(paths: Sequence[str], channel: int) -> list[Recording]:
    """Open every part of a measurement; all must share rate, channels and sample format."""
    recordings: list[Recording] = []
    try:
        for path in paths:
            recordings.append(Recording(path, channel))
            first, this = recordings[0].info, recordings[-1].info
            for attr in ("sample_rate", "channels", "subtype"):
                if getattr(this, attr) != getattr(first, attr):
                    raise SettingsError(
                        f"{path}: {attr} {getattr(this, attr)} differs from "
                        f"{getattr(first, attr)} of {first.path}; files of different formats "
                        "cannot be joined into one measurement"
                    )
    except BaseException:
        for rec in recordings:
            rec.close()
        raise
    return recordings


def _chained_blocks(recordings: Sequence[Recording], block_frames: int) -> Iterable[np.ndarray]:
    for rec in recordings:
        yield from rec.blocks(block_frames)


def analyse_recordings(
    paths: Sequence[str],
    calibration: Any | None,
    settings: AnalysisSettings | None = None,
    channel: int = 1,
    start_time: datetime | None = None,
    allow_uncalibrated: bool = False,
    first_boundary: int = 0,
    known_sha256: Sequence[str] | None = None,
) -> LevelResult:
    """Analyse consecutive files of one recorder as one measurement, in one streaming pass.

    The files are read one after the other into the same engine, so filter states, time
    weightings and intervals run across the file boundaries exactly as in one long file
    (recorders split long recordings every hour or at 2 GB). With a single path this is
    :func:`analyse_file`. Parameters as there; the result's ``file`` is the first path and
    ``recording["parts"]`` lists every part with its frames and SHA-256. ``known_sha256``
    (one per path) skips hashing files whose hash the caller has just computed.
    """
    from .calibration import Calibration  # local: calibration imports audio only

    settings = settings or AnalysisSettings()
    if not paths:
        raise SettingsError("no recording given")
    path = str(paths[0])
    if calibration is None and not allow_uncalibrated:
        raise SettingsError(
            f"{path}: no calibration given; pass --cal, --cal-tone with --cal-level, or "
            "--full-scale-level (or --dbfs for levels re full scale)"
        )
    if calibration is not None:
        if not isinstance(calibration, Calibration):
            raise TypeError(f"calibration must be a Calibration, got {type(calibration)!r}")
        calibration.check_channel(channel)
    recordings = _open_all([str(p) for p in paths], channel)
    try:
        info = recordings[0].info
        frames = sum(rec.frames for rec in recordings)
        want = min(frames, prefix_samples(info.sample_rate, settings))
        prefix = np.concatenate([rec.read(0, min(rec.frames, want)) for rec in recordings])[:want]
        engine, overall, intervals = analyse_blocks(
            _chained_blocks(recordings, settings.block_frames),
            info.sample_rate,
            settings,
            None if calibration is None else calibration.full_scale_level_db,
            info.full_scale_threshold,
            prefix=prefix,
            start_time=start_time,
            first_boundary=first_boundary,
            total_frames=frames,
        )
    except SettingsError as exc:  # e.g. no band at this sample rate: name the recording
        if str(exc).startswith(path):
            raise
        raise SettingsError(f"{path}: {exc}") from None
    finally:
        for rec in recordings:
            rec.close()
    duration_s = frames / info.sample_rate
    warnings = list(engine.warnings)
    if settings.interval_s is not None and settings.interval_s * info.sample_rate > frames:
        warnings.append(
            f"interval {settings.interval_s:g} s is longer than the recording "
            f"({duration_s:.3f} s): one partial interval"
        )
    if overall.full_scale_samples:
        flagged = int(np.count_nonzero(intervals.full_scale_samples))
        warnings.append(
            f"{overall.full_scale_samples} sample(s) at or beyond full scale in {flagged} "
            "interval(s): possible overload, levels there may be too low; see the overload flags"
        )
    warnings.extend(w for w in (rec.info.truncation_warning() for rec in recordings) if w)
    dc = dc_offset_warning(engine.sum_x, float(engine.acc["sum_z2"].sum()), frames)
    if dc:
        warnings.append(dc)
    if calibration is not None:
        warnings.extend(f"calibration: {w}" for w in calibration.warnings)
    hashes = (list(known_sha256) if known_sha256 is not None
              else [file_sha256(rec.path) for rec in recordings])
    recording = {**info.to_dict(), "frames": frames, "duration_s": duration_s}
    if len(recordings) > 1:
        recording["parts"] = [
            {"path": rec.path, "frames": rec.frames, "sha256": sha}
            for rec, sha in zip(recordings, hashes, strict=True)
        ]
    provenance = {**tool_stamp(), "sha256": hashes[0] if len(hashes) == 1 else hashes}
    unit = UNIT_SPL if calibration is not None else UNIT_DBFS
    history = None
    if engine.history is not None:
        history = engine.history.result(
            frames, 0.0 if calibration is None else calibration.full_scale_level_db,
            start_time, unit)
        if engine.bank is not None:
            history.bands = [BandInfo(b.nominal_hz, b.exact_hz, b.label)
                             for b in engine.bank.bands]
            history.band_key = f"L{settings.band_weighting}eq"
    distribution = engine.distribution(
        0.0 if calibration is None else calibration.full_scale_level_db, calibration is not None)
    return LevelResult(
        file=path,
        distribution=distribution,
        channel=channel,
        sample_rate=info.sample_rate,
        frames=frames,
        unit=unit,
        history=history,
        overall=overall,
        intervals=intervals,
        settings=settings.to_dict(),
        calibration=None if calibration is None else calibration.to_dict(),
        recording=recording,
        provenance=provenance,
        warnings=warnings,
    )
