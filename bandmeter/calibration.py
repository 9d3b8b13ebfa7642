"""Calibration of a measurement chain from a recorded sound-calibrator tone.

A practitioner seats a sound calibrator (typically 94 dB or 114 dB re 20 uPa at 1 kHz,
sometimes 250 Hz) on the microphone before and after a survey and records the tone. From that
recording bandmeter derives the chain's sensitivity, expressed as the **full-scale level**: the
sound pressure level (dB re 20 uPa) that a full-scale sine (peak 1.0 on the +-1 scale) would
produce in this chain.

Level convention
----------------
- ``tone_level_dbfs = 20 lg(sqrt(2) * rms)``, rms on the +-1 scale: a full-scale sine is 0 dBFS.
- ``full_scale_level_db = reference_level_db - tone_level_dbfs``.
- Samples convert to pascals with ``pa_per_unit = sqrt(2) * 20e-6 * 10**(full_scale_level_db/20)``
  (:func:`pascal_per_unit`): a full-scale sine then has an rms pressure of
  ``20e-6 * 10**(full_scale_level_db/20)`` Pa.

How a tone is measured (:func:`measure_tone`)
---------------------------------------------
The file is read in blocks, three times at most, so its length does not matter (memory is
bounded by the block and segment sizes). When the tone is only a short part of a long
recording (a survey file with the check at its start), give its span: the detection works on
the spectrum averaged over the whole file, where hours of other sound can bury a 20 s tone.

1. *Scan*: a Hann-windowed power spectrum averaged over ~1 s chunks (about 1 Hz resolution) of
   the whole file (or of the given span) and the clipped-sample count. The strongest narrow peak
   above 20 Hz is the tone; it must stand at least :data:`DETECTION_PROMINENCE_DB` above the
   neighbouring spectrum and carry at least a tenth of the power (else "no tone"), lie in
   100 Hz..10 kHz, and no other non-harmonic peak may come within :data:`COMPARABLE_TONE_DB`
   of it ("two tones"). The peak is interpolated (Gaussian fit on the log spectrum).
2. *Steady span* (unless a span is given): 100 ms frames give the tone's narrow-band level
   (Hann DFT at the tone frequency) and the broadband level. The longest run of frames whose
   tone level and broadband level both stay within :data:`STEADY_TOLERANCE_DB` of the run's
   medians is the steady part; :data:`EDGE_MARGIN_S` is trimmed at each end that borders
   unsteady frames (seating, removal, handling), none at the file's own start or end.
   The same frames, over the whole file (also when a span is given; that pass then counts
   the file's clipped samples too), give the tone's level history kept for plots
   (:class:`ToneLevelHistory`).
3. *Measurement*: 1 s segments with 50 % overlap (Blackman-Harris window) over the span. The tone
   power is the band sum of the spectrum within :data:`TONE_BAND_HALF_WIDTH_HZ` of the tone,
   normalised by the window energy (Parseval), so noise outside that 20 Hz band does not count:
   white noise 20 dB below the tone adds about 1e-5 dB on average at 48 kHz; what remains is
   the random scatter of the noise inside the band (measured worst case over a 4 s span: 0.005
   dB for white noise 20 dB below, 0.017 dB for pink noise 20 dB below a 100 Hz tone; it falls
   with the square root of the span length). The frequency comes from
   the slope of the tone's phase across the segments (phase regression), good to well under
   0.01 Hz on a clean tone. The level is the energy mean of the segments; the stability is the
   standard deviation of the 1 s segment levels; SNR and THD+N compare the band power with the
   rest of the (DC-free) windowed power of the segments.

Thresholds and their sources are module constants; tolerances of IEC 60942 calibrator classes
are in :data:`IEC60942_LIMITS`.
"""

from __future__ import annotations

import json
import math
import os
from collections.abc import Iterator, Mapping, Sequence
from dataclasses import dataclass, field, replace
from datetime import datetime
from typing import Any

import numpy as np
from scipy.signal import windows

from .audio import DEFAULT_BLOCK_FRAMES, Recording, count_full_scale
from .errors import CalibrationError, SettingsError
from .levels import P0_PA
from .outputs import write_text
from .provenance import file_sha256, now_iso, tool_stamp

__all__ = [
    "CALIBRATION_FORMAT",
    "CALIBRATION_SCHEMA_VERSION",
    "IEC60942_LIMITS",
    "OCTAVE_NOMINAL_HZ",
    "Calibration",
    "CalibratorCheck",
    "LimitValue",
    "ToneLevelHistory",
    "ToneMeasurement",
    "ToneSummary",
    "calibrate",
    "check_calibrator",
    "from_full_scale_level",
    "from_tone",
    "full_scale_level_from_tone",
    "measure_tone",
    "nearest_nominal_frequency",
    "pascal_per_unit",
]

# --------------------------------------------------------------------------------------------
# Constants and their sources
# --------------------------------------------------------------------------------------------

#: Identifier written in every calibration file.
CALIBRATION_FORMAT = "bandmeter-calibration"

#: Version of the calibration file layout; files of this or an older version can be read.
CALIBRATION_SCHEMA_VERSION = 1

#: Range in which a calibrator tone is accepted, Hz. A found tone may lie outside it by the
#: class 2 frequency tolerance, :data:`TONE_RANGE_SLACK` (so a 100 Hz calibrator reading 99.9 Hz
#: is still accepted).
TONE_RANGE_HZ = (100.0, 10000.0)

#: Relative slack of the accepted tone range (IEC 60942:2003 Table 3, class 2 frequency
#: tolerance 2.0 %, REFERENCE_VALUES.md 6, confirmed).
TONE_RANGE_SLACK = 0.02

#: Nominal octave-band mid-frequencies a calibrator tone is compared with when no nominal
#: frequency is given, Hz (IEC 61260-1:2014 / ISO 266 nominal octave frequencies).
OCTAVE_NOMINAL_HZ = (125.0, 250.0, 500.0, 1000.0, 2000.0, 4000.0, 8000.0)

#: Frequency deviation from nominal above which a warning is given, % (IEC 60942:2003 Table 3,
#: class 1 frequency tolerance, REFERENCE_VALUES.md 6, confirmed).
FREQUENCY_TOLERANCE_PERCENT = 1.0
#: A tone further than this from the nominal frequency the user gave is refused, %: no
#: calibrator is that far off, it is another one or another file (common practice, no source).
WRONG_TONE_PERCENT = 10.0

#: Standard deviation of the 1 s tone levels above which the tone is called unsteady, dB
#: (common practice, no source).
STABILITY_LIMIT_DB = 0.1

#: Tone-to-rest ratio below which a warning is given, dB (common practice, no source).
SNR_LIMIT_DB = 20.0

#: THD+N above which a warning is given, % (IEC 60942 class 1 total-distortion limit,
#: from memory, unconfirmed).
THDN_LIMIT_PERCENT = 3.0

#: |post - pre| tone level above which a drift warning is given, dB. From memory, unconfirmed:
#: ISO 1996-2:2017 and BS 4142:2014 ask for a field check before and after the measurements,
#: and ISO 1996-2 / ISO 9612:2009 treat a difference of more than 0.5 dB as invalidating them.
DRIFT_LIMIT_DB = 0.5

#: Accepted calibrator levels, dB re 20 uPa (sanity range for a typed value).
REFERENCE_LEVEL_RANGE_DB = (60.0, 150.0)

#: Accepted full-scale levels of a stated chain sensitivity, dB re 20 uPa (sanity range).
FULL_SCALE_LEVEL_RANGE_DB = (60.0, 200.0)

#: Frame length of the steady-span search, s.
FRAME_S = 0.1

#: Measurement segment length in frames (10 x 100 ms = 1 s); segments overlap by half.
SEGMENT_FRAMES = 10

#: Shortest span that can be measured, s (two 1 s segments with 50 % overlap).
MIN_SPAN_S = 1.5

#: Most steps kept in a tone's level history (:class:`ToneLevelHistory`); a longer tone file
#: gets coarser steps, so a calibration file stays small (common practice, no source).
HISTORY_MAX_POINTS = 2000

#: Steps of the level history in frames of FRAME_S (0.1, 0.2, 0.5, 1, 2, 5 ... s).
_HISTORY_FACTORS = (1, 2, 5, 10, 20, 50, 100, 200, 500, 1000, 2000, 5000, 10000)

#: Margin trimmed from an automatically found steady stretch where it borders unsteady
#: frames, s.
EDGE_MARGIN_S = 0.5

#: A frame is steady when its tone level and broadband level are within this of the stretch
#: medians, dB.
STEADY_TOLERANCE_DB = 1.0

#: Half width of the band around the tone frequency whose power is the tone's, Hz.
TONE_BAND_HALF_WIDTH_HZ = 10.0

#: Lowest frequency searched for spectral peaks, Hz (below: DC, wind, handling rumble).
SEARCH_LOW_HZ = 20.0

#: A spectral peak counts as a tone when its mean level over +-3 bins is this far above the
#: median of the spectrum 5..50 bins away, dB.
DETECTION_PROMINENCE_DB = 20.0

#: ... and when it carries at least this share of the signal power (tone/rest ratio), dB.
DETECTION_MIN_SNR_DB = -10.0

#: A second, non-harmonic tone within this of the strongest one is "comparable", dB.
COMPARABLE_TONE_DB = 10.0

#: Hint appended to the wrong-channel error (the command line may replace it).
CHANNEL_OVERRIDE_HINT = (
    "calibrate that channel with its own tone, or, if both channels share one sensitivity, "
    "state it with the full-scale level instead"
)

# Samples read per block (a module variable so tests can check block-size independence).
_READ_BLOCK_FRAMES = DEFAULT_BLOCK_FRAMES

_P0_PA = P0_PA  # 20 uPa, reference sound pressure in air


# --------------------------------------------------------------------------------------------
# Level arithmetic
# --------------------------------------------------------------------------------------------


def pascal_per_unit(full_scale_level_db: float) -> float:
    """Pressure per unit of the +-1 sample scale, Pa.

    Parameters
    ----------
    full_scale_level_db : float
        SPL of a full-scale sine in the chain, dB re 20 uPa.

    Returns
    -------
    float
        ``sqrt(2) * 20e-6 * 10**(full_scale_level_db / 20)``: a sample value of 1.0 is this
        many pascals (a full-scale sine has the rms pressure of ``full_scale_level_db``).
    """
    _check_number(full_scale_level_db, "full_scale_level_db", *FULL_SCALE_LEVEL_RANGE_DB)
    return math.sqrt(2.0) * _P0_PA * 10.0 ** (float(full_scale_level_db) / 20.0)


def full_scale_level_from_tone(reference_level_db: float, tone_level_dbfs: float) -> float:
    """Full-scale level = calibrator level - tone level, dB re 20 uPa.

    Parameters
    ----------
    reference_level_db : float
        Calibrator level from its certificate, dB re 20 uPa.
    tone_level_dbfs : float
        Recorded tone level, dB re full scale (a full-scale sine is 0 dBFS).
    """
    return float(reference_level_db) - float(tone_level_dbfs)


def nearest_nominal_frequency(frequency_hz: float) -> float:
    """Nearest nominal octave frequency (:data:`OCTAVE_NOMINAL_HZ`) on a log scale, Hz."""
    logs = np.abs(np.log(np.asarray(OCTAVE_NOMINAL_HZ)) - math.log(frequency_hz))
    return float(OCTAVE_NOMINAL_HZ[int(np.argmin(logs))])


def _db_power(ms: float) -> float:
    """10 lg(ms), -inf for zero."""
    return 10.0 * math.log10(ms) if ms > 0 else -math.inf


def _check_number(value: object, name: str, low: float, high: float) -> float:
    if isinstance(value, bool) or not isinstance(value, (int, float, np.integer, np.floating)):
        raise SettingsError(f"{name} must be a number, got {value!r}")
    number = float(value)
    if not (math.isfinite(number) and low <= number <= high):
        raise SettingsError(f"{name} must be between {low:g} and {high:g}, got {value!r}")
    return number


# --------------------------------------------------------------------------------------------
# Result types
# --------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class ToneLevelHistory:
    """The tone's level step by step over the whole tone file (for plots and reports).

    Attributes
    ----------
    step_s : float
        Step, s: a whole number of :data:`FRAME_S` frames, 0.1 s or coarser (0.2, 0.5, 1,
        2, 5 ... s) so that a long file has at most :data:`HISTORY_MAX_POINTS` steps.
    levels_dbfs : tuple of (float or None)
        Level of step ``i``, which covers ``[i step_s, (i + 1) step_s)`` s from the start of
        the file (the last step may be shorter), dB re full scale: the energy mean of the
        100 ms frame levels of the steady-span search (Hann DFT at the tone frequency, so
        sound within about 20 Hz of the tone counts too), rounded to 0.001 dB. None where
        the frames hold no tone energy (digital silence).
    """

    step_s: float
    levels_dbfs: tuple[float | None, ...]

    def times_s(self) -> np.ndarray:
        """Start of each step, s from the start of the file."""
        return np.arange(len(self.levels_dbfs)) * self.step_s

    def to_dict(self) -> dict[str, Any]:
        """JSON-ready dictionary (``step_s``, ``levels_dbfs`` with null for silence)."""
        return {"step_s": self.step_s, "levels_dbfs": list(self.levels_dbfs)}

    @classmethod
    def from_dict(cls, data: Any, source: str = "level history") -> ToneLevelHistory:
        """Rebuild from :meth:`to_dict` output.

        Raises
        ------
        CalibrationError
            Not an object, or a malformed ``step_s`` or ``levels_dbfs``.
        """
        if not isinstance(data, Mapping):
            raise CalibrationError(f"{source}: expected an object or null, got {data!r}")
        step = _req_number(data, "step_s", source)
        if not step > 0:
            raise _bad(source, "step_s", step, "a number > 0")
        levels = _req_key(data, "levels_dbfs", source)
        if not isinstance(levels, list) or not all(
            v is None or (isinstance(v, (int, float)) and not isinstance(v, bool)
                          and math.isfinite(v)) for v in levels
        ):
            raise _bad(source, "levels_dbfs", levels, "a list of finite numbers or nulls")
        return cls(step, tuple(None if v is None else float(v) for v in levels))


def _history_or_none(data: Mapping[str, Any], source: str) -> ToneLevelHistory | None:
    """The optional ``level_history`` key (absent in files of earlier bandmeter versions)."""
    value = data.get("level_history")
    if value is None:
        return None
    return ToneLevelHistory.from_dict(value, f"{source}: level_history")


def _level_history(tone_power: np.ndarray, frame_len: int, fs: float) -> ToneLevelHistory:
    """Level history from the tone mean square of each frame (on the +-1 scale)."""
    n = int(tone_power.size)
    factor = next((f for f in _HISTORY_FACTORS if -(-n // f) <= HISTORY_MAX_POINTS),
                  -(-n // HISTORY_MAX_POINTS))
    groups = -(-n // factor)
    padded = np.zeros(groups * factor)
    padded[:n] = tone_power
    sums = padded.reshape(groups, factor).sum(axis=1)
    counts = np.full(groups, float(factor))
    counts[-1] = n - (groups - 1) * factor
    mean = sums / counts
    levels = tuple(round(10.0 * math.log10(2.0 * float(ms)), 3) if ms > 0 else None
                   for ms in mean)
    return ToneLevelHistory(factor * frame_len / fs, levels)


@dataclass(frozen=True)
class ToneMeasurement:
    """A calibrator tone measured in one recording channel.

    Attributes
    ----------
    source_file : str
        Recording path as given.
    channel : int
        Channel measured, 1-based.
    sample_rate : int
        Sampling rate, Hz.
    frequency_hz : float
        Tone frequency, Hz.
    rms : float
        Tone rms on the +-1 scale (narrow band, see module notes).
    tone_level_dbfs : float
        ``20 lg(sqrt(2) rms)``, dB re full scale.
    stability_db : float
        Standard deviation of the 1 s tone levels over the span, dB.
    snr_db : float
        Tone power over the power of everything else in the span (noise, hum, harmonics;
        DC excluded), dB. With harmonics in the "rest" this is strictly a SINAD.
    thdn_percent : float
        THD+N: ``100 sqrt(rest power / total power)``, %.
    span_s : tuple of float
        Start and end of the part measured, s from the start of the file.
    span_auto : bool
        True when the span was found automatically.
    clipped_samples : int
        Samples at or beyond full scale within ``span_s``.
    clipped_samples_file : int
        Samples at or beyond full scale in the whole file.
    nominal_frequency_hz : float
        Nominal frequency compared with (given, or the nearest octave frequency), Hz.
    frequency_deviation_percent : float
        ``100 (frequency_hz - nominal) / nominal``, %.
    warnings : list of str
        Problems that do not prevent the measurement.
    level_history : ToneLevelHistory or None
        The tone's level over the whole file, step by step (for plots).
    """

    source_file: str
    channel: int
    sample_rate: int
    frequency_hz: float
    rms: float
    tone_level_dbfs: float
    stability_db: float
    snr_db: float
    thdn_percent: float
    span_s: tuple[float, float]
    span_auto: bool
    clipped_samples: int
    clipped_samples_file: int
    nominal_frequency_hz: float
    frequency_deviation_percent: float
    warnings: list[str] = field(default_factory=list)
    level_history: ToneLevelHistory | None = None

    def to_dict(self) -> dict[str, Any]:
        """JSON-ready dictionary."""
        out = dict(self.__dict__)
        out["span_s"] = list(self.span_s)
        out["warnings"] = list(self.warnings)
        out["level_history"] = _history_dict(self.level_history)
        return out


@dataclass(frozen=True)
class ToneSummary:
    """What a calibration file keeps of a tone measurement (used for the post-survey tone).

    Attributes
    ----------
    source_file : str
        Recording path as given.
    source_sha256 : str
        SHA-256 of the recording file.
    channel : int
        Channel measured, 1-based.
    frequency_hz, tone_level_dbfs, stability_db, snr_db, thdn_percent : float
        As in :class:`ToneMeasurement` (Hz, dB re full scale, dB, dB, %).
    span_s : tuple of float
        Part measured, s.
    warnings : list of str
        Warnings of that measurement.
    level_history : ToneLevelHistory or None
        The tone's level over the whole file (None in files of earlier versions).
    """

    source_file: str
    source_sha256: str
    channel: int
    frequency_hz: float
    tone_level_dbfs: float
    stability_db: float
    snr_db: float
    thdn_percent: float
    span_s: tuple[float, float]
    warnings: list[str] = field(default_factory=list)
    level_history: ToneLevelHistory | None = None

    @classmethod
    def from_measurement(cls, tone: ToneMeasurement, sha256: str) -> ToneSummary:
        """Summary of a :class:`ToneMeasurement` of the file with hash ``sha256``."""
        return cls(
            source_file=tone.source_file,
            source_sha256=sha256,
            channel=tone.channel,
            frequency_hz=tone.frequency_hz,
            tone_level_dbfs=tone.tone_level_dbfs,
            stability_db=tone.stability_db,
            snr_db=tone.snr_db,
            thdn_percent=tone.thdn_percent,
            span_s=tone.span_s,
            warnings=list(tone.warnings),
            level_history=tone.level_history,
        )

    def to_dict(self) -> dict[str, Any]:
        """JSON-ready dictionary (``level_history`` only when there is one)."""
        out = dict(self.__dict__)
        out["span_s"] = list(self.span_s)
        out["warnings"] = list(self.warnings)
        _put_history(out, self.level_history)
        return out


def _history_dict(history: ToneLevelHistory | None) -> dict[str, Any] | None:
    return None if history is None else history.to_dict()


def _put_history(out: dict[str, Any], history: ToneLevelHistory | None) -> None:
    """Set ``out["level_history"]``, or drop the key when there is no history (so the JSON
    of a calibration without one, and its :func:`~bandmeter.calmap.calibration_id`, stay as
    earlier versions wrote them)."""
    out.pop("level_history", None)
    if history is not None:
        out["level_history"] = history.to_dict()


_NUMBER_KEYS_OPTIONAL = (
    "reference_level_db",
    "frequency_hz",
    "tone_level_dbfs",
    "stability_db",
    "snr_db",
    "thdn_percent",
    "drift_db",
)


@dataclass
class Calibration:
    """Sensitivity of a measurement chain, with its provenance.

    Attributes
    ----------
    full_scale_level_db : float
        SPL that a full-scale sine produces in the chain, dB re 20 uPa.
    reference_level_db : float or None
        Calibrator level stated by the user, dB re 20 uPa (None for a stated sensitivity).
    frequency_hz : float or None
        Calibrator tone frequency, Hz.
    tone_level_dbfs : float or None
        Recorded tone level, dB re full scale.
    stability_db, snr_db, thdn_percent : float or None
        Quality of the tone (dB, dB, %), see :class:`ToneMeasurement`.
    span_s : tuple of float or None
        Part of the tone file measured, s.
    source_file : str
        Tone file as given, or ``"stated by user"``.
    source_sha256 : str or None
        SHA-256 of the tone file.
    channel : int or None
        Channel the tone was recorded on (None: a stated sensitivity, valid for any channel).
    sample_rate : int or None
        Sampling rate of the tone file, Hz.
    tool_version : str
        bandmeter version that made the calibration.
    created : str
        ISO 8601 UTC time of creation.
    warnings : list of str
        Warnings of the pre and post tone measurements and of the drift check.
    post : ToneSummary or None
        Post-survey tone, if one was measured.
    drift_db : float or None
        Post minus pre tone level, dB (positive: the chain was more sensitive after).
    level_history : ToneLevelHistory or None
        The pre tone's level over its whole file (for plots); None for a stated sensitivity
        and in files of earlier versions.
    """

    full_scale_level_db: float
    reference_level_db: float | None
    frequency_hz: float | None
    tone_level_dbfs: float | None
    stability_db: float | None
    snr_db: float | None
    thdn_percent: float | None
    span_s: tuple[float, float] | None
    source_file: str
    source_sha256: str | None
    channel: int | None
    sample_rate: int | None
    tool_version: str
    created: str
    warnings: list[str] = field(default_factory=list)
    post: ToneSummary | None = None
    drift_db: float | None = None
    level_history: ToneLevelHistory | None = None

    @property
    def pascal_per_unit(self) -> float:
        """Pa per unit of the +-1 sample scale, see :func:`pascal_per_unit`."""
        return pascal_per_unit(self.full_scale_level_db)

    @property
    def is_stated(self) -> bool:
        """True when the sensitivity was stated by the user rather than measured."""
        return self.source_sha256 is None

    def describe(self) -> str:
        """One-line summary for messages and report headers."""
        head = f"full scale = {self.full_scale_level_db:.2f} dB re 20 uPa"
        if self.is_stated:
            return f"{head} (stated by user)"
        where = os.path.basename(self.source_file)
        if self.channel is not None:
            where += f" ch{self.channel}"
        parts = [
            f"{self.reference_level_db:.1f} dB calibrator at {self.frequency_hz:.1f} Hz",
            f"tone {self.tone_level_dbfs:.2f} dBFS",
            where,
            self.created,
        ]
        text = f"{head} ({', '.join(parts)})"
        if self.drift_db is not None:
            text += f"; drift {self.drift_db:+.2f} dB"
        if self.warnings:
            text += f"; {len(self.warnings)} warning(s)"
        return text

    def check_channel(self, channel: int) -> None:
        """Refuse to apply the calibration to another channel than the one it was made on.

        Raises
        ------
        CalibrationError
            When the calibration was measured on a different channel.
        """
        if self.channel is None or int(channel) == self.channel:
            return
        raise CalibrationError(
            f"calibration from {self.source_file} was made on channel {self.channel}, but "
            f"channel {int(channel)} is being analysed; {CHANNEL_OVERRIDE_HINT}"
        )

    # -- serialisation --------------------------------------------------------------------

    def to_dict(self) -> dict[str, Any]:
        """JSON-ready dictionary, with ``format``, ``schema_version``, (informative)
        ``pascal_per_unit`` and, when there is one, ``level_history``."""
        out = {
            "format": CALIBRATION_FORMAT,
            "schema_version": CALIBRATION_SCHEMA_VERSION,
            "full_scale_level_db": self.full_scale_level_db,
            "pascal_per_unit": self.pascal_per_unit,
            "reference_level_db": self.reference_level_db,
            "frequency_hz": self.frequency_hz,
            "tone_level_dbfs": self.tone_level_dbfs,
            "stability_db": self.stability_db,
            "snr_db": self.snr_db,
            "thdn_percent": self.thdn_percent,
            "span_s": None if self.span_s is None else list(self.span_s),
            "source_file": self.source_file,
            "source_sha256": self.source_sha256,
            "channel": self.channel,
            "sample_rate": self.sample_rate,
            "tool_version": self.tool_version,
            "created": self.created,
            "warnings": list(self.warnings),
            "post": None if self.post is None else self.post.to_dict(),
            "drift_db": self.drift_db,
        }
        _put_history(out, self.level_history)
        return out

    def to_json(self) -> str:
        """The calibration as indented JSON text."""
        return json.dumps(self.to_dict(), indent=2, allow_nan=False)

    def save(self, path: str | os.PathLike[str], force: bool = False) -> None:
        """Write the calibration as JSON, atomically; never replaces a file without ``force``.

        Raises
        ------
        OutputError
            The file exists (without ``force``) or cannot be written.
        """
        write_text(path, self.to_json() + "\n", force=force)

    @classmethod
    def from_dict(cls, data: Mapping[str, Any], source: str = "calibration data") -> Calibration:
        """Rebuild a calibration from :meth:`to_dict` output, validating every key.

        Parameters
        ----------
        data : mapping
            Decoded JSON object. Keys this version does not know are ignored, so later minor
            additions stay readable.
        source : str
            Name used in error messages (the file name for :meth:`load`).

        Raises
        ------
        CalibrationError
            Wrong format, newer schema, missing or malformed key.
        """
        if not isinstance(data, Mapping):
            raise CalibrationError(f"{source}: expected a JSON object, got {type(data).__name__}")
        fmt = data.get("format")
        if fmt != CALIBRATION_FORMAT:
            raise CalibrationError(
                f"{source}: not a bandmeter calibration file (key 'format' is {fmt!r}, "
                f"expected {CALIBRATION_FORMAT!r})"
            )
        version = _req_int(data, "schema_version", source, low=1)
        if version > CALIBRATION_SCHEMA_VERSION:
            raise CalibrationError(
                f"{source}: schema_version {version} was written by a newer bandmeter "
                f"(this one reads up to {CALIBRATION_SCHEMA_VERSION}); upgrade bandmeter"
            )
        full_scale = _req_number(data, "full_scale_level_db", source)
        if not FULL_SCALE_LEVEL_RANGE_DB[0] <= full_scale <= FULL_SCALE_LEVEL_RANGE_DB[1]:
            raise CalibrationError(
                f"{source}: full_scale_level_db {full_scale!r} is outside "
                f"{FULL_SCALE_LEVEL_RANGE_DB[0]:g}..{FULL_SCALE_LEVEL_RANGE_DB[1]:g} dB"
            )
        numbers = {key: _req_number(data, key, source, optional=True)
                   for key in _NUMBER_KEYS_OPTIONAL}
        if "pascal_per_unit" in data:
            stored = _req_number(data, "pascal_per_unit", source)
            expected = pascal_per_unit(full_scale)
            if not math.isclose(stored, expected, rel_tol=1e-9):
                raise CalibrationError(
                    f"{source}: pascal_per_unit {stored!r} does not match full_scale_level_db "
                    f"{full_scale!r} (expected {expected!r}); the file was edited by hand"
                )
        post_raw = _req_key(data, "post", source)
        post = None if post_raw is None else _summary_from_dict(post_raw, f"{source}: post")
        return cls(
            full_scale_level_db=full_scale,
            span_s=_req_span(data, "span_s", source, optional=True),
            source_file=_req_str(data, "source_file", source),
            source_sha256=_req_sha(data, "source_sha256", source, optional=True),
            channel=_req_int(data, "channel", source, low=1, optional=True),
            sample_rate=_req_int(data, "sample_rate", source, low=1, optional=True),
            tool_version=_req_str(data, "tool_version", source),
            created=_req_time(data, "created", source),
            warnings=_req_str_list(data, "warnings", source),
            post=post,
            level_history=_history_or_none(data, source),
            **numbers,
        )

    @classmethod
    def load(cls, path: str | os.PathLike[str]) -> Calibration:
        """Read a calibration file written by :meth:`save`.

        Raises
        ------
        CalibrationError
            Missing or unreadable file, invalid JSON, or invalid content (see
            :meth:`from_dict`); the message names the file.
        """
        spath = os.fspath(path)
        try:
            with open(spath, encoding="utf-8") as handle:
                text = handle.read()
        except FileNotFoundError as exc:
            raise CalibrationError(f"{spath}: no such calibration file") from exc
        except (OSError, UnicodeDecodeError) as exc:
            raise CalibrationError(f"{spath}: cannot read the calibration file ({exc})") from exc
        try:
            data = json.loads(text)
        except json.JSONDecodeError as exc:
            raise CalibrationError(
                f"{spath}: not valid JSON ({exc.msg} at line {exc.lineno} column {exc.colno}); "
                f"recreate the file with the calibrate command"
            ) from exc
        return cls.from_dict(data, source=spath)


# -- validation helpers of from_dict ------------------------------------------------------------

_MISSING = object()


def _req_key(data: Mapping[str, Any], key: str, source: str) -> Any:
    value = data.get(key, _MISSING)
    if value is _MISSING:
        raise CalibrationError(f"{source}: missing key {key!r}")
    return value


def _bad(source: str, key: str, value: Any, expected: str) -> CalibrationError:
    return CalibrationError(f"{source}: key {key!r} must be {expected}, got {value!r}")


def _req_number(data: Mapping[str, Any], key: str, source: str,
                optional: bool = False) -> Any:
    value = _req_key(data, key, source)
    if value is None and optional:
        return None
    if isinstance(value, bool) or not isinstance(value, (int, float)) or not math.isfinite(value):
        raise _bad(source, key, value, "a finite number" + (" or null" if optional else ""))
    return float(value)


def _req_int(data: Mapping[str, Any], key: str, source: str, low: int,
             optional: bool = False) -> Any:
    value = _req_key(data, key, source)
    if value is None and optional:
        return None
    if isinstance(value, bool) or not isinstance(value, int) or value < low:
        raise _bad(source, key, value, f"an integer >= {low}" + (" or null" if optional else ""))
    return int(value)


def _req_str(data: Mapping[str, Any], key: str, source: str) -> str:
    value = _req_key(data, key, source)
    if not isinstance(value, str) or not value:
        raise _bad(source, key, value, "a non-empty string")
    return value


def _req_sha(data: Mapping[str, Any], key: str, source: str, optional: bool = False) -> Any:
    value = _req_key(data, key, source)
    if value is None and optional:
        return None
    if (not isinstance(value, str) or len(value) != 64
            or any(c not in "0123456789abcdef" for c in value)):
        raise _bad(source, key, value, "64 lowercase hex digits" + (" or null" if optional else ""))
    return value


def _req_span(data: Mapping[str, Any], key: str, source: str, optional: bool = False) -> Any:
    value = _req_key(data, key, source)
    if value is None and optional:
        return None
    ok = (isinstance(value, list) and len(value) == 2
          and all(isinstance(v, (int, float)) and not isinstance(v, bool) and math.isfinite(v)
                  for v in value)
          and 0 <= value[0] < value[1])
    if not ok:
        raise _bad(source, key, value, "[start, end] in s with 0 <= start < end"
                   + (" or null" if optional else ""))
    return (float(value[0]), float(value[1]))


def _req_str_list(data: Mapping[str, Any], key: str, source: str) -> list[str]:
    value = _req_key(data, key, source)
    if not isinstance(value, list) or not all(isinstance(v, str) for v in value):
        raise _bad(source, key, value, "a list of strings")
    return list(value)


def _req_time(data: Mapping[str, Any], key: str, source: str) -> str:
    value = _req_str(data, key, source)
    try:
        datetime.fromisoformat(value)
    except ValueError as exc:
        raise _bad(source, key, value, "an ISO 8601 time") from exc
    return value


def _summary_from_dict(data: Any, source: str) -> ToneSummary:
    if not isinstance(data, Mapping):
        raise CalibrationError(f"{source}: expected an object or null, got {data!r}")
    return ToneSummary(
        source_file=_req_str(data, "source_file", source),
        source_sha256=_req_sha(data, "source_sha256", source),
        channel=_req_int(data, "channel", source, low=1),
        frequency_hz=_req_number(data, "frequency_hz", source),
        tone_level_dbfs=_req_number(data, "tone_level_dbfs", source),
        stability_db=_req_number(data, "stability_db", source),
        snr_db=_req_number(data, "snr_db", source),
        thdn_percent=_req_number(data, "thdn_percent", source),
        span_s=_req_span(data, "span_s", source),
        warnings=_req_str_list(data, "warnings", source),
        level_history=_history_or_none(data, source),
    )


# --------------------------------------------------------------------------------------------
# Tone measurement: streaming passes
# --------------------------------------------------------------------------------------------


def _chunks(
    rec: Recording, start: int, stop: int, length: int, hop: int, partial: bool
) -> Iterator[tuple[int, np.ndarray]]:
    """Consecutive chunks ``(first_sample, samples)`` of ``length`` every ``hop`` samples.

    With ``partial`` a last shorter chunk (the rest) is yielded as well (only for
    ``hop == length``). The yielded arrays are views: use them before the next step.
    """
    buf = np.empty(0, dtype=np.float64)
    first = start
    for block in rec.blocks(_READ_BLOCK_FRAMES, start, stop):
        buf = np.concatenate((buf, block)) if buf.size else block
        while buf.size >= length:
            yield first, buf[:length]
            buf = buf[hop:]
            first += hop
    if partial and buf.size:
        yield first, buf


@dataclass
class _Scan:
    """Averaged spectrum of a part of a recording (pass 1)."""

    spectrum: np.ndarray  # mean |X_k|^2 of Hann-windowed chunks, one-sided, k = 0..L/2
    chunk_len: int
    window_energy: float  # sum of w^2
    total_power: float  # mean AC power on the +-1 scale
    clipped: int


def _scan(rec: Recording, start: int, stop: int, chunk_len: int) -> _Scan:
    """Pass 1: averaged Hann power spectrum of ~1 s chunks and clipped-sample count."""
    window = windows.hann(chunk_len, sym=False)
    w_energy = float(np.sum(window**2))
    w_sum = float(np.sum(window))
    threshold = rec.info.full_scale_threshold
    acc = np.zeros(chunk_len // 2 + 1)
    power = 0.0
    n_chunks = 0
    clipped = 0
    for _, chunk in _chunks(rec, start, stop, chunk_len, chunk_len, partial=True):
        clipped += count_full_scale(chunk, threshold)
        if chunk.size < chunk_len:
            continue
        yw = window * (chunk - float(np.dot(window, chunk)) / w_sum)
        acc += np.abs(np.fft.rfft(yw)) ** 2
        power += float(np.dot(yw, yw)) / w_energy
        n_chunks += 1
    if n_chunks == 0:
        return _Scan(acc, chunk_len, w_energy, 0.0, clipped)
    return _Scan(acc / n_chunks, chunk_len, w_energy, power / n_chunks, clipped)


def _band_power(scan: _Scan, fs: float, centre_hz: float) -> float:
    """Power within +-TONE_BAND_HALF_WIDTH_HZ of ``centre_hz`` in the averaged spectrum."""
    freqs = np.arange(scan.spectrum.size) * fs / scan.chunk_len
    band = np.abs(freqs - centre_hz) <= TONE_BAND_HALF_WIDTH_HZ
    return 2.0 * float(np.sum(scan.spectrum[band])) / (scan.chunk_len * scan.window_energy)


def _prominence_db(spectrum: np.ndarray, k: int) -> float:
    """Mean of the spectrum over k+-3 bins relative to the median 5..50 bins away, dB."""
    peak = float(np.mean(spectrum[max(k - 3, 0):k + 4]))
    ring = np.concatenate((spectrum[max(k - 50, 1):max(k - 4, 1)], spectrum[k + 5:k + 51]))
    floor = float(np.median(ring)) if ring.size else 0.0
    if floor <= 0:
        return math.inf if peak > 0 else -math.inf
    return 10.0 * math.log10(peak / floor) if peak > 0 else -math.inf


def _interpolated_hz(spectrum: np.ndarray, k: int, fs: float, length: int) -> float:
    """Peak frequency by a parabola through the log spectrum at k-1, k, k+1, Hz."""
    if k < 1 or k + 1 >= spectrum.size:
        return k * fs / length
    tiny = np.finfo(float).tiny
    y0, y1, y2 = np.log(np.maximum(spectrum[k - 1:k + 2], tiny))
    denom = y0 - 2.0 * y1 + y2
    delta = 0.5 * (y0 - y2) / denom if denom < 0 else 0.0
    return (k + float(np.clip(delta, -0.5, 0.5))) * fs / length


def _detect_tone(scan: _Scan, fs: float, where: str) -> float:
    """Coarse tone frequency from the averaged spectrum, Hz; errors for no/two/outside tones."""
    spectrum = scan.spectrum
    length = scan.chunk_len
    if not scan.total_power > 0:
        raise CalibrationError(
            f"{where}: no calibrator tone found, the recording is silent; record the tone "
            f"with the calibrator seated on the microphone"
        )
    k_low = max(int(math.ceil(SEARCH_LOW_HZ * length / fs)), 1)
    k_high = min(int(0.49 * length), spectrum.size - 2)
    search = spectrum[k_low:k_high + 1]
    k_peak = k_low + int(np.argmax(search))
    f_peak = _interpolated_hz(spectrum, k_peak, fs, length)
    prominence = _prominence_db(spectrum, k_peak)
    tone_power = _band_power(scan, fs, f_peak)
    rest = max(scan.total_power - tone_power, 0.0)
    snr = math.inf if rest == 0 else _db_power(tone_power) - _db_power(rest)
    if prominence < DETECTION_PROMINENCE_DB or snr < DETECTION_MIN_SNR_DB:
        raise CalibrationError(
            f"{where}: no calibrator tone found (strongest narrow peak at {f_peak:.1f} Hz, "
            f"{prominence:.1f} dB above the neighbouring spectrum, {snr:.1f} dB re the rest); "
            f"check the file and channel, or give the span that holds the tone when it is a "
            f"short part of a long recording"
        )
    low, high = TONE_RANGE_HZ
    if not low / (1.0 + TONE_RANGE_SLACK) <= f_peak <= high * (1.0 + TONE_RANGE_SLACK):
        raise CalibrationError(
            f"{where}: the strongest tone is at {f_peak:.1f} Hz, outside the calibrator range "
            f"{low:g} Hz..{high / 1000:g} kHz; check the file and channel, or give the span "
            f"that holds the calibrator tone"
        )
    _check_second_tone(scan, fs, k_peak, f_peak, tone_power, where)
    return f_peak


def _check_second_tone(
    scan: _Scan, fs: float, k_peak: int, f_peak: float, tone_power: float, where: str
) -> None:
    """Raise when another non-harmonic peak comes within COMPARABLE_TONE_DB of the tone."""
    spectrum = scan.spectrum
    length = scan.chunk_len
    bins = np.arange(spectrum.size)
    k_low = max(int(math.ceil(SEARCH_LOW_HZ * length / fs)), 1)
    k_high = min(int(0.49 * length), spectrum.size - 2)
    allowed = (bins >= k_low) & (bins <= k_high)
    guard = TONE_BAND_HALF_WIDTH_HZ * length / fs + 5.0
    k_tone = f_peak * length / fs
    for harmonic in range(1, int(k_high / k_tone) + 1):
        allowed &= np.abs(bins - harmonic * k_tone) > guard
    candidates = np.flatnonzero(allowed)
    if candidates.size == 0:
        return
    k2 = int(candidates[np.argmax(spectrum[candidates])])
    f2 = _interpolated_hz(spectrum, k2, fs, length)
    power2 = _band_power(scan, fs, f2)
    if power2 <= 0 or _prominence_db(spectrum, k2) < DETECTION_PROMINENCE_DB:
        return
    if _db_power(power2) >= _db_power(tone_power) - COMPARABLE_TONE_DB:
        raise CalibrationError(
            f"{where}: two tones found at {f_peak:.1f} Hz and {f2:.1f} Hz "
            f"({10 * math.log10(2 * tone_power):.1f} and {10 * math.log10(2 * power2):.1f} dBFS); "
            f"record one calibrator tone at a time, or give the span that holds only one"
        )


def _frame_levels(
    rec: Recording, frame_len: int, segment_len: int, f_hz: float
) -> tuple[np.ndarray, np.ndarray, int]:
    """Pass 2: tone (narrow band, Hann DFT at ``f_hz``) and broadband AC power per frame,
    and the samples at or beyond full scale in the whole file."""
    fs = rec.sample_rate
    window = windows.hann(frame_len, sym=False)
    w_sum = float(np.sum(window))
    kernel = window * np.exp(-2j * np.pi * f_hz * np.arange(frame_len) / fs)
    threshold = rec.info.full_scale_threshold
    tone_parts: list[np.ndarray] = []
    broad_parts: list[np.ndarray] = []
    clipped = 0
    for _, chunk in _chunks(rec, 0, rec.frames, segment_len, segment_len, partial=True):
        clipped += count_full_scale(chunk, threshold)
        n_full = chunk.size // frame_len
        if n_full == 0:
            continue
        frames = chunk[:n_full * frame_len].reshape(n_full, frame_len)
        ac = frames - frames.mean(axis=1, keepdims=True)
        amplitude = 2.0 * np.abs(ac @ kernel) / w_sum
        tone_parts.append(amplitude**2 / 2.0)
        broad_parts.append(np.mean(ac**2, axis=1))
    return np.concatenate(tone_parts), np.concatenate(broad_parts), clipped


def _longest_run(mask: np.ndarray) -> tuple[int, int]:
    """[start, stop) of the longest run of True in ``mask``; (0, 0) if none."""
    if not mask.any():
        return 0, 0
    edges = np.diff(np.concatenate(([0], mask.astype(np.int8), [0])))
    starts = np.flatnonzero(edges == 1)
    stops = np.flatnonzero(edges == -1)
    i = int(np.argmax(stops - starts))
    return int(starts[i]), int(stops[i])


def _steady_run(tone_db: np.ndarray, broad_db: np.ndarray) -> tuple[int, int]:
    """Longest run of frames within STEADY_TOLERANCE_DB of the run's median tone and broadband
    levels, as [start, stop) frame indices."""
    tol = STEADY_TOLERANCE_DB
    finite = np.isfinite(tone_db) & np.isfinite(broad_db)
    if not finite.any():
        return 0, 0
    tone = np.where(finite, tone_db, -1e300)
    broad = np.where(finite, broad_db, -1e300)
    top = float(np.max(tone[finite]))
    best = (0, 0)
    # candidate plateau levels from the loudest frame down, a quarter tolerance apart
    for ref in np.arange(top, top - 60.0, -tol / 4.0):
        run = _longest_run(finite & (np.abs(tone - ref) <= tol))
        if run[1] - run[0] > best[1] - best[0]:
            best = run
    for _ in range(4):  # refine with both criteria around the run's own medians
        a, b = best
        if b <= a:
            break
        mask = (finite & (np.abs(tone - np.median(tone[a:b])) <= tol)
                & (np.abs(broad - np.median(broad[a:b])) <= tol))
        new = _longest_run(mask)
        if new == best:
            break
        best = new
    return best


@dataclass
class _SpanResult:
    frequency_hz: float
    tone_power: float
    total_power: float
    segment_levels_db: np.ndarray
    clipped: int
    stop: int


def _measure_span(
    rec: Recording, start: int, stop: int, segment_len: int, f_coarse: float
) -> _SpanResult:
    """Pass 3: band power, total power and phase of 1 s segments (50 % overlap)."""
    fs = rec.sample_rate
    hop = segment_len // 2
    n_seg = 1 + (stop - start - segment_len) // hop
    used_stop = start + (n_seg - 1) * hop + segment_len
    window = windows.blackmanharris(segment_len, sym=False)
    w_sum = float(np.sum(window))
    w_energy = float(np.sum(window**2))
    freqs = np.arange(segment_len // 2 + 1) * fs / segment_len
    band = np.abs(freqs - f_coarse) <= TONE_BAND_HALF_WIDTH_HZ
    kernel = np.exp(-2j * np.pi * f_coarse * np.arange(segment_len) / fs)
    threshold = rec.info.full_scale_threshold
    tone_p = np.empty(n_seg)
    total_p = np.empty(n_seg)
    phasors = np.empty(n_seg, dtype=complex)
    firsts = np.empty(n_seg)
    clipped = 0
    chunks = _chunks(rec, start, used_stop, segment_len, hop, partial=False)
    for m, (first, seg) in enumerate(chunks):
        clipped += count_full_scale(seg if m == n_seg - 1 else seg[:hop], threshold)
        yw = window * (seg - float(np.dot(window, seg)) / w_sum)
        spec = np.fft.rfft(yw)
        tone_p[m] = 2.0 * float(np.sum(np.abs(spec[band]) ** 2)) / (segment_len * w_energy)
        total_p[m] = float(np.dot(yw, yw)) / w_energy
        # phase referred to sample 0 of the file (cycles taken modulo 1 for precision)
        cycles = math.fmod(f_coarse * first / fs, 1.0)
        phasors[m] = complex(np.dot(yw, kernel)) * np.exp(-2j * np.pi * cycles)
        firsts[m] = first / fs
    phase = np.unwrap(np.angle(phasors))
    slope = float(np.polyfit(firsts, phase, 1)[0])  # rad/s
    with np.errstate(divide="ignore"):
        seg_levels = 10.0 * np.log10(2.0 * tone_p)
    return _SpanResult(
        frequency_hz=f_coarse + slope / (2.0 * np.pi),
        tone_power=float(np.mean(tone_p)),
        total_power=float(np.mean(total_p)),
        segment_levels_db=seg_levels,
        clipped=clipped,
        stop=used_stop,
    )


def _parse_span(span_s: object, rec: Recording) -> tuple[int, int]:
    """Sample range of a user span (start, end) in s."""
    if not isinstance(span_s, Sequence) or isinstance(span_s, str) or len(span_s) != 2:
        raise SettingsError(f"span must be (start, end) in s, got {span_s!r}")
    start_s, end_s = span_s
    for value in (start_s, end_s):
        if isinstance(value, bool) or not isinstance(value, (int, float)) or not math.isfinite(
            value
        ):
            raise SettingsError(f"span must be two finite numbers of seconds, got {span_s!r}")
    if not end_s > start_s:
        raise SettingsError(f"span end must be after its start, got {span_s!r}")
    fs = rec.sample_rate
    duration = rec.frames / fs
    if start_s < 0 or end_s > duration + 0.5 / fs:
        raise CalibrationError(
            f"{rec.path}: span {start_s:g}..{end_s:g} s is outside the file "
            f"(0..{duration:.3f} s); give a span within the recording"
        )
    return int(round(start_s * fs)), min(int(round(end_s * fs)), rec.frames)


def _check_nominal(nominal_hz: float | None) -> float | None:
    if nominal_hz is None:
        return None
    return _check_number(nominal_hz, "nominal_frequency_hz", *TONE_RANGE_HZ)


def measure_tone(
    recording: Recording,
    span_s: tuple[float, float] | None = None,
    nominal_frequency_hz: float | None = None,
) -> ToneMeasurement:
    """Measure a calibrator tone in one channel of a recording.

    Parameters
    ----------
    recording : Recording
        Open recording channel (read in blocks; the file may be minutes long).
    span_s : (float, float), optional
        Start and end of the part to measure, s. Default: the longest steady stretch, found
        automatically (seating and removal at the ends excluded). The span used is the given
        one shortened to a whole number of half-second steps (1 s segments, 50 % overlap).
    nominal_frequency_hz : float, optional
        Nominal calibrator frequency, Hz. Default: the nearest octave frequency of
        :data:`OCTAVE_NOMINAL_HZ`.

    Returns
    -------
    ToneMeasurement

    Raises
    ------
    CalibrationError
        File too short, no tone, two comparable tones, tone outside 100 Hz..10 kHz, no steady
        span, span outside the file, samples at full scale in the span measured (overload),
        a tone more than :data:`WRONG_TONE_PERCENT` off the nominal frequency given.
    SettingsError
        Malformed span or nominal frequency.
    """
    nominal = _check_nominal(nominal_frequency_hz)
    fs = recording.sample_rate
    where = f"{recording.path} (channel {recording.channel})"
    frame_len = int(round(FRAME_S * fs))
    segment_len = SEGMENT_FRAMES * frame_len
    min_len = segment_len + segment_len // 2
    if span_s is not None:
        start, stop = _parse_span(span_s, recording)
        if stop - start < min_len:
            raise CalibrationError(
                f"{where}: span {span_s[0]:g}..{span_s[1]:g} s is too short; the tone needs "
                f"at least {MIN_SPAN_S:g} s"
            )
    elif recording.frames < min_len:
        raise CalibrationError(
            f"{where}: recording too short ({recording.frames / fs:.2f} s); a calibrator tone "
            f"needs at least {MIN_SPAN_S:g} s of steady tone, typically 10 s or more"
        )
    if span_s is None:
        scan = _scan(recording, 0, recording.frames, segment_len)
        clipped_file = scan.clipped
        f_coarse = _detect_tone(scan, fs, where)
        start, stop, tone_p = _auto_span(recording, frame_len, segment_len, f_coarse, where)
    else:
        scan = _scan(recording, start, stop, segment_len)
        f_coarse = _detect_tone(scan, fs, f"{where}, span {span_s[0]:g}..{span_s[1]:g} s")
        tone_p, _, clipped_file = _frame_levels(recording, frame_len, segment_len, f_coarse)
    result = _measure_span(recording, start, stop, segment_len, f_coarse)
    tone = _tone_result(recording, result, start, span_s is None, clipped_file, nominal)
    return replace(tone, level_history=_level_history(tone_p, frame_len, fs))


def _auto_span(
    rec: Recording, frame_len: int, segment_len: int, f_hz: float, where: str
) -> tuple[int, int, np.ndarray]:
    """Sample range of the steady part of the tone (pass 2), and the tone power of each
    frame."""
    tone_p, broad_p, _ = _frame_levels(rec, frame_len, segment_len, f_hz)
    with np.errstate(divide="ignore"):
        a, b = _steady_run(10.0 * np.log10(tone_p), 10.0 * np.log10(broad_p))
    margin = int(round(EDGE_MARGIN_S / FRAME_S))
    found = (a * FRAME_S, b * FRAME_S)
    if a > 0:
        a += margin
    if b < tone_p.size:
        b -= margin
    start, stop = a * frame_len, b * frame_len
    if stop - start < segment_len + segment_len // 2:
        raise CalibrationError(
            f"{where}: no steady tone span of at least {MIN_SPAN_S:g} s (longest steady stretch "
            f"{found[1] - found[0]:.1f} s at {found[0]:.1f}..{found[1]:.1f} s, "
            f"{EDGE_MARGIN_S:g} s trimmed at each unsteady end); hold the calibrator still on the "
            f"microphone for 10 s or more, or give the span to measure"
        )
    return start, stop, tone_p


def _tone_result(
    rec: Recording,
    result: _SpanResult,
    start: int,
    auto: bool,
    clipped_file: int,
    nominal: float | None,
) -> ToneMeasurement:
    fs = rec.sample_rate
    where = f"{rec.path} (channel {rec.channel})"
    tone_ms = result.tone_power
    if not tone_ms > 0:
        raise CalibrationError(f"{where}: no calibrator tone in the span measured")
    rest = max(result.total_power - tone_ms, result.total_power * 1e-16)
    level = 10.0 * math.log10(2.0 * tone_ms)
    levels = result.segment_levels_db
    stability = float(np.std(levels, ddof=1)) if levels.size > 1 else 0.0
    snr = 10.0 * math.log10(tone_ms / rest)
    thdn = 100.0 * math.sqrt(rest / result.total_power)
    frequency = result.frequency_hz
    nominal_hz = nearest_nominal_frequency(frequency) if nominal is None else nominal
    deviation = 100.0 * (frequency - nominal_hz) / nominal_hz
    span = (start / fs, result.stop / fs)
    if result.clipped:
        raise CalibrationError(
            f"{where}: {result.clipped} samples at or beyond full scale in the span measured "
            f"({span[0]:.2f}..{span[1]:.2f} s): the recorder overloads, so the tone's level "
            "would be wrong; lower the input gain and record the tone again")
    if nominal is not None and abs(deviation) > WRONG_TONE_PERCENT:
        raise CalibrationError(
            f"{where}: the tone is at {frequency:.1f} Hz, {deviation:+.0f} % off the nominal "
            f"{nominal_hz:g} Hz given: another calibrator or the wrong file; give the "
            "calibrator's own nominal frequency, or the right file")
    warnings = _tone_warnings(frequency, nominal_hz, deviation, stability, snr, thdn,
                              result.clipped, clipped_file, span)
    return ToneMeasurement(
        source_file=rec.path,
        channel=rec.channel,
        sample_rate=fs,
        frequency_hz=frequency,
        rms=math.sqrt(tone_ms),
        tone_level_dbfs=level,
        stability_db=stability,
        snr_db=snr,
        thdn_percent=thdn,
        span_s=span,
        span_auto=auto,
        clipped_samples=result.clipped,
        clipped_samples_file=clipped_file,
        nominal_frequency_hz=nominal_hz,
        frequency_deviation_percent=deviation,
        warnings=warnings,
    )


def _tone_warnings(
    frequency: float,
    nominal_hz: float,
    deviation: float,
    stability: float,
    snr: float,
    thdn: float,
    clipped_span: int,
    clipped_file: int,
    span: tuple[float, float],
) -> list[str]:
    out: list[str] = []
    if abs(deviation) > FREQUENCY_TOLERANCE_PERCENT:
        out.append(
            f"tone frequency {frequency:.2f} Hz is {deviation:+.2f} % off the nominal "
            f"{nominal_hz:g} Hz (more than the {FREQUENCY_TOLERANCE_PERCENT:g} % IEC 60942 class 1 "
            f"tolerance); check the calibrator, or give its nominal frequency"
        )
    if stability > STABILITY_LIMIT_DB:
        out.append(
            f"tone level unsteady: the 1 s levels vary by {stability:.3f} dB (standard deviation, "
            f"more than {STABILITY_LIMIT_DB:g} dB); keep the calibrator seated and still"
        )
    if snr < SNR_LIMIT_DB:
        out.append(
            f"tone only {snr:.1f} dB above the rest of the signal (less than {SNR_LIMIT_DB:g} dB); "
            f"background noise, hum or distortion is high"
        )
    if thdn > THDN_LIMIT_PERCENT:
        out.append(
            f"THD+N {thdn:.2f} % exceeds {THDN_LIMIT_PERCENT:g} % (IEC 60942 class 1 distortion "
            f"limit, from memory); the tone is distorted or noisy"
        )
    if clipped_span:
        out.append(
            f"{clipped_span} samples at or beyond full scale in the span measured "
            f"({span[0]:.2f}..{span[1]:.2f} s): the recorder overloads; lower the input gain and "
            f"record the tone again"
        )
    elif clipped_file:
        out.append(
            f"{clipped_file} samples at or beyond full scale elsewhere in the file (outside the "
            f"span measured, e.g. seating the calibrator)"
        )
    return out


# --------------------------------------------------------------------------------------------
# Calibration
# --------------------------------------------------------------------------------------------


def _same_file(a: str, b: str) -> bool:
    try:
        return os.path.samefile(a, b)
    except OSError:
        return os.path.abspath(a) == os.path.abspath(b)


def _measure_file(
    path: str, channel: int, span_s: tuple[float, float] | None, nominal: float | None
) -> tuple[ToneMeasurement, str]:
    with Recording(path, channel) as rec:
        tone = measure_tone(rec, span_s=span_s, nominal_frequency_hz=nominal)
    return tone, file_sha256(path)


def calibrate(
    tone_path: str | os.PathLike[str],
    level_db: float,
    channel: int = 1,
    span_s: tuple[float, float] | None = None,
    after_path: str | os.PathLike[str] | None = None,
    after_span_s: tuple[float, float] | None = None,
    nominal_frequency_hz: float | None = None,
) -> Calibration:
    """Calibrate a chain from a recorded calibrator tone, optionally with a post-survey check.

    Parameters
    ----------
    tone_path : str or path-like
        Recording of the calibrator tone before the survey.
    level_db : float
        Calibrator level from its certificate, dB re 20 uPa (60..150 dB).
    channel : int, optional
        Channel of the recordings, 1-based.
    span_s : (float, float), optional
        Part of ``tone_path`` holding the tone, s (default: found automatically).
    after_path : str or path-like, optional
        Recording of the same calibrator after the survey; may be ``tone_path`` itself when one
        recording holds both tones, then both spans must be given.
    after_span_s : (float, float), optional
        Part of ``after_path`` holding the post tone, s.
    nominal_frequency_hz : float, optional
        Nominal calibrator frequency, Hz (default: nearest octave frequency).

    Returns
    -------
    Calibration
        ``full_scale_level_db`` from the pre tone; ``drift_db`` = post - pre tone level.

    Raises
    ------
    SettingsError
        Level outside 60..150 dB; the same file for both tones without both spans.
    CalibrationError, AudioError
        See :func:`measure_tone` and :class:`~bandmeter.audio.Recording`.

    Examples
    --------
    >>> cal = calibrate("site_b_cal_start.wav", 94.0,
    ...                 after_path="site_b_cal_end.wav")  # doctest: +SKIP
    >>> cal.save("site_b.cal.json")  # doctest: +SKIP
    """
    level = _check_number(level_db, "calibrator level_db", *REFERENCE_LEVEL_RANGE_DB)
    nominal = _check_nominal(nominal_frequency_hz)
    pre_path = os.fspath(tone_path)
    post_path = None if after_path is None else os.fspath(after_path)
    if post_path is not None and _same_file(pre_path, post_path) and (
        span_s is None or after_span_s is None
    ):
        raise SettingsError(
            f"{pre_path} holds both the pre and the post tone: give both spans "
            f"(span_s and after_span_s), got {span_s!r} and {after_span_s!r}"
        )
    if post_path is None and after_span_s is not None:
        raise SettingsError("after_span_s needs after_path (the post-survey tone file)")
    pre, pre_sha = _measure_file(pre_path, channel, span_s, nominal)
    warnings = list(pre.warnings)
    post_summary = None
    drift = None
    if post_path is not None:
        post, post_sha = _measure_file(post_path, channel, after_span_s, nominal)
        post_summary = ToneSummary.from_measurement(post, post_sha)
        drift = post.tone_level_dbfs - pre.tone_level_dbfs
        warnings += [f"post tone: {text}" for text in post.warnings]
        warnings += _drift_warnings(pre, post, drift)
    return Calibration(
        full_scale_level_db=full_scale_level_from_tone(level, pre.tone_level_dbfs),
        reference_level_db=level,
        frequency_hz=pre.frequency_hz,
        tone_level_dbfs=pre.tone_level_dbfs,
        stability_db=pre.stability_db,
        snr_db=pre.snr_db,
        thdn_percent=pre.thdn_percent,
        span_s=pre.span_s,
        source_file=pre_path,
        source_sha256=pre_sha,
        channel=pre.channel,
        sample_rate=pre.sample_rate,
        tool_version=tool_stamp()["tool_version"],
        created=now_iso(),
        warnings=warnings,
        post=post_summary,
        drift_db=drift,
        level_history=pre.level_history,
    )


def _drift_warnings(pre: ToneMeasurement, post: ToneMeasurement, drift: float) -> list[str]:
    out: list[str] = []
    if abs(drift) > DRIFT_LIMIT_DB:
        out.append(
            f"calibration drift {drift:+.2f} dB between the pre and post tones exceeds "
            f"+-{DRIFT_LIMIT_DB:g} dB (ISO 1996-2 / ISO 9612 field-check criterion, from memory); "
            f"the survey results may be invalid"
        )
    if abs(post.frequency_hz - pre.frequency_hz) > 0.01 * pre.frequency_hz:
        out.append(
            f"pre and post tones differ in frequency ({pre.frequency_hz:.1f} Hz and "
            f"{post.frequency_hz:.1f} Hz): were they made with the same calibrator?"
        )
    return out


def from_tone(
    tone_path: str | os.PathLike[str],
    level_db: float,
    channel: int = 1,
    span_s: tuple[float, float] | None = None,
    nominal_frequency_hz: float | None = None,
) -> Calibration:
    """Calibrate on the fly from one tone file (no post check); see :func:`calibrate`."""
    return calibrate(tone_path, level_db, channel=channel, span_s=span_s,
                     nominal_frequency_hz=nominal_frequency_hz)


def from_full_scale_level(full_scale_level_db: float, channel: int | None = None) -> Calibration:
    """Calibration for a chain whose sensitivity is known (stated by the user).

    Parameters
    ----------
    full_scale_level_db : float
        SPL of a full-scale sine in the chain, dB re 20 uPa (60..200 dB).
    channel : int, optional
        Channel it applies to; None (default) applies to every channel.
    """
    level = _check_number(full_scale_level_db, "full_scale_level_db", *FULL_SCALE_LEVEL_RANGE_DB)
    if channel is not None and (isinstance(channel, bool) or not isinstance(channel, int)
                                or channel < 1):
        raise SettingsError(f"channel must be an integer >= 1 or None, got {channel!r}")
    return Calibration(
        full_scale_level_db=level,
        reference_level_db=None,
        frequency_hz=None,
        tone_level_dbfs=None,
        stability_db=None,
        snr_db=None,
        thdn_percent=None,
        span_s=None,
        source_file="stated by user",
        source_sha256=None,
        channel=channel,
        sample_rate=None,
        tool_version=tool_stamp()["tool_version"],
        created=now_iso(),
    )


# --------------------------------------------------------------------------------------------
# Calibrator check (IEC 60942)
# --------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class LimitValue:
    """A tolerance value with its source and status (REFERENCE_VALUES.md section 6)."""

    value: float
    source: str
    status: str

    def to_dict(self) -> dict[str, Any]:
        """JSON-ready dictionary."""
        return dict(self.__dict__)


_SRC_FREQ = "IEC 60942:2003 Table 3 (via GOST R IEC 60942-2009 Table 3)"
_SRC_L2017 = "IEC 60942:2017 Table 2, acceptance limits, 160 Hz to 1250 Hz"
_SRC_L2003 = ("IEC 60942:2003 Table 1, tolerance including expanded uncertainty, "
              "160 Hz to 1250 Hz")
_SRC_DIST = "IEC 60942 total distortion limit"
_CONFIRMED = "confirmed"
_MEMORY = "from memory, unconfirmed"

#: IEC 60942 tolerances per calibrator class: frequency (%), level (dB, 2017 acceptance
#: limits and 2003 tolerances) and total distortion (%), each with its source and status as
#: REFERENCE_VALUES.md section 6 gives them (distortion: from memory, not in that table).
IEC60942_LIMITS: dict[str, dict[str, LimitValue]] = {
    "LS": {
        "frequency_percent": LimitValue(1.0, _SRC_FREQ, _CONFIRMED),
        "level_db_2017": LimitValue(0.10, _SRC_L2017, _MEMORY),
        "level_db_2003": LimitValue(0.20, _SRC_L2003, _MEMORY),
        "distortion_percent": LimitValue(2.5, _SRC_DIST, _MEMORY),
    },
    "1": {
        "frequency_percent": LimitValue(1.0, _SRC_FREQ, _CONFIRMED),
        "level_db_2017": LimitValue(0.25, _SRC_L2017, _MEMORY),
        "level_db_2003": LimitValue(0.40, _SRC_L2003, _MEMORY),
        "distortion_percent": LimitValue(3.0, _SRC_DIST, _MEMORY),
    },
    "2": {
        "frequency_percent": LimitValue(2.0, _SRC_FREQ, _CONFIRMED),
        "level_db_2017": LimitValue(0.40, _SRC_L2017, _MEMORY),
        "level_db_2003": LimitValue(0.75, _SRC_L2003, _MEMORY),
        "distortion_percent": LimitValue(4.0, _SRC_DIST, _MEMORY),
    },
}

#: Frequency range to which the level tolerances apply, Hz (IEC 60942:2003 5.3.1.1, confirmed).
PRINCIPAL_RANGE_HZ = (160.0, 1250.0)

#: Which level tolerance is applied, and why.
LEVEL_LIMIT_APPLIED = "level_db_2017"
LEVEL_LIMIT_REASON = (
    "the IEC 60942:2017 acceptance limits are applied: 2017 is the current edition, and its "
    "limits apply to the measured deviation itself, which is what this check measures (the 2003 "
    "tolerances include the measurement uncertainty, which this check does not evaluate); the "
    "2003 result is given for information"
)

CALIBRATOR_CHECK_CAUTION = (
    "field check only, not a calibration-laboratory verification to IEC 60942 Annex B: the "
    "measurement uncertainty of the chain (including the reference calibrator's own tolerance "
    "and the microphone's frequency response) is not included"
)


@dataclass(frozen=True)
class CalibratorCheck:
    """Result of checking a sound calibrator through an already calibrated chain.

    Attributes
    ----------
    source_file, source_sha256 : str
        Tone recording of the calibrator under check and its SHA-256.
    channel : int
        Channel measured.
    calibrator_class : str
        ``"LS"``, ``"1"`` or ``"2"``.
    calibration : str
        :meth:`Calibration.describe` of the chain calibration used.
    nominal_level_db, measured_level_db, level_deviation_db : float
        dB re 20 uPa; measured = tone level (dBFS) + full-scale level; deviation = measured -
        nominal.
    level_limit_db, level_pass : float, bool or None
        Applied limit (IEC 60942:2017 acceptance limit) and result; None outside the principal
        frequency range, where the table has no limit.
    level_limit_2003_db, level_pass_2003 : float, bool or None
        IEC 60942:2003 tolerance and result, for information.
    nominal_frequency_hz, frequency_hz, frequency_deviation_percent : float
        Hz, Hz, %.
    frequency_limit_percent : float
    frequency_pass : bool
    thdn_percent, distortion_limit_percent : float
        Measured THD+N (includes background noise, so it overstates distortion) and limit, %.
    distortion_pass : bool
    passed : bool
        All assessed criteria pass.
    limits : dict
        The limits used, each with source and status.
    warnings : list of str
        Warnings of the tone measurement.
    notes : list of str
        Which limits were applied and why, and the caution that this is a field check.
    """

    source_file: str
    source_sha256: str
    channel: int
    calibrator_class: str
    calibration: str
    nominal_level_db: float
    measured_level_db: float
    level_deviation_db: float
    level_limit_db: float
    level_pass: bool | None
    level_limit_2003_db: float
    level_pass_2003: bool | None
    nominal_frequency_hz: float
    frequency_hz: float
    frequency_deviation_percent: float
    frequency_limit_percent: float
    frequency_pass: bool
    thdn_percent: float
    distortion_limit_percent: float
    distortion_pass: bool
    passed: bool
    limits: dict[str, Any]
    warnings: list[str]
    notes: list[str]

    def to_dict(self) -> dict[str, Any]:
        """JSON-ready dictionary."""
        out = dict(self.__dict__)
        out["warnings"] = list(self.warnings)
        out["notes"] = list(self.notes)
        return out

    def describe(self) -> str:
        """One-line verdict."""
        verdict = "PASS" if self.passed else "FAIL"
        return (
            f"{verdict}: class {self.calibrator_class} calibrator {self.measured_level_db:.2f} dB "
            f"({self.level_deviation_db:+.2f} dB re nominal {self.nominal_level_db:g} dB), "
            f"{self.frequency_hz:.1f} Hz ({self.frequency_deviation_percent:+.2f} %), "
            f"THD+N {self.thdn_percent:.2f} %"
        )


def check_calibrator(
    tone_path: str | os.PathLike[str],
    calibration: Calibration,
    nominal_level_db: float,
    nominal_frequency_hz: float = 1000.0,
    calibrator_class: str = "1",
    channel: int = 1,
    span_s: tuple[float, float] | None = None,
) -> CalibratorCheck:
    """Check a sound calibrator against IEC 60942 tolerances through a calibrated chain.

    Parameters
    ----------
    tone_path : str or path-like
        Recording of the calibrator under check, made with the calibrated chain.
    calibration : Calibration
        Calibration of that chain (e.g. made with a reference calibrator).
    nominal_level_db : float
        Stated level of the calibrator under check, dB re 20 uPa.
    nominal_frequency_hz : float, optional
        Its stated frequency, Hz (default 1000).
    calibrator_class : {"LS", "1", "2"}
        IEC 60942 class claimed for it.
    channel : int, optional
        Channel of the recording (must match the calibration's).
    span_s : (float, float), optional
        Part of the file holding the tone, s (default: found automatically).

    Returns
    -------
    CalibratorCheck
    """
    if calibrator_class not in IEC60942_LIMITS:
        raise SettingsError(
            f"calibrator_class must be one of {', '.join(IEC60942_LIMITS)}, "
            f"got {calibrator_class!r}"
        )
    nominal_level = _check_number(nominal_level_db, "nominal_level_db", *REFERENCE_LEVEL_RANGE_DB)
    nominal_hz = _check_number(nominal_frequency_hz, "nominal_frequency_hz", *TONE_RANGE_HZ)
    calibration.check_channel(channel)
    path = os.fspath(tone_path)
    tone, sha = _measure_file(path, channel, span_s, nominal_hz)
    limits = IEC60942_LIMITS[calibrator_class]
    measured = tone.tone_level_dbfs + calibration.full_scale_level_db
    deviation = measured - nominal_level
    in_range = PRINCIPAL_RANGE_HZ[0] <= nominal_hz <= PRINCIPAL_RANGE_HZ[1]
    lim17 = limits["level_db_2017"].value
    lim03 = limits["level_db_2003"].value
    level_pass = abs(deviation) <= lim17 if in_range else None
    level_pass_03 = abs(deviation) <= lim03 if in_range else None
    freq_pass = abs(tone.frequency_deviation_percent) <= limits["frequency_percent"].value
    dist_pass = tone.thdn_percent <= limits["distortion_percent"].value
    notes = [LEVEL_LIMIT_REASON, CALIBRATOR_CHECK_CAUTION,
             "THD+N includes the background noise of the recording, so it overstates the "
             "calibrator's distortion (a conservative test)"]
    if not in_range:
        notes.append(
            f"nominal frequency {nominal_hz:g} Hz is outside {PRINCIPAL_RANGE_HZ[0]:g}.."
            f"{PRINCIPAL_RANGE_HZ[1]:g} Hz, where the level tolerances of the table apply; the "
            f"level was not assessed"
        )
    if calibration.frequency_hz is not None and abs(
        tone.frequency_hz - calibration.frequency_hz
    ) > 0.01 * calibration.frequency_hz:
        notes.append(
            f"the chain was calibrated at {calibration.frequency_hz:.1f} Hz and the calibrator "
            f"checked at {tone.frequency_hz:.1f} Hz: the chain's frequency response between them "
            f"is not corrected"
        )
    assessed = [p for p in (level_pass, freq_pass, dist_pass) if p is not None]
    return CalibratorCheck(
        source_file=path,
        source_sha256=sha,
        channel=tone.channel,
        calibrator_class=calibrator_class,
        calibration=calibration.describe(),
        nominal_level_db=nominal_level,
        measured_level_db=measured,
        level_deviation_db=deviation,
        level_limit_db=lim17,
        level_pass=level_pass,
        level_limit_2003_db=lim03,
        level_pass_2003=level_pass_03,
        nominal_frequency_hz=nominal_hz,
        frequency_hz=tone.frequency_hz,
        frequency_deviation_percent=tone.frequency_deviation_percent,
        frequency_limit_percent=limits["frequency_percent"].value,
        frequency_pass=freq_pass,
        thdn_percent=tone.thdn_percent,
        distortion_limit_percent=limits["distortion_percent"].value,
        distortion_pass=dist_pass,
        passed=all(assessed),
        limits={key: value.to_dict() for key, value in limits.items()},
        warnings=list(tone.warnings),
        notes=notes,
    )
