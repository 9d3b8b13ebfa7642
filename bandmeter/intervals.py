"""Reporting intervals: how a stream of samples is cut into consecutive intervals.

An :class:`IntervalPlan` maps absolute sample indices (0 = first sample of the recording) to
interval numbers. Intervals are consecutive, without gaps or overlaps. With clock alignment the
first interval may be a leading partial interval that ends at ``first_boundary``; the last
interval is partial when the recording does not end on a boundary.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .errors import SettingsError


@dataclass(frozen=True)
class IntervalPlan:
    """Cut a sample stream into reporting intervals.

    Parameters
    ----------
    interval_samples : int or None
        Interval length in samples. ``None`` means one interval spanning the whole stream.
    first_boundary : int, optional
        Sample index of the first interval boundary. 0 (default) means intervals start at
        sample 0. A value ``0 < first_boundary < interval_samples`` makes samples
        ``[0, first_boundary)`` a leading partial interval (interval 0), used to align
        intervals to clock time.
    """

    interval_samples: int | None
    first_boundary: int = 0

    def __post_init__(self) -> None:
        if self.interval_samples is not None and self.interval_samples < 1:
            raise SettingsError(
                f"interval must be at least one sample long, got {self.interval_samples!r}"
            )
        if self.first_boundary < 0 or (
            self.interval_samples is not None and self.first_boundary >= self.interval_samples
        ):
            raise SettingsError(
                f"first_boundary must be in [0, interval_samples), got {self.first_boundary!r}"
            )
        if self.interval_samples is None and self.first_boundary != 0:
            raise SettingsError("first_boundary needs an interval length")

    def interval_index(self, sample_index: np.ndarray | int) -> np.ndarray:
        """Interval number of each absolute sample index.

        Parameters
        ----------
        sample_index : array_like of int
            Absolute sample indices (>= 0).

        Returns
        -------
        numpy.ndarray of int64
            Interval numbers, 0 for the first interval.
        """
        idx = np.asarray(sample_index, dtype=np.int64)
        if self.interval_samples is None:
            return np.zeros_like(idx)
        n = self.interval_samples
        if self.first_boundary == 0:
            return idx // n
        return np.where(idx < self.first_boundary, 0, (idx - self.first_boundary) // n + 1)

    def interval_start(self, k: int) -> int:
        """Absolute sample index at which interval ``k`` starts."""
        if k < 0:
            raise SettingsError(f"interval number must be >= 0, got {k!r}")
        if self.interval_samples is None:
            if k:
                raise SettingsError(f"a whole-stream plan has only interval 0, got {k!r}")
            return 0
        if self.first_boundary == 0:
            return k * self.interval_samples
        return 0 if k == 0 else self.first_boundary + (k - 1) * self.interval_samples

    def interval_stop(self, k: int, total_samples: int | None = None) -> int | None:
        """Absolute sample index one past the end of interval ``k``.

        Returns ``total_samples`` (or None when unknown) for a whole-stream plan, and the
        nominal end clipped to ``total_samples`` otherwise.
        """
        if self.interval_samples is None:
            return total_samples
        stop = self.interval_start(k + 1)
        return stop if total_samples is None else min(stop, total_samples)

    def boundaries_between(self, start: int, stop: int) -> np.ndarray:
        """Interval boundaries ``b`` with ``start < b < stop`` (absolute sample indices).

        Used to split a block covering samples ``[start, stop)`` at interval starts.
        """
        if self.interval_samples is None or stop - start < 2:
            return np.empty(0, dtype=np.int64)
        first = int(self.interval_index(start)) + 1
        last = int(self.interval_index(stop - 1))
        if last < first:
            return np.empty(0, dtype=np.int64)
        ks = np.arange(first, last + 1, dtype=np.int64)
        if self.first_boundary == 0:
            return ks * self.interval_samples
        return self.first_boundary + (ks - 1) * self.interval_samples


_DURATION_UNITS = {
    "ms": 1e-3,
    "s": 1.0,
    "sec": 1.0,
    "min": 60.0,
    "m": 60.0,
    "h": 3600.0,
    "d": 86400.0,
}


def parse_duration(text: str | float | int) -> float:
    """Parse a duration such as ``"100ms"``, ``"1s"``, ``"15min"``, ``"1h"`` into seconds.

    A bare number is taken as seconds. Raises SettingsError for anything else or a value
    that is not positive.
    """
    if isinstance(text, (int, float)) and not isinstance(text, bool):
        value = float(text)
    else:
        s = str(text).strip().lower().replace(" ", "")
        number = s.rstrip("abcdefghijklmnopqrstuvwxyz")
        unit = s[len(number):] or "s"
        if unit not in _DURATION_UNITS or not number:
            raise SettingsError(
                f"cannot read duration {text!r}; use e.g. 100ms, 1s, 1min, 15min, 1h"
            )
        try:
            value = float(number) * _DURATION_UNITS[unit]
        except ValueError:
            raise SettingsError(
                f"cannot read duration {text!r}; use e.g. 100ms, 1s, 1min, 15min, 1h"
            ) from None
    if not value > 0 or value != value or value == float("inf"):
        raise SettingsError(f"duration must be positive and finite, got {text!r}")
    return value
