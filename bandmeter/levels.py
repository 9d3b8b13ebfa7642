"""Energy arithmetic of sound levels.

Levels are energy quantities: they are averaged and summed as mean squares, never as dB values.
``L = 10 lg(p^2 / p0^2)`` with the reference sound pressure ``p0 = 20 uPa`` in air
(IEC 61672-1:2013 3.x; ISO 1683). Functions accept scalars or arrays and return numpy floats or
arrays; levels of zero energy are ``-inf``.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from typing import Any

import numpy as np
from numpy.typing import ArrayLike

from .errors import SettingsError

#: Reference sound pressure in air, Pa (ISO 1683; IEC 61672-1).
P0_PA = 20e-6

#: Reference duration of the sound exposure level, s (IEC 61672-1:2013, T0 = 1 s).
T0_S = 1.0


def db_from_power_ratio(ratio: ArrayLike) -> np.ndarray:
    """10 lg(ratio); zero gives -inf without a warning."""
    r = np.asarray(ratio, dtype=np.float64)
    with np.errstate(divide="ignore"):
        return 10.0 * np.log10(r)


def power_ratio_from_db(level_db: ArrayLike) -> np.ndarray:
    """10^(L/10); -inf gives 0."""
    return np.power(10.0, np.asarray(level_db, dtype=np.float64) / 10.0)


def spl_from_pressure(p_rms_pa: ArrayLike) -> np.ndarray:
    """Sound pressure level in dB re 20 uPa of an RMS pressure in Pa."""
    p = np.asarray(p_rms_pa, dtype=np.float64)
    return db_from_power_ratio(p * p / (P0_PA * P0_PA))


def pressure_from_spl(level_db: ArrayLike) -> np.ndarray:
    """RMS pressure in Pa of a sound pressure level in dB re 20 uPa."""
    return P0_PA * np.power(10.0, np.asarray(level_db, dtype=np.float64) / 20.0)


def _levels_array(levels_db: ArrayLike, name: str = "levels") -> np.ndarray:
    arr = np.asarray(levels_db, dtype=np.float64)
    if arr.size == 0:
        raise SettingsError(f"{name}: at least one level is needed")
    if np.isnan(arr).any():
        raise SettingsError(f"{name}: NaN is not a level, got {levels_db!r}")
    return arr


def combine_levels(levels_db: ArrayLike) -> float:
    """Energy sum of levels: 10 lg(sum 10^(Li/10)).

    The level of several incoherent sources together; e.g. 80 + 80 + 90 dB gives 90.79 dB.

    Parameters
    ----------
    levels_db : array_like
        Levels in dB (any common reference).

    Returns
    -------
    float
        Combined level, dB.
    """
    arr = _levels_array(levels_db)
    top = float(np.max(arr))
    if math.isinf(top) and top < 0:
        return -math.inf
    return top + 10.0 * math.log10(float(np.sum(np.power(10.0, (arr - top) / 10.0))))


def average_levels(levels_db: ArrayLike, weights: ArrayLike | None = None) -> float:
    """Energy (time) average of levels: 10 lg(sum w_i 10^(Li/10) / sum w_i).

    With the durations of the intervals as weights this is the Leq over the union of the
    intervals. Without weights all levels count equally.

    Parameters
    ----------
    levels_db : array_like
        Levels, dB.
    weights : array_like, optional
        Non-negative weights (e.g. durations in s), same length as ``levels_db``.
    """
    arr = _levels_array(levels_db)
    if weights is None:
        w = np.ones_like(arr)
    else:
        w = np.asarray(weights, dtype=np.float64)
        if w.shape != arr.shape:
            raise SettingsError(
                f"weights must match the levels, got {w.shape} weights for {arr.shape} levels"
            )
        if (w < 0).any() or not np.isfinite(w).all():
            raise SettingsError(f"weights must be finite and >= 0, got {weights!r}")
    total = float(np.sum(w))
    if total <= 0:
        raise SettingsError("weights must not all be zero")
    return combine_levels(arr[w > 0] + db_from_power_ratio(w[w > 0] / total))


def subtract_level(total_db: float, part_db: float) -> float:
    """Level that remains when ``part_db`` is removed from ``total_db`` (energy difference).

    Used to correct a measured level for residual (background) sound:
    10 lg(10^(Lt/10) - 10^(Lp/10)). Raises SettingsError when ``part_db >= total_db``,
    where the difference is not defined.
    """
    if not part_db < total_db:
        raise SettingsError(
            f"cannot remove {part_db!r} dB from {total_db!r} dB: the part must be lower"
        )
    if math.isinf(part_db):
        return float(total_db)
    return float(total_db + 10.0 * math.log10(1.0 - 10.0 ** ((part_db - total_db) / 10.0)))


def sel_from_leq(leq_db: ArrayLike, duration_s: ArrayLike) -> np.ndarray:
    """Sound exposure level LE = Leq,T + 10 lg(T / T0), T0 = 1 s (IEC 61672-1:2013)."""
    t = np.asarray(duration_s, dtype=np.float64)
    return np.asarray(leq_db, dtype=np.float64) + db_from_power_ratio(t / T0_S)


def leq_from_sel(sel_db: ArrayLike, duration_s: ArrayLike) -> np.ndarray:
    """Leq,T = LE - 10 lg(T / T0), T0 = 1 s."""
    t = np.asarray(duration_s, dtype=np.float64)
    return np.asarray(sel_db, dtype=np.float64) - db_from_power_ratio(t / T0_S)


def exceeded_levels(
    counts: np.ndarray, low_db: float, resolution_db: float, percents: Sequence[float]
) -> list[float]:
    """Percentile levels LN of histogram counts (:meth:`LevelHistogram.exceeded`'s arithmetic).

    Parameters
    ----------
    counts : ndarray of int, shape (nbins + 2,)
        Underflow count, the counts of ``nbins`` bins of ``resolution_db`` from ``low_db``
        up, overflow count.
    low_db, resolution_db : float
        Bottom of the first bin and bin width, dB.
    percents : sequence of float
        N in percent, each in [0, 100] (not checked here).

    Returns
    -------
    list of float
        Levels in dB: interpolated within the bin as if its values were evenly spread;
        ``-inf`` in the underflow bin, the top of the bins (``low_db + nbins *
        resolution_db``) in the overflow bin; NaN for an empty histogram.
    """
    from_bottom = np.cumsum(counts[::-1])  # from_bottom[j]: values in bins >= size - 1 - j
    size = counts.size
    total = int(from_bottom[-1])
    if total == 0:
        return [math.nan] * len(percents)
    nbins = size - 2
    high_db = low_db + nbins * resolution_db
    lowest = size - 1 - int(np.searchsorted(from_bottom, total, side="left"))  # occupied
    targets = [p / 100.0 * total for p in percents]  # values above the wanted level
    # the highest bin i whose values and those above it number more than the target
    firsts = np.searchsorted(from_bottom, targets, side="right").tolist()
    out = []
    for target, j in zip(targets, firsts, strict=True):
        i = max(size - 1 - j, lowest)
        above = int(from_bottom[size - 2 - i]) if i + 1 < size else 0
        inside = int(counts[i])
        frac = min(max((target - above) / inside, 0.0), 1.0) if inside > 0 else 0.0
        if i == 0:
            out.append(-math.inf)
        elif i == nbins + 1:
            out.append(high_db)
        else:
            out.append(low_db + (i - 1) * resolution_db + (1.0 - frac) * resolution_db)
    return out


class LevelHistogram:
    """Fine histogram of levels, for percentile levels LN in constant memory.

    Levels are counted in bins of ``resolution_db`` between ``low_db`` and ``high_db``;
    values below ``low_db`` (including -inf, digital silence) go to an underflow bin and
    values above ``high_db`` to an overflow bin, so no sample is lost from the count.

    Parameters
    ----------
    resolution_db : float
        Bin width, dB (default 0.01 dB).
    low_db, high_db : float
        Range of the bins, dB in the units the caller uses (e.g. dB re full scale).
    """

    def __init__(
        self, resolution_db: float = 0.01, low_db: float = -250.0, high_db: float = 100.0
    ) -> None:
        if not resolution_db > 0:
            raise SettingsError(f"resolution_db must be > 0, got {resolution_db!r}")
        if not high_db > low_db:
            raise SettingsError(f"high_db must exceed low_db, got {low_db!r}..{high_db!r}")
        self.resolution_db = float(resolution_db)
        self.low_db = float(low_db)
        self.nbins = int(math.ceil((high_db - low_db) / resolution_db))
        self.high_db = self.low_db + self.nbins * self.resolution_db
        # index 0: underflow, 1..nbins: bins, nbins+1: overflow
        self.counts = np.zeros(self.nbins + 2, dtype=np.int64)

    def copy_empty(self) -> LevelHistogram:
        """A new empty histogram with the same bins."""
        return LevelHistogram(self.resolution_db, self.low_db, self.high_db)

    @property
    def total(self) -> int:
        """Number of values counted."""
        return int(self.counts.sum())

    def add_levels(self, levels_db: np.ndarray) -> None:
        """Count levels (dB). NaN values are refused."""
        lv = np.asarray(levels_db, dtype=np.float64).ravel()
        if lv.size == 0:
            return
        if np.isnan(lv).any():
            raise SettingsError("NaN level given to the level histogram")
        pos = (lv - self.low_db) / self.resolution_db
        idx = np.clip(np.floor(pos), -1, self.nbins).astype(np.int64) + 1
        self.counts += np.bincount(idx, minlength=self.nbins + 2)

    def add_mean_squares(self, mean_square: np.ndarray, offset_db: float = 0.0) -> None:
        """Count the levels ``10 lg(mean_square) + offset_db``."""
        self.add_levels(db_from_power_ratio(mean_square) + offset_db)

    def merge(self, other: LevelHistogram) -> None:
        """Add the counts of a histogram with the same bins."""
        if (other.nbins, other.low_db, other.resolution_db) != (
            self.nbins,
            self.low_db,
            self.resolution_db,
        ):
            raise SettingsError("cannot merge level histograms with different bins")
        self.counts += other.counts

    def distribution(self, bin_width_db: float = 0.1, offset_db: float = 0.0) -> dict[str, Any]:
        """The counts regrouped into coarser bins, trimmed to the occupied range (plain data).

        Parameters
        ----------
        bin_width_db : float
            Width of the returned bins, dB: rounded to a whole number of the histogram's bins.
        offset_db : float
            Added to every level (e.g. 10 lg 2 + the calibration's full-scale level), dB.

        Returns
        -------
        dict
            ``bin_width_db``, ``first_bin_db`` (lower edge of the first bin, dB), ``counts``
            (list of int: bin i covers ``[first + i w, first + (i + 1) w)``), ``below`` and
            ``above`` (values under and over the histogram's range, e.g. digital silence).
        """
        factor = max(1, int(round(bin_width_db / self.resolution_db)))
        inner = self.counts[1:-1]
        occupied = np.flatnonzero(inner)
        out: dict[str, Any] = {"bin_width_db": factor * self.resolution_db,
                               "first_bin_db": math.nan, "counts": [],
                               "below": int(self.counts[0]), "above": int(self.counts[-1])}
        if occupied.size == 0:
            return out
        first = (int(occupied[0]) // factor) * factor
        last = (int(occupied[-1]) // factor + 1) * factor
        part = np.zeros(last - first, dtype=np.int64)
        stop = min(last, inner.size)
        part[: stop - first] = inner[first:stop]
        out["first_bin_db"] = self.low_db + first * self.resolution_db + offset_db
        out["counts"] = [int(c) for c in part.reshape(-1, factor).sum(axis=1)]
        return out

    def exceeded(self, percents: Sequence[float] | ArrayLike) -> np.ndarray:
        """Percentile levels LN: the level exceeded for N % of the counted values.

        Within a bin the values are taken as evenly spread, so the result is interpolated to
        a fraction of the bin width. L0 is the top of the highest occupied bin and L100 the
        bottom of the lowest. Values in the underflow bin give -inf, the overflow bin
        ``high_db`` (a documented bound). An empty histogram gives NaN.

        Parameters
        ----------
        percents : sequence of float
            N in percent, each in [0, 100].

        Returns
        -------
        numpy.ndarray
            Levels in dB, same order as ``percents``.
        """
        n = np.asarray(percents, dtype=np.float64)
        if ((n < 0) | (n > 100) | np.isnan(n)).any():
            raise SettingsError(f"percentiles must lie in [0, 100], got {percents!r}")
        levels = exceeded_levels(self.counts, self.low_db, self.resolution_db,
                                 np.atleast_1d(n).ravel().tolist())
        return np.array(levels).reshape(n.shape)
