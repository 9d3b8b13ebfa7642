"""Conformance self-test of the digital processing, modelled on IEC 61672-3 and IEC 61260-3.

:func:`run_verification` generates electrical test signals in the digital domain (samples on
the +-1 full-scale scale, quantised to a recording's sample format where the test is about
the format) at a chosen sample rate and runs them through the code that analyses
recordings: :func:`bandmeter.engine.analyse_blocks`, the entry point that
:func:`bandmeter.engine.analyse_recordings` feeds with the blocks of a file (the streaming
:class:`~bandmeter.engine.LevelEngine`), for the broadband and band levels;
:func:`bandmeter.engine.analyse_file` itself for the decoding of generated WAV files; and
:class:`~bandmeter.filterbank.FractionalOctaveBank`, built exactly as the engine builds it,
for the relative attenuation of each band filter. Each test compares the measured value with
the expected value and the acceptance limits of the chosen class and reports the margin
(distance to the nearer limit, positive inside).

What it shows: that this software, at this sample rate, computes what the standards ask of
the digital part of a sound level meter and of a fractional-octave filter set. What it does
not show: anything about the microphone, preamplifier, recorder, their calibration or the
acoustic environment (:data:`SOFTWARE_ONLY_NOTE`).

Sources and confidence (REFERENCE_VALUES.md, sections named beside each table): every test
names what it follows in ``TestResult.follows``, including whether its limits were
*confirmed* on a found page or are *from memory* (unconfirmed: verify against the purchased
standard before relying on them). Levels are in dB re full scale (full-scale sine = 0 dBFS);
the analysis is uncalibrated, which changes no relative level.

Tests that a sample rate cannot carry (a frequency at or above fs/2, a burst shorter than
one cycle of the carrier) are left out and listed in ``VerificationReport.notes``; they are
not counted as passed.

Settling: steady levels are read from the engine's intervals after a first 0.25 s interval
that holds the filters' switch-on (32 time constants of the 20.6 Hz weighting poles), and
each steady level is the energy average of a sine and a cosine run, whose squares add to a
constant sample by sample: the mean square of a sampled sinusoid without leakage at any
frequency up to fs/2. The band filters are read after their slowest pole has decayed to
1e-5, plus the decimators' FIR spans.
"""

from __future__ import annotations

import math
import os
import tempfile
import time
from collections.abc import Callable, Sequence
from dataclasses import dataclass, field
from typing import Any, NamedTuple

import numpy as np
import soundfile as sf

from .audio import BIT_DEPTH, RecordingInfo
from .bands import Band, G
from .compiled import describe
from .engine import (
    AnalysisSettings,
    LevelEngine,
    analyse_blocks,
    analyse_file,
    prefix_samples,
)
from .errors import SettingsError
from .filterbank import HALFBAND_TAPS, FractionalOctaveBank
from .levels import average_levels, combine_levels
from .results import DBFS_SUFFIX, IntervalResult, IntervalSeries
from .signals import pink_noise, sine, tone_burst
from .weighting import FS_MAX_HZ, FS_MIN_HZ, analytic_response_db

__all__ = [
    "GROUPS",
    "SAMPLE_FORMATS",
    "SOFTWARE_ONLY_NOTE",
    "TestResult",
    "VerificationReport",
    "run_verification",
]

#: Printed with every report (text, JSON; a short form on every CSV row).
SOFTWARE_ONLY_NOTE = (
    "This verifies the digital processing (software) alone, with electrical test signals "
    "generated in the digital domain; it does not verify the microphone, preamplifier, "
    "recorder or their calibration. A class statement for an instrument needs the whole "
    "measurement chain tested (IEC 61672-3 periodic tests, IEC 61260-3 for filters). "
    "Limits marked 'from memory' are recalled values, not yet checked against the standards."
)
#: Short form of :data:`SOFTWARE_ONLY_NOTE` for the ``scope`` column of the CSV report.
SOFTWARE_ONLY_SHORT = "software only: not the microphone, preamplifier or recorder"

#: Test groups in report order (``groups`` of :func:`run_verification`).
GROUPS = ("weighting", "linearity", "bursts", "repeated", "cpeak", "decay", "overload",
          "decoding", "filters")

#: Sample formats whose dynamic range, overload point and decoding are tested (libsndfile
#: subtype names, as in :data:`bandmeter.audio.BIT_DEPTH`).
SAMPLE_FORMATS = ("PCM_16", "PCM_24", "FLOAT")

INF = math.inf
#: First interval of every steady-signal run, s: holds the filters' switch-on transient.
SETTLE_S = 0.25
#: Amplitude of the steady weighting test sine, full scale (-20 dBFS).
WEIGHTING_AMPLITUDE = 0.1
#: Amplitude of the tone bursts and C-peak signals, full scale (-6 dBFS).
BURST_AMPLITUDE = 0.5
#: Carrier of the tone bursts and decay tests, Hz (IEC 61672-1 tone bursts: 4 kHz).
BURST_HZ = 4000.0
#: Level linearity: test frequency, Hz (IEC 61672-3 uses 8 kHz, from memory), and the
#: frequency used where 8 kHz is not below 0.4 fs (1 kHz, the reference frequency).
LINEARITY_HZ = 8000.0
LINEARITY_FALLBACK_HZ = 1000.0
#: Starting point of the level linearity test, dBFS (the reading there anchors the
#: expected values, as the reference level does in IEC 61672-3).
LINEARITY_REFERENCE_DBFS = -20.0
#: Lowest level tested for float32 samples, dBFS (no quantisation floor in range).
FLOAT_BOTTOM_DBFS = -140.0
_TEN_LG_E = 10.0 * math.log10(math.e)

# ------------------------------------------------------------------------------------------
# Limit tables (each with its source; "confirmed" / "from memory" as REFERENCE_VALUES.md says)

#: IEC 61672-1:2002 Table 2 (= GOST 17187-2010 Table 2) tolerance limits including the
#: maximum expanded uncertainty of measurement, dB; the same frequencies as IEC 61672-1:2013
#: Table 3. REFERENCE_VALUES.md 1.2, confirmed. Rows: nominal Hz, class 1 lower, upper,
#: class 2 lower, upper; row i has the exact frequency 1000 * 10^(0.1 (i - 20)) Hz.
WEIGHTING_LIMITS: tuple[tuple[float, float, float, float, float], ...] = (
    (10, -INF, 3.5, -INF, 5.5), (12.5, -INF, 3.0, -INF, 5.5), (16, -4.5, 2.5, -INF, 5.5),
    (20, -2.5, 2.5, -3.5, 3.5), (25, -2.0, 2.5, -3.5, 3.5), (31.5, -2.0, 2.0, -3.5, 3.5),
    (40, -1.5, 1.5, -2.5, 2.5), (50, -1.5, 1.5, -2.5, 2.5), (63, -1.5, 1.5, -2.5, 2.5),
    (80, -1.5, 1.5, -2.5, 2.5), (100, -1.5, 1.5, -2.0, 2.0), (125, -1.5, 1.5, -2.0, 2.0),
    (160, -1.5, 1.5, -2.0, 2.0), (200, -1.5, 1.5, -2.0, 2.0), (250, -1.4, 1.4, -1.9, 1.9),
    (315, -1.4, 1.4, -1.9, 1.9), (400, -1.4, 1.4, -1.9, 1.9), (500, -1.4, 1.4, -1.9, 1.9),
    (630, -1.4, 1.4, -1.9, 1.9), (800, -1.4, 1.4, -1.9, 1.9), (1000, -1.1, 1.1, -1.4, 1.4),
    (1250, -1.4, 1.4, -1.9, 1.9), (1600, -1.6, 1.6, -2.6, 2.6), (2000, -1.6, 1.6, -2.6, 2.6),
    (2500, -1.6, 1.6, -3.1, 3.1), (3150, -1.6, 1.6, -3.1, 3.1), (4000, -1.6, 1.6, -3.6, 3.6),
    (5000, -2.1, 2.1, -4.1, 4.1), (6300, -2.6, 2.1, -5.1, 5.1), (8000, -3.1, 2.1, -5.6, 5.6),
    (10000, -3.6, 2.6, -INF, 5.6), (12500, -6.0, 3.0, -INF, 6.0),
    (16000, -17.0, 3.5, -INF, 6.0), (20000, -INF, 4.0, -INF, 6.0),
)

#: At 1 kHz, steady signal: limit on LC - LA and LZ - LA, and on LAF - LAeq and LAS - LAeq,
#: dB, the same for class 1 and 2 (IEC 61672-1:2013 5.5.9 and 5.8.3; from memory,
#: unconfirmed; not in REFERENCE_VALUES.md).
AT_1KHZ_WEIGHTING_LIMIT_DB = 0.2
AT_1KHZ_TIME_LIMIT_DB = 0.1

#: IEC 61672-1:2013 Table 4, 4 kHz tone bursts: Tb in ms, class 1 lower, upper, class 2
#: lower, upper relative to the reference response, dB, and whether S is tabulated.
#: REFERENCE_VALUES.md 2: limits from memory, unconfirmed (low confidence).
BURST_LIMITS: tuple[tuple[float, float, float, float, float, bool], ...] = (
    (1000, -0.5, 0.5, -1.0, 1.0, True), (500, -0.5, 0.5, -1.0, 1.0, True),
    (200, -0.5, 0.5, -1.0, 1.0, True), (100, -1.0, 1.0, -1.0, 1.0, True),
    (50, -1.0, 1.0, -1.5, 1.0, True), (20, -1.0, 1.0, -1.5, 1.0, True),
    (10, -1.0, 1.0, -1.5, 1.0, True), (5, -1.0, 1.0, -1.5, 1.0, True),
    (2, -1.5, 1.0, -2.0, 1.0, True), (1, -2.0, 1.0, -3.0, 1.0, False),
    (0.5, -2.5, 1.0, -4.0, 1.0, False), (0.25, -3.0, 1.0, -5.0, 1.5, False),
)

#: LCpeak - LC: signal, frequency Hz, published reference difference dB, class 1 and class 2
#: half-width of the limits dB (IEC 61672-1:2002 incl. uncertainty). REFERENCE_VALUES.md 3:
#: values and limits from memory, unconfirmed (IEC 61672-1:2013 Table 5).
CPEAK_CASES: tuple[tuple[str, float, float, float, float], ...] = (
    ("one cycle of 8 kHz", 8000.0, 3.4, 2.4, 3.4),
    ("positive half-cycle of 500 Hz", 500.0, 2.4, 1.4, 2.4),
    ("negative half-cycle of 500 Hz", 500.0, 2.4, 1.4, 2.4),
)

#: Level linearity deviation limit, dB, class 1 / 2 (IEC 61672-1:2013 5.6, from memory,
#: unconfirmed; not in REFERENCE_VALUES.md).
LINEARITY_LIMIT_DB = {1: 0.8, 2: 1.1}
#: Limit on the change of indication for a 1 dB to 10 dB change of input, dB, class 1 / 2
#: (IEC 61672-1:2013 5.6, from memory, unconfirmed).
STEP_LIMIT_DB = {1: 0.3, 2: 0.5}

#: Decay-rate design goals and limits, dB/s (goal, lower, upper), the same for both classes
#: (IEC 61672-1:2013 5.8; REFERENCE_VALUES.md 4: from memory, unconfirmed). The goals are
#: the rounded values of 10 lg(e) / tau (physics).
DECAY_LIMITS = {"F": (34.7, 31.0, 38.5), "S": (4.3, 3.6, 5.1)}  # goal -3.7/+3.8, -0.7/+0.8
TAU_S = {"F": 0.125, "S": 1.0}

#: Largest difference between a level read from a generated WAV file through the reader and
#: the level of the same samples analysed in memory, dB: the project's tolerance (identical
#: samples; only the order of floating-point sums may differ; no standard value).
DECODING_LIMIT_DB = 1e-6

#: IEC 61260-1:2014 Table 1 relative-attenuation limits at the octave breakpoints
#: Omega_1 = G^k: k, class 1 min, max, class 2 min, max, dB. REFERENCE_VALUES.md 5.2 (GOST R
#: 70024 Table B.1): confirmed, except the G^(1/2) row (from memory, unconfirmed).
FILTER_LIMITS: tuple[tuple[float, float, float, float, float], ...] = (
    (0.0, -0.4, 0.4, -0.6, 0.6), (0.125, -0.4, 0.5, -0.6, 0.7), (0.25, -0.4, 0.7, -0.6, 0.9),
    (0.375, -0.4, 1.4, -0.6, 1.7), (0.5, 1.2, 5.3, 0.8, 5.4), (1.0, 16.6, INF, 15.6, INF),
    (2.0, 40.5, INF, 39.5, INF), (3.0, 60.0, INF, 54.0, INF), (4.0, 70.0, INF, 60.0, INF),
)

#: Band level linearity limit, dB, class 1 / 2 (IEC 61260-1:2014 linear operating range,
#: from memory, unconfirmed).
BAND_LINEARITY_LIMIT_DB = {1: 0.4, 2: 0.6}
#: Band energy sum versus the broadband level, dB: the project's tolerance (no standard
#: value; physics: energy conservation, Parseval).
SUMMATION_LIMIT_DB = 0.2


# ------------------------------------------------------------------------------------------
# Results


@dataclass(frozen=True)
class TestResult:
    """One row of the verification report.

    Attributes
    ----------
    name : str
        What was tested, with the unit when it is not dB.
    follows : str
        Standard (clause or table) the test is modelled on, the source of the expected
        value and of the limits and their confidence.
    expected : float or None
        Expected value (design goal or reference response); None when the standard gives
        only limits.
    measured : float
        Value read from the engine or the filter bank.
    lower_limit, upper_limit : float
        Acceptance limits of the chosen class in the unit of ``measured`` (-inf / inf: no
        limit on that side).
    group : str
        Test group (one of :data:`GROUPS`).
    """

    __test__ = False  # not a pytest test class

    name: str
    follows: str
    expected: float | None
    measured: float
    lower_limit: float
    upper_limit: float
    group: str = ""

    @property
    def margin(self) -> float:
        """Distance to the nearer limit (positive inside, negative outside); NaN when not
        measured (the test fails)."""
        m = self.measured
        if math.isnan(m):
            return math.nan
        if math.isinf(m):  # e.g. no response at all: inside only when that side is open
            return INF if m == (self.lower_limit if m < 0 else self.upper_limit) else -INF
        return min(m - self.lower_limit, self.upper_limit - m)

    @property
    def passed(self) -> bool:
        """True when the measured value lies within the limits (inclusive)."""
        return bool(self.margin >= 0.0)

    def to_dict(self) -> dict[str, Any]:
        """Plain data: name, group, follows, expected, measured, limits, margin, passed.

        Infinite limits and margins stay floats here; the JSON writer turns them into null
        (no limit on that side).
        """
        return {
            "name": self.name,
            "group": self.group,
            "follows": self.follows,
            "expected": self.expected,
            "measured": self.measured,
            "lower_limit": self.lower_limit,
            "upper_limit": self.upper_limit,
            "margin": self.margin,
            "passed": self.passed,
        }


@dataclass
class VerificationReport:
    """Outcome of :func:`run_verification`.

    Attributes
    ----------
    rate_hz : float
        Sample rate verified, Hz.
    instrument_class : int
        Class whose limits were applied (1 or 2).
    bands : int
        Fractional-octave designator of the filters verified (1 or 3).
    quick : bool
        True for the reduced test set.
    groups : tuple of str
        Groups run, in :data:`GROUPS` order.
    tests : list of TestResult
        One row per test, in :data:`GROUPS` order.
    elapsed_s : float
        Run time, s.
    notes : list of str
        What the sample rate leaves out or changes (tests not run are not counted).
    kernels : str
        Which paths computed the results (:func:`bandmeter.compiled.describe`), the same
        that analyse recordings in this installation.
    """

    rate_hz: float
    instrument_class: int
    bands: int
    quick: bool
    groups: tuple[str, ...] = GROUPS
    tests: list[TestResult] = field(default_factory=list)
    elapsed_s: float = 0.0
    notes: list[str] = field(default_factory=list)
    kernels: str = field(default_factory=describe)

    @property
    def passed(self) -> bool:
        """True when every test passed (and there was at least one)."""
        return bool(self.tests) and all(t.passed for t in self.tests)

    @property
    def failed(self) -> list[TestResult]:
        """The tests that failed."""
        return [t for t in self.tests if not t.passed]

    def worst(self) -> dict[str, TestResult]:
        """The test with the smallest margin in each group run (a failed test first).

        Rows whose limits are a single value (exact counts: margin 0 when right) are left
        out unless they failed; a group holding only such rows is absent.
        """
        out: dict[str, TestResult] = {}
        for t in self.tests:
            if t.passed and t.lower_limit == t.upper_limit:
                continue
            key = -INF if math.isnan(t.margin) else t.margin
            best = out.get(t.group)
            if best is None or key < (-INF if math.isnan(best.margin) else best.margin):
                out[t.group] = t
        return out

    def to_dict(self) -> dict[str, Any]:
        """``{"rate_hz", "class", "bands", "quick", "groups", "software_only_note",
        "coverage_notes", "kernels", "tests", "passed", "elapsed_s"}``."""
        return {
            "rate_hz": self.rate_hz,
            "class": self.instrument_class,
            "bands": self.bands,
            "quick": self.quick,
            "groups": list(self.groups),
            "software_only_note": SOFTWARE_ONLY_NOTE,
            "coverage_notes": list(self.notes),
            "kernels": self.kernels,
            "tests": [t.to_dict() for t in self.tests],
            "passed": self.passed,
            "elapsed_s": self.elapsed_s,
        }


# ------------------------------------------------------------------------------------------
# Engine helpers and sample formats


def format_info(subtype: str, fs: float, frames: int) -> RecordingInfo:
    """Header of a (virtual) mono WAV recording with this sample format."""
    return RecordingInfo("(generated)", "WAV", subtype, BIT_DEPTH[subtype], int(round(fs)), 1,
                         frames)


def full_scale_threshold(subtype: str | None) -> float:
    """Magnitude the reader counts as full scale for ``subtype`` (float64 input: 1.0), from
    :attr:`bandmeter.audio.RecordingInfo.full_scale_threshold`."""
    return 1.0 if subtype is None else format_info(subtype, 48000.0, 0).full_scale_threshold


def quantise(x: np.ndarray, subtype: str | None, dither_seed: int | None = None) -> np.ndarray:
    """``x`` as the reader delivers it from a file of ``subtype``: PCM rounded to integer
    codes (two's complement range, clipped) divided by 2^(n-1); FLOAT rounded to float32;
    None leaves float64.

    With ``dither_seed``, PCM is dithered first with triangular (TPDF) noise of +-1 LSB
    peak (seeded, so reproducible): the quantiser is then linear on average for any signal,
    as the analogue noise of every recorder makes it, at the cost of a white error of
    LSB^2/4 (without dither a low-level sine that repeats every few samples, such as 8 kHz
    at 48 kHz, is rounded to a few codes whose fundamental can be off by tenths of a dB:
    a property of the test signal, not of the analysis).
    """
    if subtype is None or subtype == "DOUBLE":
        return np.asarray(x, dtype=np.float64)
    if subtype == "FLOAT":
        return np.asarray(x, dtype=np.float32).astype(np.float64)
    half = 2.0 ** (BIT_DEPTH[subtype] - 1)
    codes = np.asarray(x, dtype=np.float64) * half
    if dither_seed is not None:
        rng = np.random.default_rng(dither_seed)
        codes = codes + rng.uniform(-0.5, 0.5, codes.size) + rng.uniform(-0.5, 0.5, codes.size)
    return np.clip(np.round(codes), -half, half - 1.0) / half


def noise_floor_dbfs(subtype: str) -> float:
    """Level of the error of TPDF-dithered rounding (white, LSB^2/4) re a full-scale sine,
    dBFS: 20 lg(LSB) - 3.01 dB, -93.3 dBFS for 16-bit and -141.5 dBFS for 24-bit PCM
    (physics)."""
    lsb = 2.0 ** (1 - BIT_DEPTH[subtype])
    return 10.0 * math.log10(2.0 * lsb * lsb / 4.0)


def linearity_bottom_dbfs(subtype: str) -> float:
    """Lowest level of the linearity test: PCM 20 dB above the dithered noise floor (which
    then adds at most 0.05 dB), rounded up to 5 dB (16-bit -70 dBFS, 24-bit -120 dBFS);
    FLOAT -140 dBFS."""
    if subtype == "FLOAT":
        return FLOAT_BOTTOM_DBFS
    return 5.0 * math.ceil((noise_floor_dbfs(subtype) + 20.0) / 5.0)


def analyse(x: np.ndarray, fs: float, settings: AnalysisSettings | None = None,
            threshold: float = 1.0) -> tuple[IntervalResult, IntervalSeries]:
    """Run the engine over ``x`` as :func:`bandmeter.engine.analyse_recordings` runs it over
    a file: blocks of ``settings.block_frames``, the prefix that seeds the time weightings,
    the total length and the format's full-scale threshold."""
    settings = settings or AnalysisSettings()
    x = np.asarray(x, dtype=np.float64)
    step = settings.block_frames
    blocks = (x[i : i + step] for i in range(0, len(x), step))
    _, overall, intervals = analyse_blocks(
        blocks, fs, settings, None, threshold, prefix=x[: prefix_samples(fs, settings)],
        total_frames=len(x))
    return overall, intervals


def _level(iv: IntervalResult, key: str) -> float:
    """Metric ``key`` (e.g. "LAeq") of an uncalibrated result, dB re full scale."""
    return float(iv.metrics[key + DBFS_SUFFIX])


def _dbfs(amplitude: float) -> float:
    """Level of a sine of this amplitude, dB re full scale (full-scale sine = 0 dBFS)."""
    return 20.0 * math.log10(amplitude)


def _steady_span_s(f_hz: float, min_s: float) -> float:
    """At least ``min_s`` seconds, rounded up to a whole number of half periods of f."""
    half = 0.5 / f_hz
    return math.ceil(min_s / half - 1e-9) * half


def _interval_average(intervals: Sequence[IntervalResult], key: str) -> float:
    """Energy average of ``key`` over intervals, weighted by their durations."""
    return average_levels([_level(iv, key) for iv in intervals],
                          [iv.duration_s for iv in intervals])


def steady_levels(fs: float, f_hz: float, amplitude: float, keys: Sequence[str],
                  min_s: float = SETTLE_S, subtype: str | None = None) -> dict[str, float]:
    """Engine Leq levels of a steady sine, read after the settling interval.

    Parameters
    ----------
    fs : float
        Sample rate, Hz.
    f_hz : float
        Frequency of the sine, Hz (below fs/2).
    amplitude : float
        Amplitude, full scale.
    keys : sequence of str
        Leq metrics to read (e.g. "LAeq"), without the dBFS suffix.
    min_s : float
        Shortest steady span, s (rounded up to whole half periods of the sine).
    subtype : str, optional
        Quantise the signal to this sample format first, PCM with TPDF dither (see
        :func:`quantise`).

    Returns
    -------
    dict
        Level of each key over the steady span, dB re full scale: the energy average of a
        sine-phase and a cosine-phase run. For a linear filter in steady state the two
        outputs are ``g sin(theta)`` and ``g cos(theta)``, whose squares add to ``g^2`` at
        every sample, so the average is the sinusoid's mean square without leakage, also
        close to fs/2 where a sampled sine beats with the sampling.
    """
    span = _steady_span_s(f_hz, min_s)
    settings = AnalysisSettings(interval_s=SETTLE_S)
    readings: dict[str, list[float]] = {key: [] for key in keys}
    for seed, phase in enumerate((0.0, 0.5 * math.pi)):
        x = quantise(sine(fs, f_hz, SETTLE_S + span, amplitude, phase), subtype,
                     dither_seed=61672 + seed)
        _, intervals = analyse(x, fs, settings, full_scale_threshold(subtype))
        for key in keys:
            readings[key].append(_interval_average(intervals[1:], key))
    return {key: average_levels(values) for key, values in readings.items()}


def exact_third_octave_hz(i: int) -> float:
    """Exact frequency of row ``i`` of :data:`WEIGHTING_LIMITS`: 1000 * 10^(0.1 (i - 20)) Hz
    (IEC 61672-1, base-10 one-third-octave frequencies, REFERENCE_VALUES.md 1.1)."""
    return 1000.0 * 10.0 ** (0.1 * (i - 20))


def _limits(cls: int, lo1: float, hi1: float, lo2: float, hi2: float) -> tuple[float, float]:
    return (lo1, hi1) if cls == 1 else (lo2, hi2)


def burst_carrier_hz(fs: float) -> float:
    """Carrier of the tone bursts and the decay test: 4 kHz (IEC 61672-1), or fs/4 where
    4 kHz lies above fs/4 (rates below 16 kHz; the references do not depend on it)."""
    return BURST_HZ if BURST_HZ <= fs / 4 else fs / 4


def linearity_hz(fs: float) -> float:
    """Frequency of the level linearity test: 8 kHz where it lies below 0.4 fs, else 1 kHz."""
    return LINEARITY_HZ if LINEARITY_HZ < 0.4 * fs else LINEARITY_FALLBACK_HZ


def _clean(value: float) -> float:
    """A computed expected value without float noise (-2.8e-14 -> 0.0, no "-0.0")."""
    return round(float(value), 9) + 0.0


# ------------------------------------------------------------------------------------------
# IEC 61672: frequency weightings


def _weighting_follows(cls: int) -> str:
    return (
        "IEC 61672-3 electrical test of frequency weightings (steady sine at the exact base-10 "
        "frequency, weighted level re the input level); expected: IEC 61672-1:2013 Annex E "
        f"design goal; limits: IEC 61672-1:2002 Table 2 (GOST 17187-2010) class {cls} incl. "
        "uncertainty, confirmed"
    )


def weighting_tests(fs: float, cls: int, quick: bool, notes: list[str]) -> list[TestResult]:
    """A, C and Z weighting at the one-third-octave frequencies 10 Hz..20 kHz below fs/2,
    then the frequency and time weightings at 1 kHz.

    ``quick`` keeps the octave frequencies (every third row from 31.5 Hz), 10 Hz and the
    highest frequency below fs/2.
    """
    testable = [i for i in range(len(WEIGHTING_LIMITS)) if exact_third_octave_hz(i) < fs / 2]
    above = [WEIGHTING_LIMITS[i][0] for i in range(len(WEIGHTING_LIMITS)) if i not in testable]
    if above:
        notes.append(
            f"frequency weightings: {above[0]:g} Hz to {above[-1]:g} Hz are not below fs/2 = "
            f"{fs / 2:g} Hz: not tested (a recording at this rate holds nothing there, so a "
            "class statement over the full IEC 61672-1 range is not possible at this rate)")
    rows = []
    for i in testable:
        if quick and i not in (0, testable[-1]) and (i - 5) % 3:
            continue
        nominal, *lims = WEIGHTING_LIMITS[i]
        f = exact_third_octave_hz(i)
        lo, hi = _limits(cls, *lims)
        levels = steady_levels(fs, f, WEIGHTING_AMPLITUDE, ("LAeq", "LCeq", "LZeq"))
        for letter in "ACZ":
            goal = _clean(analytic_response_db(letter, f))
            measured = levels[f"L{letter}eq"] - _dbfs(WEIGHTING_AMPLITUDE)
            rows.append(TestResult(f"{letter} weighting {nominal:g} Hz ({f:.2f} Hz)",
                                   _weighting_follows(cls), goal, measured, goal + lo,
                                   goal + hi, "weighting"))
    return rows + at_1khz_tests(fs)


def at_1khz_tests(fs: float) -> list[TestResult]:
    """Steady 1 kHz sine at -20 dBFS: LC and LZ re LA, LAF and LAS (max and min over the
    steady span, the one further off) re LAeq."""
    follows = (
        "IEC 61672-3 frequency and time weightings at 1 kHz (steady electrical 1 kHz sine); "
        "expected 0 dB (IEC 61672-1 definitions); limits: IEC 61672-1:2013 5.5.9 (+-"
        f"{AT_1KHZ_WEIGHTING_LIMIT_DB} dB, C and Z re A) and 5.8.3 (+-{AT_1KHZ_TIME_LIMIT_DB} "
        "dB, F and S re the time average), class 1 and 2, from memory, unconfirmed")
    x = sine(fs, 1000.0, 2.0 * SETTLE_S + 1.0, WEIGHTING_AMPLITUDE)
    _, intervals = analyse(x, fs, AnalysisSettings(interval_s=SETTLE_S))
    steady = intervals[1:]
    la = _interval_average(steady, "LAeq")
    rows = []
    for key in ("LCeq", "LZeq"):
        rows.append(TestResult(f"1 kHz: {key[:2]} - LA", follows, 0.0,
                               _interval_average(steady, key) - la,
                               -AT_1KHZ_WEIGHTING_LIMIT_DB, AT_1KHZ_WEIGHTING_LIMIT_DB,
                               "weighting"))
    for letter in ("F", "S"):
        extremes = [_level(iv, f"LA{letter}{what}") - la for iv in steady
                    for what in ("max", "min")]
        rows.append(TestResult(f"1 kHz: LA{letter} (max, min) - LAeq, further off", follows,
                               0.0, max(extremes, key=abs), -AT_1KHZ_TIME_LIMIT_DB,
                               AT_1KHZ_TIME_LIMIT_DB, "weighting"))
    return rows


# ------------------------------------------------------------------------------------------
# IEC 61672: level linearity


def _linearity_levels(subtype: str, quick: bool) -> list[float]:
    """Levels tested, dBFS: 0 to -5 in 1 dB steps, then 5 dB steps down to the format's
    bottom (IEC 61672-3 pattern, from memory); quick: 20 dB steps (24-bit) or the top, the
    reference and the bottom (16-bit)."""
    bottom = linearity_bottom_dbfs(subtype)
    if quick:
        if subtype == "PCM_16":
            return [0.0, LINEARITY_REFERENCE_DBFS, bottom]
        return [float(-d) for d in range(0, int(-bottom) + 1, 20)] + (
            [bottom] if bottom % 20 else [])
    top = [float(-d) for d in range(0, 5)]
    return top + [float(-d) for d in range(5, int(-bottom) + 1, 5)]


def linearity_tests(fs: float, cls: int, quick: bool, notes: list[str]) -> list[TestResult]:
    """Level linearity of each sample format of :data:`SAMPLE_FORMATS` over its dynamic range.

    A steady sine (8 kHz, or 1 kHz at low rates) is quantised to the format and analysed;
    expected is the reading at the reference level -20 dBFS plus the change of input level
    (IEC 61672-1 level linearity deviation). Quick: PCM_24 and PCM_16 only.
    """
    limit = LINEARITY_LIMIT_DB[cls]
    step_limit = STEP_LIMIT_DB[cls]
    f = linearity_hz(fs)
    if f != LINEARITY_HZ:
        notes.append(f"level linearity: tested at {f:g} Hz, as {LINEARITY_HZ:g} Hz is not "
                     f"below 0.4 fs = {0.4 * fs:g} Hz")
    follows = (
        f"IEC 61672-3 level linearity on the reference level range (the software has one), "
        f"steady electrical {f:g} Hz sine (IEC 61672-3: 8 kHz, from memory) quantised to the "
        "sample format (PCM with TPDF dither), over its dynamic range (PCM down to 20 dB "
        "above the dithered noise floor); expected: reading at -20 dBFS + change of input "
        f"level; limits: IEC 61672-1:2013 5.6 class {cls}, +-{limit} dB, and "
        f"+-{step_limit} dB for each 1 dB to 10 dB step, from memory, unconfirmed")
    rows = []
    for subtype in SAMPLE_FORMATS if not quick else ("PCM_24", "PCM_16"):
        levels = _linearity_levels(subtype, quick)
        if LINEARITY_REFERENCE_DBFS not in levels:
            levels = sorted([*levels, LINEARITY_REFERENCE_DBFS], reverse=True)
        read = {lv: steady_levels(fs, f, 10.0 ** (lv / 20.0), ("LAeq",),
                                  subtype=subtype)["LAeq"] for lv in levels}
        ref = read[LINEARITY_REFERENCE_DBFS]
        for lv in levels:
            expected = ref + lv - LINEARITY_REFERENCE_DBFS
            rows.append(TestResult(f"{subtype} {f / 1000:g} kHz at {lv:g} dBFS: LAeq", follows,
                                   expected, read[lv], expected - limit, expected + limit,
                                   "linearity"))
        steps = [(read[a] - read[b]) - (a - b) for a, b in zip(levels[:-1], levels[1:],
                                                                 strict=True)
                 if a - b <= 10.0]
        if steps:
            rows.append(TestResult(
                f"{subtype}: worst deviation of a 1..10 dB step ({len(steps)} steps)",
                follows, 0.0, max(steps, key=abs), -step_limit, step_limit, "linearity"))
    return rows


# ------------------------------------------------------------------------------------------
# IEC 61672: tone bursts


def _burst_follows(cls: int, carrier: float) -> str:
    return (
        f"IEC 61672-3 toneburst response, single {carrier:g} Hz bursts (IEC 61672-1: 4 kHz) "
        "starting and ending at zero crossings; expected: IEC 61672-1:2013 Table 4 reference "
        "responses, 10 lg(1 - exp(-Tb/tau)) (F 0.125 s, S 1 s) and 10 lg(Tb/1 s) (LAE), "
        f"computed; limits: Table 4 class {cls}, from memory, unconfirmed (low confidence)"
    )


def _steady_la(fs: float, carrier: float) -> float:
    return steady_levels(fs, carrier, BURST_AMPLITUDE, ("LAeq",))["LAeq"]


def _carrier_note(fs: float, carrier: float, notes: list[str]) -> None:
    text = (f"tone bursts and decay rates: carrier {carrier:g} Hz instead of 4 kHz (4 kHz is "
            f"above fs/4 = {fs / 4:g} Hz)")
    if carrier != BURST_HZ and text not in notes:
        notes.append(text)


def burst_tests(fs: float, cls: int, quick: bool, notes: list[str]) -> list[TestResult]:
    """LAFmax, LASmax and LAE of single tone bursts relative to the steady level LA.

    References: 10 lg(1 - exp(-Tb/tau)) (tau 0.125 s F, 1 s S) and 10 lg(Tb / 1 s), Tb the
    true duration of the whole cycles. ``quick`` keeps 1000, 100, 10, 1 and 0.25 ms. Bursts
    shorter than one cycle of the carrier are left out (noted).
    """
    carrier = burst_carrier_hz(fs)
    _carrier_note(fs, carrier, notes)
    follows = _burst_follows(cls, carrier)
    la = _steady_la(fs, carrier)
    rows, skipped = [], []
    for tb_ms, lo1, hi1, lo2, hi2, has_s in BURST_LIMITS:
        if quick and tb_ms not in (1000, 100, 10, 1, 0.25):
            continue
        if tb_ms / 1000.0 * carrier < 1.0 - 1e-9:
            skipped.append(f"{tb_ms:g} ms")
            continue
        lo, hi = _limits(cls, lo1, hi1, lo2, hi2)
        cycles = round(tb_ms / 1000.0 * carrier)
        tb = cycles / carrier  # true duration of the burst, s
        x = tone_burst(fs, carrier, tb, BURST_AMPLITUDE, lead_s=0.3, tail_s=0.3)
        overall, _ = analyse(x, fs)
        refs = [("LAFmax", 10 * math.log10(1 - math.exp(-tb / TAU_S["F"])), "LAFmax - LA"),
                ("LAE", 10 * math.log10(tb / 1.0), "LAE - LA")]
        if has_s:
            refs.insert(1, ("LASmax", 10 * math.log10(1 - math.exp(-tb / TAU_S["S"])),
                            "LASmax - LA"))
        for key, ref, what in refs:
            rows.append(TestResult(f"tone burst {tb_ms:g} ms: {what}", follows, ref,
                                   _level(overall, key) - la, ref + lo, ref + hi, "bursts"))
    if skipped:
        notes.append(f"tone bursts: {', '.join(skipped)} not tested (shorter than one cycle "
                     f"of the {carrier:g} Hz carrier)")
    return rows


def repeated_burst_tests(fs: float, cls: int, quick: bool,
                         notes: list[str]) -> list[TestResult]:
    """LAeq of tone bursts of 10 ms and 1 ms repeated every 1 s, relative to LA.

    Expected ``10 lg(N Tb / T)`` (energy arithmetic, the definition of Leq); limits: those
    of LAE for the same Tb (Leq,T is the energy sum of the bursts' LAE less 10 lg(T/1 s)).
    """
    carrier = burst_carrier_hz(fs)
    _carrier_note(fs, carrier, notes)
    follows = (
        f"IEC 61672-1:2013 5.9 toneburst response read as LAeq,T of a sequence of {carrier:g} "
        "Hz bursts, one per second (sequence test as in the superseded IEC 60804, from "
        "memory); expected 10 lg(N Tb/T) (energy arithmetic); limits: IEC 61672-1:2013 Table "
        f"4 LAE limits for the same Tb, class {cls}, from memory, unconfirmed (low confidence)"
    )
    la = _steady_la(fs, carrier)
    limits = {row[0]: row[1:5] for row in BURST_LIMITS}
    count = 5 if quick else 10
    rows = []
    for tb_ms in (10.0, 1.0):
        tb = round(tb_ms / 1000.0 * carrier) / carrier
        one = tone_burst(fs, carrier, tb, BURST_AMPLITUDE, lead_s=0.25, tail_s=0.75 - tb)
        x = np.tile(one, count)
        overall, _ = analyse(x, fs)
        expected = 10 * math.log10(count * tb / (x.size / fs))
        lo, hi = _limits(cls, *limits[tb_ms])
        rows.append(TestResult(
            f"{count} bursts of {tb_ms:g} ms in {x.size / fs:g} s: LAeq - LA", follows,
            expected, _level(overall, "LAeq") - la, expected + lo, expected + hi, "repeated"))
    return rows


# ------------------------------------------------------------------------------------------
# IEC 61672: C-weighted peak, decay rates, overload


def _peak_signal(fs: float, kind: str, f_hz: float) -> np.ndarray:
    """One cycle (8 kHz) or one half cycle (500 Hz, sign by ``kind``), the continuous
    waveform sampled, between 0.5 s of silence on each side, amplitude
    :data:`BURST_AMPLITUDE`."""
    if kind.startswith("one cycle"):
        body = tone_burst(fs, f_hz, 1.0 / f_hz, BURST_AMPLITUDE)
    else:
        t = np.arange(int(math.floor(fs / (2.0 * f_hz))) + 1) / fs
        body = BURST_AMPLITUDE * np.maximum(np.sin(2.0 * np.pi * f_hz * t), 0.0)
        if kind.startswith("negative"):
            body = -body
    gap = np.zeros(int(round(0.5 * fs)))
    return np.concatenate([gap, body, gap])


def cpeak_tests(fs: float, cls: int, quick: bool, notes: list[str]) -> list[TestResult]:
    """LCpeak - LC of one 8 kHz cycle and of 500 Hz half cycles (LC: steady sine, same
    amplitude)."""
    halves = [case[3] if cls == 1 else case[4] for case in CPEAK_CASES]
    follows = (
        "IEC 61672-3 C-weighted peak sound level (LC: steady sine of the same amplitude); "
        "expected: IEC 61672-1:2013 Table 5 reference differences; limits: IEC 61672-1:2002 "
        f"class {cls} +-{halves[0]:g} dB (8 kHz cycle), +-{halves[1]:g} dB (500 Hz half "
        "cycles) incl. uncertainty; values and limits from memory, unconfirmed"
    )
    rows = []
    for (kind, f_hz, published, _, _), half in zip(CPEAK_CASES, halves, strict=True):
        if f_hz >= fs / 2:
            notes.append(f"C-weighted peak: {kind} not tested ({f_hz:g} Hz is not below "
                         f"fs/2 = {fs / 2:g} Hz)")
            continue
        lc = steady_levels(fs, f_hz, BURST_AMPLITUDE, ("LCeq",))["LCeq"]
        overall, _ = analyse(_peak_signal(fs, kind, f_hz), fs)
        rows.append(TestResult(
            f"C peak, {kind}: LCpeak - LC", follows, published,
            _level(overall, "LCpeak") - lc, published - half, published + half, "cpeak"))
    return rows


def decay_tests(fs: float, cls: int, quick: bool, notes: list[str]) -> list[TestResult]:
    """F and S decay rates after a steady tone (the burst carrier) stops, dB/s.

    The tone runs 1 s, then 2 s of silence; with 0.5 s intervals the F (S) level in the
    interval 1.5..2 s (0.5 s to 1 s after the end) falls monotonically, so
    (max - min) / (samples - 1) * fs is the rate.
    """
    carrier = burst_carrier_hz(fs)
    _carrier_note(fs, carrier, notes)
    follows = (
        f"IEC 61672-1:2013 5.8 decay rate after a steady {carrier:g} Hz signal stops (a "
        "pattern-evaluation test, IEC 61672-2, not an IEC 61672-3 periodic test); expected "
        f"10 lg(e)/tau = {_TEN_LG_E / TAU_S['F']:.2f} dB/s (F) and {_TEN_LG_E / TAU_S['S']:.2f} "
        "dB/s (S) (physics; design goals 34.7 and 4.3 dB/s); limits, the same for class 1 and "
        "2: F 34.7 -3.7/+3.8 dB/s, S 4.3 -0.7/+0.8 dB/s, from memory, unconfirmed"
    )
    tone = sine(fs, carrier, 1.0, BURST_AMPLITUDE)
    x = np.concatenate([tone, np.zeros(int(round(2.0 * fs)))])
    _, intervals = analyse(x, fs, AnalysisSettings(interval_s=0.5))
    iv = intervals[3]
    span_s = (round(iv.duration_s * fs) - 1) / fs
    rows = []
    for letter in ("F", "S"):
        rate = (_level(iv, f"LA{letter}max") - _level(iv, f"LA{letter}min")) / span_s
        _, lo, hi = DECAY_LIMITS[letter]
        rows.append(TestResult(f"time weighting {letter}: decay rate (dB/s)", follows,
                               _TEN_LG_E / TAU_S[letter], rate, lo, hi, "decay"))
    return rows


def overload_signal(fs: float, subtype: str) -> tuple[np.ndarray, list[int]]:
    """4 s of a 1 kHz sine in the sample format, one situation per second, and the number of
    samples at or beyond full scale generated in each second.

    0..1 s: -0.1 dBFS (no overload); 1..2 s: driven to 1.5 x full scale (PCM clipped at
    the most negative and the largest positive code; FLOAT keeps the values above 1);
    2..3 s: -20 dBFS with one sample at +full scale; 3..4 s: -20 dBFS with one sample at
    -full scale.
    """
    n = int(round(fs))
    x = sine(fs, 1000.0, 4.0, 1.0, phase_rad=0.3)[: 4 * n]
    gain = np.repeat([10.0 ** (-0.1 / 20.0), 1.5, 0.1, 0.1], n)
    x = quantise(x * gain, subtype)
    threshold = full_scale_threshold(subtype)
    x[2 * n + n // 2] = threshold if subtype != "FLOAT" else 1.0  # largest positive code
    x[3 * n + n // 2] = -1.0
    counts = [int(np.count_nonzero(np.abs(x[k * n : (k + 1) * n]) >= threshold))
              for k in range(4)]
    return x, counts


def overload_tests(fs: float, cls: int, quick: bool, notes: list[str]) -> list[TestResult]:
    """Samples at full scale per 1 s interval of :func:`overload_signal` for each sample
    format (quick: PCM_24), against the counts generated."""
    follows = (
        "IEC 61672-1 overload indication (IEC 61672-3 overload test, digital form: samples at "
        "full scale of the format, positive and negative); requirement: indication present / "
        "absent; limits here: the exact count of samples at full scale the engine reports "
        "per interval (the software's documented behaviour, no tolerance)")
    what = ("-0.1 dBFS sine", "sine driven to 1.5 x full scale",
            "one sample at +full scale", "one sample at -full scale")
    rows = []
    for subtype in ("PCM_24",) if quick else SAMPLE_FORMATS:
        x, counts = overload_signal(fs, subtype)
        _, intervals = analyse(x, fs, AnalysisSettings(interval_s=1.0),
                               full_scale_threshold(subtype))
        for k, (label, expected) in enumerate(zip(what, counts, strict=True)):
            rows.append(TestResult(
                f"overload {subtype}, {label}: samples at full scale", follows,
                float(expected), float(intervals[k].full_scale_samples), float(expected),
                float(expected), "overload"))
    return rows


# ------------------------------------------------------------------------------------------
# The reader: generated WAV files through analyse_file


def _write_wav(path: str, x: np.ndarray, fs: float, subtype: str) -> None:
    """Write ``x`` (already quantised) with exactly its sample values."""
    if subtype == "FLOAT":
        data: np.ndarray = x.astype(np.float32)
    else:
        bits = BIT_DEPTH[subtype]
        codes = np.round(x * 2.0 ** (bits - 1)).astype(np.int32)
        data = codes.astype(np.int16) if bits == 16 else codes << (32 - bits)
    sf.write(path, data, int(round(fs)), subtype=subtype, format="WAV")


def decoding_tests(fs: float, cls: int, quick: bool, notes: list[str]) -> list[TestResult]:
    """LAeq, LZpeak and the full-scale count of :func:`overload_signal`, written as a WAV file
    of each sample format (quick: PCM_24) and analysed by :func:`analyse_file`, against the
    same samples analysed in memory."""
    if fs != round(fs):
        notes.append(f"decoding: not tested (a WAV file holds an integer sample rate, not "
                     f"{fs:g} Hz)")
        return []
    follows = (
        "the digital chain from the file: WAV files of each sample format, written from the "
        "generated samples, read by bandmeter's reader and analysed (analyse_file); expected: "
        "the levels and full-scale count of the same samples analysed in memory; limits: "
        f"+-{DECODING_LIMIT_DB:g} dB and the exact count (project tolerance, no standard value)")
    rows = []
    with tempfile.TemporaryDirectory(prefix="bandmeter-verify-") as folder:
        for subtype in ("PCM_24",) if quick else SAMPLE_FORMATS:
            x, _ = overload_signal(fs, subtype)
            path = os.path.join(folder, f"verify_{subtype}.wav")
            _write_wav(path, x, fs, subtype)
            memory, _ = analyse(x, fs, AnalysisSettings(), full_scale_threshold(subtype))
            read = analyse_file(path, None, AnalysisSettings(), allow_uncalibrated=True).overall
            for key in ("LAeq", "LZpeak"):
                diff = _level(read, key) - _level(memory, key)
                rows.append(TestResult(f"{subtype} WAV file: {key} read - in memory", follows,
                                       0.0, diff, -DECODING_LIMIT_DB, DECODING_LIMIT_DB,
                                       "decoding"))
            rows.append(TestResult(
                f"{subtype} WAV file: samples at full scale read (samples)", follows,
                float(memory.full_scale_samples), float(read.full_scale_samples),
                float(memory.full_scale_samples), float(memory.full_scale_samples),
                "decoding"))
    return rows


# ------------------------------------------------------------------------------------------
# IEC 61260: fractional-octave filters


def filter_breakpoints(b: int) -> list[tuple[float, float, float, float, float]]:
    """Normalised test frequencies Omega = f / fm with their limits for a 1/b-octave filter.

    IEC 61260-1:2014 Annex F mapping (REFERENCE_VALUES.md 5.2, form from memory, confirmed
    numerically): ``Omega_b = 1 + (G^(1/(2b)) - 1) / (G^(1/2) - 1) (G^k - 1)``, lower
    breakpoints ``1 / Omega_b``. Returns (Omega, class 1 min, max, class 2 min, max), 17
    points: both sides of every table row but the first.
    """
    scale = (G ** (1.0 / (2 * b)) - 1.0) / (G**0.5 - 1.0)
    out = []
    for k, *lims in FILTER_LIMITS:
        omega = 1.0 + scale * (G**k - 1.0)
        out.append((omega, *lims))
        if k > 0:
            out.append((1.0 / omega, *lims))
    return sorted(out)


class BandProbe:
    """Attenuation of the single band of ``bank`` for steady unit-amplitude sines.

    As tests/test_filterbank.py: each reading feeds the settling time plus ``window``
    output samples of a sine through ``bank.process`` from the zero state and takes the
    Hann-weighted mean square of the last ``window`` outputs; for tones that may fold in the
    decimators (above 0.375 of the band's rate) or that span few cycles of the window, the
    readings for sine and cosine phase are averaged.

    Parameters
    ----------
    bank : FractionalOctaveBank
        A bank holding one band.
    window : int
        Output samples read, at the band's rate.
    tol : float
        Settling: the slowest band-filter pole has decayed to ``tol``.
    """

    def __init__(self, bank: FractionalOctaveBank, window: int = 64, tol: float = 1e-5) -> None:
        self.bank = bank
        self.rate = bank.rates_hz[0]
        self.window = window
        radius = max(float(np.max(np.abs(np.roots(s[3:])))) for s in bank.band_sos[0])
        settle = (math.log(tol) / math.log(radius) / self.rate
                  + len(HALFBAND_TAPS) * (bank.factors[0] - 1) / bank.fs)
        n_out = math.ceil(settle * self.rate) + window
        self.t = np.arange(n_out * bank.factors[0] + 64) / bank.fs
        self.w = np.hanning(window + 2)[1:-1]

    def attenuation_db(self, f_hz: float) -> float:
        """Attenuation of a sine of ``f_hz`` Hz, dB (0 dB: the input's mean square)."""
        two_phases = f_hz > 0.375 * self.rate or f_hz / self.rate * self.window < 20.0
        readings = []
        for phase in (0.0, math.pi / 2) if two_phases else (0.0,):
            self.bank.reset()
            y = self.bank.process(np.sin(2 * np.pi * f_hz * self.t + phase))[0][-self.window:]
            readings.append(float(np.dot(self.w, y * y) / self.w.sum()))
        return -10.0 * math.log10(max(float(np.mean(readings)), 1e-300) / 0.5)


def engine_bank(fs: float, b: int) -> FractionalOctaveBank:
    """The bank the level engine builds for ``--bands`` with the default range."""
    bank = LevelEngine(fs, AnalysisSettings(bands=b)).bank
    if bank is None:  # pragma: no cover - the engine builds a bank whenever bands is set
        raise RuntimeError("the level engine built no filter bank")
    return bank


def single_band_bank(full: FractionalOctaveBank, i: int) -> FractionalOctaveBank | None:
    """A bank with band ``i`` of ``full`` alone, or None unless it has the identical filter,
    decimation factor and decimator chain (so it measures the engine's band)."""
    band = full.bands[i]
    bank = FractionalOctaveBank(full.fs, band.b, band.exact_hz, band.exact_hz)
    same = (bank.bands == [band] and bank.factors == [full.factors[i]]
            and np.array_equal(bank.band_sos[0], full.band_sos[i]))
    return bank if same else None


class BandReading(NamedTuple):
    """Worst breakpoint of one band: Omega, relative attenuation (dB) and its limits, the
    number of breakpoints read below fs/2, and the absolute mid-band attenuation (dB)."""

    omega: float
    relative_db: float
    lower_db: float
    upper_db: float
    tested: int
    mid_db: float


def read_band(bank: FractionalOctaveBank | None, band: Band, fs: float,
              cls: int) -> BandReading:
    """Relative attenuation of ``band`` at every breakpoint but Omega = 1 that lies below
    fs/2 (re its measured mid-band attenuation); the one with the smallest margin is kept.
    A bank that is not the engine's (None) reads NaN, so the band fails."""
    if bank is None:
        return BandReading(math.nan, math.nan, -INF, INF, 0, math.nan)
    probe = BandProbe(bank)
    mid = probe.attenuation_db(band.exact_hz)
    worst, best_margin, tested = BandReading(math.nan, math.nan, -INF, INF, 0, mid), INF, 0
    for omega, lo1, hi1, lo2, hi2 in filter_breakpoints(band.b):
        f = omega * band.exact_hz
        if omega == 1.0 or not 0.0 < f < 0.5 * fs:
            continue  # mid-band has its own row (absolute attenuation)
        lo, hi = _limits(cls, lo1, hi1, lo2, hi2)
        rel = probe.attenuation_db(f) - mid
        tested += 1
        margin = min(rel - lo, hi - rel)
        if margin < best_margin or math.isnan(margin):
            best_margin = -INF if math.isnan(margin) else margin
            worst = BandReading(omega, rel, lo, hi, 0, mid)
    return worst._replace(tested=tested)


def _quick_band_indices(bands: Sequence[Band]) -> list[int]:
    """Octave-spaced subset (every third one-third-octave band, every other octave band)
    plus the lowest and the highest band."""
    step = 3 if bands[0].b == 3 else 2
    picks = set(range(0, len(bands), step)) | {0, len(bands) - 1}
    return sorted(picks)


def filter_attenuation_tests(full: FractionalOctaveBank, cls: int,
                             quick: bool) -> list[TestResult]:
    """Relative attenuation of every band of ``full`` (quick: a subset) at the IEC 61260-1
    breakpoints, one row per band (the breakpoint with the smallest margin), plus the worst
    mid-band attenuation over those bands."""
    fs, b = full.fs, full.b
    indices = _quick_band_indices(full.bands) if quick else range(len(full.bands))
    follows = (
        f"IEC 61260-3 periodic test of relative attenuation, 1/{b}-octave, steady sines at the "
        "IEC 61260-1:2014 breakpoints Omega = G^(+-k/8) .. G^(+-4) (Annex F mapping) below "
        "fs/2, through a bank holding the engine's band filter and decimators (checked "
        "identical), re the measured mid-band attenuation; expected: none (the standard "
        f"gives limits only); limits: IEC 61260-1:2014 Table 1 class {cls}, confirmed "
        "(G^(+-1/2) row from memory)"
    )
    rows, mids = [], []
    for i in indices:
        band = full.bands[i]
        r = read_band(single_band_bank(full, i), band, fs, cls)
        mids.append((r.mid_db, band))
        rows.append(TestResult(
            f"1/{b}-oct {band.label} Hz: rel. attenuation at {r.tested} breakpoints, worst "
            f"Omega={r.omega:.5f}", follows, None, r.relative_db, r.lower_db, r.upper_db,
            "filters"))
    mid, band = max(mids, key=lambda item: abs(item[0]) if math.isfinite(item[0]) else INF)
    lo, hi = _limits(cls, *FILTER_LIMITS[0][1:])
    rows.append(TestResult(
        f"1/{b}-oct mid-band attenuation, worst of {len(mids)} bands ({band.label} Hz)",
        "IEC 61260-3 attenuation at the exact mid-band frequency re the 0 dB design goal; "
        f"limits: IEC 61260-1:2014 Table 1 at Omega = 1, class {cls}, confirmed",
        0.0, mid, lo, hi, "filters"))
    return rows


def _band_level(iv: IntervalResult, label: str) -> float:
    band = next(bd for bd in iv.bands or [] if bd.label == label)
    return float(band.levels["LZeq" + DBFS_SUFFIX])


def band_linearity_tests(fs: float, b: int, cls: int, quick: bool) -> list[TestResult]:
    """Band level of a 1 kHz sine in the 1 kHz band, 0 to -100 dBFS (quick: 3 levels),
    through the engine with its default band set, over two steady 0.25 s intervals (250
    whole periods each, so the sampled sine's mean square has no leakage at any rate)."""
    limit = BAND_LINEARITY_LIMIT_DB[cls]
    settings = AnalysisSettings(bands=b, interval_s=SETTLE_S)
    rows = []
    for drop in (0, 40, 80) if quick else (0, 20, 40, 60, 80, 100):
        x = sine(fs, 1000.0, 4 * SETTLE_S, 10.0 ** (-drop / 20.0))
        _, intervals = analyse(x, fs, settings)
        steady = intervals[1:3]  # the last interval holds the flushed filter tails
        measured = average_levels([_band_level(iv, "1k") for iv in steady],
                                  [iv.duration_s for iv in steady])
        rows.append(TestResult(
            f"1/{b}-oct band 1k Hz level at {-drop} dBFS", "IEC 61260-3 linear operating "
            "range (1 kHz, mid-band) through the engine; expected: input level (physics); "
            f"limits: IEC 61260-1:2014 class {cls} +-{limit} dB, from memory, unconfirmed",
            float(-drop), measured, -drop - limit, -drop + limit, "filters"))
    return rows


def _engine_band_level(fs: float, b: int, f_hz: float, label: str) -> float:
    """Level of band ``label`` for a unit-amplitude sine of ``f_hz`` Hz through the engine
    with its default band set, over two steady 0.25 s intervals, dBFS."""
    x = sine(fs, f_hz, 4 * SETTLE_S, 1.0)
    _, intervals = analyse(x, fs, AnalysisSettings(bands=b, interval_s=SETTLE_S))
    steady = intervals[1:3]  # the last interval holds the flushed filter tails
    return average_levels([_band_level(iv, label) for iv in steady],
                          [iv.duration_s for iv in steady])


def engine_band_attenuation_tests(full: FractionalOctaveBank, cls: int) -> list[TestResult]:
    """Relative attenuation of the 1 kHz band at the Omega = G^(+-1) breakpoints read from
    the engine's band levels (the whole default set running), the same quantity as the
    bank rows: a cross-check that the engine's band path is the bank that was measured."""
    fs, b = full.fs, full.b
    band = next(bd for bd in full.bands if bd.label == "1k")
    omega = next(row for row in filter_breakpoints(b) if row[0] > 1.0 and
                 math.isclose(row[0], 1.0 + (G ** (1.0 / (2 * b)) - 1.0) / (G**0.5 - 1.0)
                              * (G - 1.0)))
    lo, hi = _limits(cls, *omega[1:])
    follows = (
        f"IEC 61260-3 relative attenuation, 1/{b}-octave 1 kHz band, at the Omega = G^(+-1) "
        "breakpoints, read through the level engine's band levels with the default band set "
        "(steady intervals); expected: none (limits only); limits: IEC 61260-1:2014 Table 1 "
        f"class {cls}, confirmed")
    mid = _engine_band_level(fs, b, band.exact_hz, band.label)
    rows = []
    for w in (1.0 / omega[0], omega[0]):
        rel = mid - _engine_band_level(fs, b, w * band.exact_hz, band.label)
        rows.append(TestResult(
            f"1/{b}-oct 1k Hz band through the engine: rel. attenuation at Omega={w:.5f}",
            follows, None, rel, lo, hi, "filters"))
    return rows


def band_limited(x: np.ndarray, fs: float, lo_hz: float, hi_hz: float) -> np.ndarray:
    """``x`` with its spectrum outside [lo, hi] removed (FFT brick wall, test-signal
    generation only)."""
    spectrum = np.fft.rfft(x)
    f = np.fft.rfftfreq(x.size, 1.0 / fs)
    spectrum[(f < lo_hz) | (f > hi_hz)] = 0.0
    return np.fft.irfft(spectrum, x.size)


def summation_tests(full: FractionalOctaveBank, cls: int, quick: bool) -> list[TestResult]:
    """Energy sum of the band levels of pink noise, band-limited to the bands' range,
    against the broadband LZeq of the engine (10 s; quick 4 s)."""
    fs, b, bands = full.fs, full.b, full.bands
    n = int(round((4.0 if quick else 10.0) * fs))
    x = 0.1 * band_limited(pink_noise(n, fs, seed=61260), fs, bands[0].lower_hz,
                           bands[-1].upper_hz)
    overall, _ = analyse(x, fs, AnalysisSettings(bands=b))
    total = combine_levels([bd.levels["LZeq" + DBFS_SUFFIX] for bd in overall.bands or []])
    return [TestResult(
        f"1/{b}-oct band sum of pink noise {bands[0].label}..{bands[-1].label} Hz - LZeq",
        "energy conservation (Parseval): the bands tile their range; cf. the IEC 61260-1 "
        f"effective-bandwidth requirement; expected 0 dB; tolerance: project value "
        f"+-{SUMMATION_LIMIT_DB} dB (no standard value)", 0.0,
        total - _level(overall, "LZeq"), -SUMMATION_LIMIT_DB, SUMMATION_LIMIT_DB, "filters")]


def filter_tests(fs: float, b: int, cls: int, quick: bool,
                 notes: list[str]) -> list[TestResult]:
    """All fractional-octave filter tests."""
    full = engine_bank(fs, b)
    if full.dropped:
        notes.append(
            f"filters: bands {', '.join(bd.label for bd in full.dropped)} Hz of the default "
            f"1/{b}-octave set are not analysed at {fs:g} Hz (upper edge too close to fs/2) "
            "and not tested")
    return (filter_attenuation_tests(full, cls, quick) + engine_band_attenuation_tests(full, cls)
            + band_linearity_tests(fs, b, cls, quick) + summation_tests(full, cls, quick))


# ------------------------------------------------------------------------------------------
# Entry point


def _check_options(rate_hz: object, instrument_class: object, bands: object) -> float:
    if (isinstance(rate_hz, bool) or not isinstance(rate_hz, (int, float, np.integer,
                                                              np.floating))
            or not math.isfinite(rate_hz) or not FS_MIN_HZ <= rate_hz <= FS_MAX_HZ):
        raise SettingsError(f"rate must be between {FS_MIN_HZ:.0f} and {FS_MAX_HZ:.0f} Hz, "
                            f"got {rate_hz!r}")
    if isinstance(instrument_class, bool) or instrument_class not in (1, 2):
        raise SettingsError(f"class must be 1 or 2, got {instrument_class!r}")
    if isinstance(bands, bool) or bands not in (1, 3):
        raise SettingsError(f"bands must be 1 (octave) or 3 (one-third octave), got {bands!r}")
    return float(rate_hz)


def run_verification(
    rate_hz: float = 48000,
    instrument_class: int = 1,
    bands: int = 3,
    quick: bool = False,
    groups: Sequence[str] | None = None,
) -> VerificationReport:
    """Run the conformance self-test of the digital processing at one sample rate.

    Parameters
    ----------
    rate_hz : float
        Sample rate to verify, Hz (8000 to 192000, the range of the weighting filters).
    instrument_class : int
        1 or 2: whose acceptance limits apply.
    bands : int
        Fractional-octave filters to verify: 3 (one-third octave) or 1 (octave).
    quick : bool
        Fewer frequencies, levels, formats, bursts and bands: about 1.5 s instead of about
        5 s at 48 kHz on the development machine (2 cores; two to three times longer when
        the machine is busy).
    groups : sequence of str, optional
        Run only these groups of :data:`GROUPS` (default: all).

    Returns
    -------
    VerificationReport

    Raises
    ------
    SettingsError
        Rate out of range, class not 1 or 2, bands not 1 or 3, unknown or no group.

    Examples
    --------
    >>> report = run_verification(48000, 1, groups=["decay"])
    >>> report.passed
    True
    >>> [round(t.measured, 1) for t in report.tests]  # F and S decay rates, dB/s
    [34.7, 4.3]
    """
    fs = _check_options(rate_hz, instrument_class, bands)
    chosen = GROUPS if groups is None else tuple(groups)
    unknown = [g for g in chosen if g not in GROUPS]
    if unknown:
        raise SettingsError(f"unknown test group(s) {unknown!r}; choose from {list(GROUPS)}")
    if not chosen:
        raise SettingsError(f"no test group chosen; choose from {list(GROUPS)}")
    cls, b, q = int(instrument_class), int(bands), bool(quick)
    runners: dict[str, Callable[[list[str]], list[TestResult]]] = {
        "weighting": lambda notes: weighting_tests(fs, cls, q, notes),
        "linearity": lambda notes: linearity_tests(fs, cls, q, notes),
        "bursts": lambda notes: burst_tests(fs, cls, q, notes),
        "repeated": lambda notes: repeated_burst_tests(fs, cls, q, notes),
        "cpeak": lambda notes: cpeak_tests(fs, cls, q, notes),
        "decay": lambda notes: decay_tests(fs, cls, q, notes),
        "overload": lambda notes: overload_tests(fs, cls, q, notes),
        "decoding": lambda notes: decoding_tests(fs, cls, q, notes),
        "filters": lambda notes: filter_tests(fs, b, cls, q, notes),
    }
    start = time.perf_counter()
    run = tuple(name for name in GROUPS if name in chosen)
    report = VerificationReport(fs, cls, b, q, run)
    for name in run:
        report.tests.extend(runners[name](report.notes))
    report.elapsed_s = time.perf_counter() - start
    return report
