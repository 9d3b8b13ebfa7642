"""Synthetic test signals: sines, tone bursts, noise.

Used by the demo scenario, the conformance self-test and the tests. All generators are
deterministic given a seed and return float64 arrays in the caller's units.
"""

from __future__ import annotations

import numpy as np

from .errors import SettingsError


def _sample_count(fs: float, duration_s: float) -> int:
    if not fs > 0:
        raise SettingsError(f"sample rate must be > 0 Hz, got {fs!r}")
    if not duration_s >= 0:
        raise SettingsError(f"duration must be >= 0 s, got {duration_s!r}")
    return int(round(duration_s * fs))


def sine(
    fs: float, frequency_hz: float, duration_s: float, amplitude: float = 1.0,
    phase_rad: float = 0.0,
) -> np.ndarray:
    """Sine ``amplitude * sin(2 pi f t + phase)`` sampled at ``fs`` Hz for ``duration_s`` s."""
    n = _sample_count(fs, duration_s)
    t = np.arange(n) / fs
    return amplitude * np.sin(2.0 * np.pi * frequency_hz * t + phase_rad)


def tone_burst(
    fs: float,
    frequency_hz: float,
    burst_s: float,
    amplitude: float = 1.0,
    lead_s: float = 0.0,
    tail_s: float = 0.0,
) -> np.ndarray:
    """A sine burst that starts and ends at zero crossings, with silence before and after.

    The burst holds ``round(burst_s * f)`` whole cycles (at least one), as IEC 61672-1 asks
    for tone-burst tests; its true duration is ``cycles / f``.
    """
    cycles = max(1, int(round(burst_s * frequency_hz)))
    n_burst = int(round(cycles / frequency_hz * fs))
    lead = _sample_count(fs, lead_s)
    tail = _sample_count(fs, tail_s)
    out = np.zeros(lead + n_burst + tail)
    t = np.arange(n_burst) / fs
    out[lead : lead + n_burst] = amplitude * np.sin(2.0 * np.pi * frequency_hz * t)
    return out


def white_noise(n: int, seed: int = 0) -> np.ndarray:
    """Gaussian white noise of unit RMS (expected), ``n`` samples."""
    return np.random.default_rng(seed).standard_normal(int(n))


def pink_noise(n: int, fs: float, seed: int = 0, fmin_hz: float = 1.0) -> np.ndarray:
    """Pink noise (power spectral density ~ 1/f) of unit RMS, by FFT shaping of white noise.

    Equal energy per octave and per fractional-octave band. Below ``fmin_hz`` the spectrum is
    flat at the ``fmin_hz`` density (avoids a DC singularity); DC is removed.
    """
    n = int(n)
    if n < 2:
        raise SettingsError(f"pink noise needs at least 2 samples, got {n!r}")
    spectrum = np.fft.rfft(white_noise(n, seed))
    f = np.fft.rfftfreq(n, 1.0 / fs)
    shaping = 1.0 / np.sqrt(np.maximum(f, fmin_hz))
    shaping[0] = 0.0
    x = np.fft.irfft(spectrum * shaping, n)
    return x / np.sqrt(np.mean(x * x))


def fade(n: int, fs: float, rise_s: float, fall_s: float) -> np.ndarray:
    """Raised-cosine fade-in/fade-out envelope of ``n`` samples."""
    env = np.ones(int(n))
    for length_s, sl in ((rise_s, slice(None)), (fall_s, slice(None, None, -1))):
        m = min(int(round(length_s * fs)), len(env))
        if m > 0:
            ramp = 0.5 - 0.5 * np.cos(np.pi * np.arange(m) / m)
            view = env[sl]
            view[:m] *= ramp
    return env
