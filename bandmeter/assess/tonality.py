"""One-third-octave screen for prominent tones.

Method (ISO 1996-2:2017 Annex K, informative, = 2007 edition Annex D; BS 4142:2014 Annex C;
method confirmed via the Irish EPA NG4 summary): a tone is present when the time-averaged
linear (unweighted, Z) level of a one-third-octave band exceeds the levels of BOTH adjacent
one-third-octave bands by at least a constant difference that depends on the frequency range.

Level differences used by default (REFERENCE_VALUES.md 8: "from memory, unconfirmed"; no
page of either standard with these numbers was found, so check them against the standard
you apply):

=================  ==========
band (nominal Hz)  difference
=================  ==========
25 - 125           15 dB
160 - 400          8 dB
500 - 10 000       5 dB
=================  ==========

Bands outside these ranges, edge bands (no adjacent band on one side) and bands whose level
or a neighbour's level is NaN are not assessed. This is a screen: it says where a tone may
be; the rating adjustment (if any) follows the applicable standard or regulation.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import asdict, dataclass, field
from itertools import pairwise
from typing import Any

from ..errors import SettingsError
from ..results import BandLevels, IntervalResult, LevelResult

#: (lowest nominal Hz, highest nominal Hz, required difference dB); ISO 1996-2:2017 Annex K /
#: BS 4142:2014 Annex C, values from memory, unconfirmed (REFERENCE_VALUES.md 8).
DEFAULT_CRITERIA: tuple[tuple[float, float, float], ...] = (
    (25.0, 125.0, 15.0),
    (160.0, 400.0, 8.0),
    (500.0, 10_000.0, 5.0),
)

#: Relative tolerance on a nominal frequency when matching a criterion range.
_RANGE_TOL = 0.01
#: Tolerance, in tenths of a decade, for reading a band spacing as whole one-third octaves.
_STEP_TOL = 0.15


@dataclass(frozen=True)
class Tone:
    """A one-third-octave band flagged as tonal.

    Attributes
    ----------
    nominal_hz : float
        Nominal mid-band frequency, Hz.
    level_db : float
        Band level, dB.
    lower_difference_db, upper_difference_db : float
        Band level minus the level of the band below / above, dB.
    required_db : float
        Difference required in this frequency range, dB.
    margin_db : float
        ``min(differences) - required``, dB (>= 0 for a flagged band).
    """

    nominal_hz: float
    level_db: float
    lower_difference_db: float
    upper_difference_db: float
    required_db: float
    margin_db: float

    def to_dict(self) -> dict[str, Any]:
        return asdict(self)


def required_difference(nominal_hz: float,
                        criteria: Sequence[tuple[float, float, float]] = DEFAULT_CRITERIA
                        ) -> float | None:
    """Required level difference (dB) for a band, or None outside every range."""
    for low, high, diff in criteria:
        if low * (1 - _RANGE_TOL) <= nominal_hz <= high * (1 + _RANGE_TOL):
            return float(diff)
    return None


def _as_pairs(bands: Sequence[Any], key: str) -> list[tuple[float, float, float]]:
    """(nominal_hz, spacing frequency, level) of each band, sorted by frequency."""
    out = []
    for band in bands:
        if isinstance(band, BandLevels):
            if key not in band.levels:
                raise SettingsError(
                    f"band {band.label} has no {key!r} level; available: {sorted(band.levels)}"
                )
            out.append((float(band.nominal_hz), float(band.exact_hz), float(band.levels[key])))
        else:
            try:
                f, level = band
                out.append((float(f), float(f), float(level)))
            except (TypeError, ValueError):
                raise SettingsError(
                    f"a band must be (nominal_hz, level_db) or BandLevels, got {band!r}"
                ) from None
    out.sort()
    return out


def _steps(freqs: Sequence[float]) -> list[int]:
    """Spacing of consecutive bands in one-third octaves (base-10: tenths of a decade).

    Raises SettingsError unless the bands are one-third-octave bands (possibly with gaps).
    """
    steps = []
    for a, b in pairwise(freqs):
        if not (a > 0 and b > a):
            raise SettingsError(f"band frequencies must be positive and distinct, got {a}, {b}")
        tenths = 10.0 * math.log10(b / a)
        k = round(tenths)
        if k < 1 or abs(tenths - k) > _STEP_TOL:
            raise SettingsError(
                f"bands {a:g} Hz and {b:g} Hz are not one-third-octave bands; the tone screen "
                "needs one-third-octave band levels (bands=3)"
            )
        steps.append(k)
    if steps and 1 not in steps:
        raise SettingsError(
            "the bands are not one-third-octave bands (no two adjacent bands); the tone "
            "screen needs one-third-octave band levels (bands=3)"
        )
    return steps


def screen_third_octaves(
    bands: Sequence[tuple[float, float]] | Sequence[BandLevels],
    criteria: Sequence[tuple[float, float, float]] = DEFAULT_CRITERIA,
    key: str = "LZeq",
) -> list[Tone]:
    """Bands whose level exceeds both adjacent one-third-octave bands by the required margin.

    Parameters
    ----------
    bands : sequence of (nominal_hz, level_db) or of BandLevels
        One-third-octave band levels (linear, Z-weighted per BS 4142 Annex C), dB; any order.
        Bands missing from the sequence break adjacency (their neighbours are not assessed).
    criteria : sequence of (low_hz, high_hz, difference_db)
        Required difference per nominal range (default :data:`DEFAULT_CRITERIA`).
    key : str
        Level key of BandLevels input (default ``"LZeq"``).

    Returns
    -------
    list of Tone
        Flagged bands, ascending frequency (``margin_db >= 0``).

    Raises
    ------
    SettingsError
        Bands that are not one-third-octave bands, or a missing ``key``.
    """
    rows = _as_pairs(bands, key)
    steps = _steps([r[1] for r in rows])
    tones = []
    for i in range(1, len(rows) - 1):
        if steps[i - 1] != 1 or steps[i] != 1:
            continue  # a neighbour is missing
        tone = _assess(rows[i - 1][2], rows[i], rows[i + 1][2], criteria)
        if tone is not None:
            tones.append(tone)
    return tones


def _assess(below: float, row: tuple[float, float, float], above: float,
            criteria: Sequence[tuple[float, float, float]]) -> Tone | None:
    nominal, _, level = row
    required = required_difference(nominal, criteria)
    if required is None or any(math.isnan(v) for v in (below, level, above)):
        return None
    lower, upper = level - below, level - above
    if math.isnan(lower) or math.isnan(upper):  # -inf minus -inf
        return None
    margin = min(lower, upper) - required
    if not margin >= 0:
        return None
    return Tone(nominal, level, lower, upper, required, margin)


@dataclass
class IntervalTones:
    """Tones found in one interval."""

    index: int
    start_s: float
    start_time: str | None
    tones: list[Tone]

    def to_dict(self) -> dict[str, Any]:
        return {"index": self.index, "start_s": self.start_s, "start_time": self.start_time,
                "tones": [t.to_dict() for t in self.tones]}


@dataclass
class ToneScreening:
    """Tone screen of a recording: the whole recording and each interval.

    Attributes
    ----------
    overall : list of Tone
        Tones in the whole-recording band levels.
    intervals : list of IntervalTones
        Only the intervals with at least one tone.
    assessed_intervals : int
        Intervals screened.
    """

    overall: list[Tone]
    intervals: list[IntervalTones] = field(default_factory=list)
    assessed_intervals: int = 0

    def band_counts(self) -> dict[float, int]:
        """Number of intervals with a tone in each band (nominal Hz), ascending."""
        counts: dict[float, int] = {}
        for iv in self.intervals:
            for t in iv.tones:
                counts[t.nominal_hz] = counts.get(t.nominal_hz, 0) + 1
        return dict(sorted(counts.items()))

    def to_dict(self) -> dict[str, Any]:
        return {"overall": [t.to_dict() for t in self.overall],
                "assessed_intervals": self.assessed_intervals,
                "intervals_with_tones": len(self.intervals),
                "band_counts": [{"nominal_hz": f, "intervals": n}
                                for f, n in self.band_counts().items()],
                "intervals": [iv.to_dict() for iv in self.intervals]}


def screen_intervals(items: Sequence[IntervalResult], key: str = "LZeq",
                     criteria: Sequence[tuple[float, float, float]] = DEFAULT_CRITERIA
                     ) -> tuple[list[IntervalTones], int]:
    """Screen the band levels of each interval; returns the intervals with tones and the count
    of intervals screened (intervals without bands are skipped)."""
    found, assessed = [], 0
    for iv in items:
        if not iv.bands:
            continue
        assessed += 1
        tones = screen_third_octaves(iv.bands, criteria, key)
        if tones:
            found.append(IntervalTones(iv.index, iv.start_s, iv.start_time, tones))
    return found, assessed


def screen_result(result: LevelResult, key: str = "LZeq",
                  criteria: Sequence[tuple[float, float, float]] = DEFAULT_CRITERIA
                  ) -> ToneScreening:
    """Tone screen of a level analysis made with one-third-octave bands.

    Parameters
    ----------
    result : LevelResult
        From an analysis with ``AnalysisSettings(bands=3)``.
    key : str
        Band level to use (default ``"LZeq"``; ``"LZeq_dBFS"`` for an uncalibrated result:
        only differences matter).

    Raises
    ------
    SettingsError
        No band analysis, or bands other than one-third octaves.
    """
    b = (result.settings or {}).get("bands")
    if b is None or not result.overall.bands:
        raise SettingsError(f"{result.file}: no band analysis; the tone screen needs bands=3")
    if b != 3:
        raise SettingsError(
            f"{result.file}: 1/{b}-octave bands; the tone screen needs one-third-octave bands"
        )
    overall = screen_third_octaves(result.overall.bands, criteria, key)
    found, assessed = screen_intervals(result.intervals, key, criteria)
    return ToneScreening(overall, found, assessed)
