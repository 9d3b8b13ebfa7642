"""The built-in demo: an invented night survey, synthesised, calibrated and analysed.

Scenario (invented; no real place, firm or person): an acoustic consultant measures night
noise at position "MP2" on the boundary fence of the fictional Larkspur Lane depot, towards
the nearest dwelling. The recorder chain (microphone, preamplifier, 24-bit recorder) has a
full-scale level of 120.0 dB re 20 uPa. Before and after the survey a 94.0 dB calibrator
(1 kHz) is played into the microphone; the chain drifts by +0.15 dB over the night. The site
recording (2 minutes here, to keep the demo quick) holds distant traffic, a chiller unit
humming at 100 Hz, a delivery lorry passing at 35-60 s and a roller door banging at 90 s.

Everything is synthesised with a fixed seed, so the demo's files and numbers are the same on
every machine; the levels it prints are recovered by the real analysis from the files.
"""

from __future__ import annotations

import math
import os
import tempfile
from dataclasses import dataclass, field
from datetime import datetime, timedelta, timezone
from pathlib import Path
from typing import Any

import numpy as np
import soundfile as sf
from scipy import signal

from .calibration import Calibration, calibrate
from .engine import AnalysisSettings, analyse_file
from .errors import OutputError
from .results import LevelResult
from .signals import fade, pink_noise, sine

FS = 48000
#: Chain sensitivity of the invented recorder: SPL of a full-scale sine, dB re 20 uPa.
CHAIN_FULL_SCALE_DB = 120.0
#: Calibrator level and frequency of the invented calibrator (certificate values).
CALIBRATOR_DB = 94.0
CALIBRATOR_HZ = 1000.0
#: Drift of the chain between the pre and post calibration, dB.
CHAIN_DRIFT_DB = 0.15
SITE_DURATION_S = 120.0
#: Clock time of the site recording's first sample (invented).
DEMO_START = "2026-05-14T23:59:45+01:00"
SEED = 20261202

FILES = {
    "cal_pre": "mp2_cal_pre.wav",
    "cal_post": "mp2_cal_post.wav",
    "site": "mp2_night.wav",
    "calibration": "mp2.cal.json",
    "levels_csv": "mp2_night_levels.csv",
    "bands_csv": "mp2_night_bands.csv",
    "report": "mp2_report.html",
}
#: The chiller's 100 Hz hum, dB re 20 uPa (RMS of the fundamental; the demo test reads it
#: back from the 100 Hz one-third-octave band of the first 10 s, before the lorry comes).
CHILLER_DB = 55.0


def _units(level_pa: np.ndarray, gain_db: float = 0.0) -> np.ndarray:
    """Pressure in Pa -> file units on the +-1 scale for the invented chain."""
    pa_per_unit = math.sqrt(2) * 20e-6 * 10 ** ((CHAIN_FULL_SCALE_DB - gain_db) / 20)
    return level_pa / pa_per_unit


def _pa(level_db: float) -> float:
    """RMS pressure of a level, Pa."""
    return 20e-6 * 10 ** (level_db / 20)


def calibrator_recording(gain_db: float, seed: int) -> np.ndarray:
    """A calibrator tone with seating and removal handling, in file units."""
    rng = np.random.default_rng(seed)
    duration = 14.0
    n = int(duration * FS)
    tone = sine(FS, CALIBRATOR_HZ + 0.4, duration, math.sqrt(2) * _pa(CALIBRATOR_DB), 0.3)
    envelope = np.zeros(n)
    on, off = int(2.0 * FS), int(12.0 * FS)
    envelope[on:off] = fade(off - on, FS, 0.6, 0.4)
    handling = np.zeros(n)
    for at in (1.2, 1.9, 12.3):  # the calibrator being seated and pulled off
        k = int(at * FS)
        burst = rng.standard_normal(int(0.15 * FS)) * np.exp(-np.arange(int(0.15 * FS)) / 900)
        handling[k : k + burst.size] += burst * _pa(85.0)
    background = pink_noise(n, FS, seed=seed + 1) * _pa(38.0)
    return _units(tone * envelope + handling + background, gain_db)


def site_recording(seed: int) -> np.ndarray:
    """The site recording in pascals (before the chain), ``SITE_DURATION_S`` long."""
    n = int(SITE_DURATION_S * FS)
    t = np.arange(n) / FS
    rng = np.random.default_rng(seed)
    # distant traffic: pink noise rolled off above 2 kHz, about 45 dB(A)
    lowpass = signal.butter(2, 2000.0, fs=FS, output="sos")
    traffic = signal.sosfilt(lowpass, pink_noise(n, FS, seed=seed + 2)) * _pa(52.0)
    # chiller: 100 Hz hum with harmonics, slightly unsteady
    wobble = 1.0 + 0.05 * np.sin(2 * np.pi * 0.13 * t)
    chiller = _pa(CHILLER_DB) * math.sqrt(2) * wobble * (
        np.sin(2 * np.pi * 100 * t) + 0.3 * np.sin(2 * np.pi * 200 * t + 0.5)
        + 0.1 * np.sin(2 * np.pi * 300 * t + 1.1)
    )
    # delivery lorry: low-frequency rich noise swelling to about 68 dB(A) at 47 s
    lorry_sos = signal.butter(2, [60.0, 1200.0], btype="bandpass", fs=FS, output="sos")
    lorry = signal.sosfilt(lorry_sos, rng.standard_normal(n)) * _pa(78.0)
    lorry *= np.exp(-0.5 * ((t - 47.0) / 5.0) ** 2)
    # roller door bang at 90 s: a decaying broadband impulse
    door = np.zeros(n)
    k = int(90.0 * FS)
    m = int(0.4 * FS)
    door[k : k + m] = rng.standard_normal(m) * np.exp(-np.arange(m) / (0.03 * FS)) * _pa(96.0)
    return traffic + chiller + lorry + door


@dataclass
class DemoResult:
    """What the demo wrote and computed."""

    out_dir: str
    files: dict[str, str]
    calibration: Calibration
    levels: LevelResult
    batch: Any = None  # BatchReport of the batch step
    events: Any = None  # EventResult of the night recording
    residual: Any = None  # levels without the events
    rating: Any = None  # RatingResult of the monitor's hourly levels
    exposure: Any = None  # ExposureAssessment of the yard marshal
    notes: list[str] = field(default_factory=list)


def write_demo_recordings(out_dir: str | os.PathLike[str], force: bool = False) -> dict[str, str]:
    """Synthesise the demo's three recordings into ``out_dir`` (24-bit WAV, 48 kHz).

    Returns the paths by role (``cal_pre``, ``cal_post``, ``site``). Existing files are only
    replaced with ``force``.
    """
    out = Path(out_dir)
    paths = {role: str(out / FILES[role]) for role in ("cal_pre", "cal_post", "site")}
    for path in paths.values():
        if os.path.exists(path) and not force:
            raise OutputError(f"{path}: already exists; use --force to replace it")
    signals = {
        "cal_pre": calibrator_recording(0.0, SEED),
        "cal_post": calibrator_recording(CHAIN_DRIFT_DB, SEED + 10),
        "site": _units(site_recording(SEED + 20)),
    }
    for role, data in signals.items():
        tmp = paths[role] + ".part.wav"
        sf.write(tmp, data, FS, subtype="PCM_24")
        os.replace(tmp, paths[role])
    return paths


def run_demo(out_dir: str | os.PathLike[str] | None = None, force: bool = False) -> DemoResult:
    """Synthesise the scenario into ``out_dir`` and run every analysis bandmeter has.

    Parameters
    ----------
    out_dir : str or path-like, optional
        Folder for the demo's files; created if missing. Default: a new temporary folder
        (the demo never writes into the current folder unless asked).
    force : bool
        Replace files of an earlier demo run in ``out_dir``.
    """
    if out_dir is None:
        out_dir = tempfile.mkdtemp(prefix="bandmeter-demo-")
    os.makedirs(out_dir, exist_ok=True)
    files = write_demo_recordings(out_dir, force=force)
    files["calibration"] = str(Path(out_dir) / FILES["calibration"])
    cal = calibrate(files["cal_pre"], CALIBRATOR_DB, after_path=files["cal_post"])
    cal.save(files["calibration"], force=force)
    # broadband metrics and one-third-octave bands (with F maxima) in one streaming pass
    settings = AnalysisSettings(interval_s=10.0, bands=3, band_max=True)
    levels = analyse_file(files["site"], cal, settings,
                          start_time=datetime.fromisoformat(DEMO_START))
    from .tables import tidy_band_rows, wide_rows, write_csv

    files["levels_csv"] = str(Path(out_dir) / FILES["levels_csv"])
    write_csv(files["levels_csv"], wide_rows(levels), force=force)
    files["bands_csv"] = str(Path(out_dir) / FILES["bands_csv"])
    write_csv(files["bands_csv"], tidy_band_rows(levels), force=force)
    # the same recording as a (one-file) batch with clock-aligned 30 s intervals: the night
    # recording started at 23:59:45 local time (invented), so the first interval is 15 s
    from .batch import BatchOptions, run_batch

    batch_dir = str(Path(out_dir) / "batch")
    options = BatchOptions(settings=AnalysisSettings(interval_s=30.0), calibration=cal,
                           start=DEMO_START, align=True, workers=1, force=force)
    report = run_batch([files["site"]], batch_dir, options, progress=False)
    files["batch"] = batch_dir
    result = DemoResult(str(out_dir), files, cal, levels, report)
    _assessments(result, cal, force)
    files["report"] = str(Path(out_dir) / FILES["report"])
    write_demo_report(result, files["report"], force)
    return result


def write_demo_report(result: DemoResult, path: str, force: bool = False) -> None:
    """The demo's HTML report: the night recording with its events, rating and exposure."""
    from .report import Included, build_report, source_from_result, write_report

    included = [
        Included("night events", "events",
                 {"file": result.levels.file, **result.events.to_dict()}),
        Included("depot monitor rating", "rating", result.rating.to_dict()),
        Included("yard marshal exposure", "exposure", result.exposure.to_dict()),
    ]
    text = build_report(source_from_result(result.levels), included,
                        title="Night survey at the (invented) Larkspur Lane depot, MP2")
    write_report(path, text, force=force)


def monitor_hourly(seed: int = SEED + 30) -> tuple[list[datetime], np.ndarray]:
    """Two days of hourly LAeq from the depot's (invented) long-term monitor at MP2.

    Invented data for the rating demonstration only: a diurnal pattern (quiet nights, a
    morning delivery peak, evening chiller-only periods) with seeded scatter, dB(A).
    """
    rng = np.random.default_rng(seed)
    tz = timezone(timedelta(hours=1))
    starts = [datetime(2026, 5, 14, 0, tzinfo=tz) + timedelta(hours=h) for h in range(48)]
    hour = np.array([t.hour for t in starts], dtype=float)
    base = np.where((hour >= 7) & (hour < 19), 58.0, np.where(hour >= 19, 52.0, 46.0))
    base += np.where((hour >= 5) & (hour < 8), 6.0, 0.0)  # early deliveries
    return starts, base + rng.normal(0.0, 1.0, hour.size)


def _assessments(result: DemoResult, cal: Calibration, force: bool) -> None:
    """Events, rating and exposure of the scenario (fills ``result.notes`` objects)."""
    from .assess.events import detect_events
    from .assess.exclusions import TimeRange, apply_exclusions
    from .assess.exposure import Task, assess_exposure
    from .assess.rating import rate_intervals

    start = datetime.fromisoformat(DEMO_START)
    timed = analyse_file(result.files["site"], cal, AnalysisSettings(history_s=0.1),
                         start_time=start)
    result.events = detect_events(timed.history)
    result.residual = apply_exclusions(
        timed.history, [TimeRange(e.start_s, e.end_s, "event") for e in result.events.events])
    starts, laeq = monitor_hourly()
    monitor_csv = str(Path(result.out_dir) / "mp2_monitor_hourly.csv")
    from .tables import write_csv

    write_csv(monitor_csv, [{"start_time": t.isoformat(), "duration_s": 3600.0, "LAeq": v}
                            for t, v in zip(starts, laeq.tolist(), strict=True)], force=force)
    result.files["monitor_csv"] = monitor_csv
    result.rating = rate_intervals(starts, np.full(len(starts), 3600.0), laeq)
    # the depot's yard marshal (invented): 6 h in the yard at the level measured at MP2,
    # 2 h in the tyre workshop at a stated 87 dB(A)
    yard = result.levels.overall.metrics
    result.exposure = assess_exposure(
        [Task("yard (MP2 recording)", yard["LAeq"], 6.0, yard["LCpeak"]),
         Task("tyre workshop (stated)", 87.0, 2.0, 118.0)], ["niosh"])
