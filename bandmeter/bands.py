"""Base-10 fractional-octave band definitions (IEC 61260-1:2014).

A band is identified by its bandwidth designator ``b`` (1 = octave, 3 = one-third octave, 6, 12,
24) and an integer band index ``x`` (``x = 0`` is the band at, or just above, 1 kHz). All
frequencies are in Hz.

Exact frequencies (IEC 61260-1:2014 5.2-5.4, eqs. (2)-(5); the equation numbers are quoted from
memory, see REFERENCE_VALUES.md 5.1):

- octave frequency ratio ``G = 10**(3/10)`` (base-10 system), reference frequency ``fr = 1000 Hz``;
- exact mid-band frequency ``fm = fr * G**(x/b)`` for odd ``b`` and
  ``fm = fr * G**((2x + 1)/(2b))`` for even ``b``;
- band-edge frequencies ``f1 = fm * G**(-1/(2b))`` and ``f2 = fm * G**(1/(2b))``.

Nominal mid-band frequencies, used for labels only (never for computation):

- ``b = 1, 3``: the ISO 266 R10 preferred numbers 1, 1.25, 1.6, 2, 2.5, 3.15, 4, 5, 6.3, 8 per
  decade (IEC 61260-1:2014 Annex E, ISO 266); octave bands are every third one-third-octave band
  (31.5, 63, 125, ... 16000 Hz). The series continues unchanged below 10 Hz and above 20 kHz.
- ``b = 6, 12, 24``: the exact frequency rounded to three significant figures. From memory:
  IEC 61260-1 Annex E gives a rounding rule for these designators; this module uses its own
  documented convention (3 significant figures), which keeps every label unique because
  adjacent 1/24-octave bands differ by 2.9 %.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

from bandmeter.errors import SettingsError

__all__ = [
    "G",
    "FR_HZ",
    "VALID_B",
    "MIN_FREQUENCY_HZ",
    "MAX_FREQUENCY_HZ",
    "Band",
    "exact_mid_hz",
    "make_band",
    "band_set",
]

#: Octave frequency ratio of the base-10 system (IEC 61260-1:2014 5.2).
G: float = 10.0 ** (3.0 / 10.0)
#: Reference frequency in Hz (IEC 61260-1:2014 5.3).
FR_HZ: float = 1000.0
#: Supported bandwidth designators (1/b octave).
VALID_B: tuple[int, ...] = (1, 3, 6, 12, 24)
#: Lowest mid-band frequency accepted by :func:`band_set`, Hz (vibration and infrasound work).
MIN_FREQUENCY_HZ: float = 0.5
#: Highest mid-band frequency accepted by :func:`band_set`, Hz.
MAX_FREQUENCY_HZ: float = 100_000.0

# ISO 266 R10 mantissas times 100 (exact integers, so nominal values carry no rounding noise).
_R10_CENTI = (100, 125, 160, 200, 250, 315, 400, 500, 630, 800)


@dataclass(frozen=True)
class Band:
    """One fractional-octave band.

    Attributes
    ----------
    b : int
        Bandwidth designator: the band is 1/b octave wide.
    index : int
        Band index ``x`` of IEC 61260-1 eqs. (2)/(3).
    exact_hz : float
        Exact mid-band frequency, Hz.
    lower_hz, upper_hz : float
        Band-edge frequencies f1 and f2, Hz.
    nominal_hz : float
        Nominal mid-band frequency, Hz (ISO 266 for b = 1, 3; 3 significant figures otherwise).
    label : str
        Compact label of the nominal frequency ("31.5", "1k", "12.5k"), unique within a ``b``.
    """

    b: int
    index: int
    exact_hz: float
    lower_hz: float
    upper_hz: float
    nominal_hz: float
    label: str


def _check_b(b: object) -> int:
    if isinstance(b, bool) or not isinstance(b, int) or b not in VALID_B:
        raise SettingsError(f"bandwidth designator b must be one of {VALID_B}, got {b!r}")
    return b


def _exponent(b: int, x: int) -> float:
    """Exponent of G for band x: x/b (odd b) or (2x+1)/(2b) (even b)."""
    if b % 2:
        return x / b
    return (2 * x + 1) / (2 * b)


def exact_mid_hz(b: int, x: int) -> float:
    """Exact mid-band frequency of band ``x`` for designator ``b``, Hz.

    IEC 61260-1:2014 eq. (2) (odd b) and eq. (3) (even b), quoted from memory.
    """
    b = _check_b(b)
    return FR_HZ * G ** _exponent(b, x)


def _r10_nominal(third_index: int) -> float:
    """ISO 266 R10 nominal frequency of one-third-octave band ``third_index``, Hz."""
    decade, step = divmod(third_index, 10)
    exponent = decade + 1  # x = 0 -> 100 (centi) * 10**1 = 1000 Hz
    centi = _R10_CENTI[step]
    if exponent >= 0:
        return float(centi * 10**exponent)
    return centi / 10 ** (-exponent)


def _round_sig(value: float, digits: int = 3) -> float:
    exponent = math.floor(math.log10(value)) - (digits - 1)
    if exponent >= 0:
        return float(round(value / 10**exponent) * 10**exponent)
    return round(value * 10 ** (-exponent)) / 10 ** (-exponent)


def _nominal_hz(b: int, x: int, exact: float) -> float:
    if b == 3:
        return _r10_nominal(x)
    if b == 1:
        return _r10_nominal(3 * x)
    return _round_sig(exact, 3)


def _label(nominal: float) -> str:
    if nominal >= 1000.0:
        return f"{nominal / 1000.0:g}k"
    return f"{nominal:g}"


def make_band(b: int, x: int) -> Band:
    """Return the :class:`Band` with designator ``b`` and index ``x``."""
    b = _check_b(b)
    exact = exact_mid_hz(b, x)
    half = G ** (1.0 / (2 * b))
    nominal = _nominal_hz(b, x, exact)
    return Band(
        b=b,
        index=x,
        exact_hz=exact,
        lower_hz=exact / half,
        upper_hz=exact * half,
        nominal_hz=nominal,
        label=_label(nominal),
    )


def _index_near(b: int, f_hz: float) -> int:
    """Band index whose exact mid-band frequency is closest to ``f_hz`` (approximately)."""
    octaves = math.log(f_hz / FR_HZ) / math.log(G)
    if b % 2:
        return round(octaves * b)
    return round((2 * b * octaves - 1) / 2)


def _check_frequency(name: str, value: object) -> float:
    if isinstance(value, bool) or not isinstance(value, (int, float)):
        raise SettingsError(f"{name} must be a number in Hz, got {value!r}")
    f = float(value)
    if not math.isfinite(f) or not MIN_FREQUENCY_HZ <= f <= MAX_FREQUENCY_HZ:
        raise SettingsError(
            f"{name} must be between {MIN_FREQUENCY_HZ:g} and {MAX_FREQUENCY_HZ:g} Hz, "
            f"got {value!r}"
        )
    return f


def _default_indices(b: int) -> range:
    if b == 3:
        return range(-17, 14)  # nominal 20 Hz .. 20 kHz, 31 bands
    if b == 1:
        return range(-5, 5)  # nominal 31.5 Hz .. 16 kHz, 10 bands
    lo = _index_near(b, 20.0) - 1
    hi = _index_near(b, 20_000.0) + 1
    tol = 1e-9
    keep = [
        x
        for x in range(lo, hi + 1)
        if 20.0 * (1 - tol) <= exact_mid_hz(b, x) <= 20_000.0 * (1 + tol)
    ]
    return range(keep[0], keep[-1] + 1)


def band_set(b: int, fmin_hz: float | None = None, fmax_hz: float | None = None) -> list[Band]:
    """Fractional-octave bands from ``fmin_hz`` to ``fmax_hz`` inclusive, ascending.

    Parameters
    ----------
    b : int
        Bandwidth designator, one of 1, 3, 6, 12, 24.
    fmin_hz, fmax_hz : float, optional
        Mid-band frequencies (nominal or exact, Hz) of the lowest and highest band wanted. A
        band is included when ``fmin_hz / G**(1/(2b)) < exact_hz < fmax_hz * G**(1/(2b))``, so
        either the nominal or the exact value selects the same band; a value lying exactly on a
        band edge is ambiguous. Both must lie in [0.5 Hz, 100 kHz].
        Defaults: b = 3: 20 Hz .. 20 kHz (31 bands); b = 1: 31.5 Hz .. 16 kHz (10 bands);
        b = 6, 12, 24: the bands whose exact mid-band frequency lies in [20 Hz, 20 kHz]. When
        only one limit is given, the other keeps its default.

    Returns
    -------
    list of Band

    Raises
    ------
    SettingsError
        For an unsupported ``b``, a limit that is not a number in range, ``fmin_hz > fmax_hz``
        or a range that contains no band.
    """
    b = _check_b(b)
    default = _default_indices(b)
    lo_f = None if fmin_hz is None else _check_frequency("fmin_hz", fmin_hz)
    hi_f = None if fmax_hz is None else _check_frequency("fmax_hz", fmax_hz)
    if lo_f is not None and hi_f is not None and lo_f > hi_f:
        raise SettingsError(f"fmin_hz must not exceed fmax_hz, got {fmin_hz!r} > {fmax_hz!r}")
    half = G ** (1.0 / (2 * b))
    x_lo = default.start if lo_f is None else _index_near(b, lo_f) - 2
    x_hi = default.stop - 1 if hi_f is None else _index_near(b, hi_f) + 2
    bands = []
    for x in range(x_lo, x_hi + 1):
        exact = exact_mid_hz(b, x)
        if lo_f is None and x < default.start:
            continue
        if hi_f is None and x > default.stop - 1:
            continue
        if lo_f is not None and not exact > lo_f / half:
            continue
        if hi_f is not None and not exact < hi_f * half:
            continue
        bands.append(make_band(b, x))
    if not bands:
        raise SettingsError(
            f"no 1/{b}-octave band lies between fmin_hz={fmin_hz!r} and fmax_hz={fmax_hz!r}"
        )
    return bands
