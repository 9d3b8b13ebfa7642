"""Exception hierarchy of bandmeter.

Every error that bandmeter raises for bad input derives from :class:`BandmeterError`, so the
command line can turn them into one-line messages in a single place. Subclasses also derive
from the matching built-in exception (``ValueError``, ``OSError``) so library users can catch
what they expect.
"""

from __future__ import annotations


class BandmeterError(Exception):
    """Root of all bandmeter errors caused by input, files or settings."""


class AudioError(BandmeterError, ValueError):
    """A recording cannot be opened or read as asked (missing, not audio, bad channel...)."""


class CalibrationError(BandmeterError, ValueError):
    """A calibration cannot be derived or used (no tone, malformed file, wrong channel...)."""


class SettingsError(BandmeterError, ValueError):
    """An analysis setting is invalid (interval, percentile, band range...)."""


class OutputError(BandmeterError, OSError):
    """An output cannot be written (exists without ``force``, folder not writable...)."""
