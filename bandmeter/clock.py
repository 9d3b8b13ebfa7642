"""Where a recording's start time comes from, and where clock-aligned intervals begin.

A recording's start time (the clock time of its first sample) comes from one of three sources:

- ``"bext"``: the broadcast-WAV ``bext`` chunk (EBU Tech 3285) that field recorders write,
  read with ``wavinfo``. OriginationDate (``yyyy-mm-dd``) gives the day; TimeReference (a
  64-bit count of samples since midnight) gives the time with sub-second precision;
  OriginationTime (``hh:mm:ss``) is the fallback and the cross-check.
- ``"name"``: a date and time in the file name, read with a strftime-style pattern such as
  ``"MP2_%Y%m%d_%H%M%S"``.
- ``"option"``: a time given explicitly, ISO 8601 with a UTC offset.

bext and name times carry no time zone: they are the recorder's local clock. They are read in
the zone given by the caller (an offset or an IANA name); without one they are taken as UTC
and the returned :class:`StartTime` carries a warning.

:func:`aligned_first_boundary` turns a start time into the sample offset of the first
clock-aligned interval boundary (for :class:`bandmeter.intervals.IntervalPlan`), and
:func:`contiguous_runs` groups recordings that continue each other without a gap (a recorder
that splits a long survey into files).
"""

from __future__ import annotations

import math
import os
import re
from collections.abc import Sequence
from dataclasses import dataclass
from datetime import date, datetime, time, timedelta, timezone, tzinfo
from fractions import Fraction
from zoneinfo import ZoneInfo, ZoneInfoNotFoundError

from wavinfo import WavInfoReader
from wavinfo.wave_bext_reader import WavBextReader

from .audio import check_readable_file
from .errors import AudioError, SettingsError

#: Start-time sources, in the default order of preference.
SOURCES = ("bext", "name", "option")

#: One day in seconds.
DAY_S = 86400

#: Largest disagreement (s) between bext TimeReference and OriginationTime still taken as
#: consistent. OriginationTime has whole seconds, so an exact recorder is within [0, 1) s.
BEXT_CONSISTENCY_S = 1

_UTC_WARNING = "{what} time has no time zone; assumed UTC (give --timezone)"
_RIFF_MAGIC = (b"RIFF", b"RF64", b"BW64")
_ISO_EXAMPLE = "2026-05-14T22:00:00+01:00"
_TZ_HELP = "use an offset such as +01:00 or -0530, Z or UTC, or an IANA name such as Europe/Paris"


@dataclass(frozen=True)
class StartTime:
    """The clock time of a recording's first sample and where it was read.

    Attributes
    ----------
    when : datetime
        Time of the first sample, timezone-aware, microsecond resolution.
    source : str
        ``"bext"``, ``"name"`` or ``"option"``.
    detail : str
        Human-readable origin, e.g. ``"bext OriginationDate/TimeReference"`` or
        ``"name pattern MP2_%Y%m%d_%H%M%S"``.
    warnings : tuple of str
        Doubts about the time (no time zone, inconsistent bext fields, DST ambiguity).
    """

    when: datetime
    source: str
    detail: str
    warnings: tuple[str, ...] = ()

    def to_dict(self) -> dict[str, object]:
        """The start time as a JSON-ready dictionary (``when`` in ISO 8601)."""
        return {
            "when": self.when.isoformat(),
            "source": self.source,
            "detail": self.detail,
            "warnings": list(self.warnings),
        }


# --------------------------------------------------------------------------- time zones


_OFFSET_RE = re.compile(r"^([+-])(\d{1,2})(?::?(\d{2}))?$")


def parse_timezone(text: str) -> tzinfo:
    """Parse a time zone: a UTC offset, ``Z``/``UTC``, or an IANA name.

    Parameters
    ----------
    text : str
        ``"+01:00"``, ``"-0530"``, ``"+02"``, ``"Z"``, ``"UTC"`` or an IANA zone name such as
        ``"Europe/Paris"`` (via :mod:`zoneinfo`; IANA zones follow daylight saving time).

    Returns
    -------
    datetime.tzinfo
        A fixed-offset :class:`datetime.timezone` or a :class:`zoneinfo.ZoneInfo`.

    Raises
    ------
    SettingsError
        Anything else, or an offset of 24 h or more.
    """
    s = str(text).strip()
    if s.upper() in ("Z", "UTC"):
        return timezone.utc
    m = _OFFSET_RE.match(s)
    if m:
        sign, hours, minutes = m.group(1), int(m.group(2)), int(m.group(3) or 0)
        if hours > 23 or minutes > 59:
            raise SettingsError(f"time zone offset {text!r} out of range (-23:59 to +23:59)")
        offset = timedelta(hours=hours, minutes=minutes)
        return timezone(-offset if sign == "-" else offset)
    if not s or s.startswith(("+", "-")) or s[0].isdigit():
        raise SettingsError(f"cannot read time zone {text!r}; {_TZ_HELP}")
    try:
        return ZoneInfo(s)
    except (ZoneInfoNotFoundError, ValueError, OSError):
        raise SettingsError(f"unknown time zone {text!r}; {_TZ_HELP}") from None


def parse_start_option(text: str) -> datetime:
    """Parse an explicit start time, ISO 8601 with a UTC offset.

    Parameters
    ----------
    text : str
        E.g. ``"2026-05-14T22:00:00+01:00"``, ``"2026-05-14 21:00:00.250Z"``. A trailing
        ``Z`` means UTC.

    Returns
    -------
    datetime
        Timezone-aware (fixed offset).

    Raises
    ------
    SettingsError
        Unreadable text, or a time without an offset (its zone would be a guess).
    """
    s = str(text).strip()
    if s[-1:] in ("Z", "z"):
        s = s[:-1] + "+00:00"  # python 3.10's fromisoformat does not read "Z"
    try:
        when = datetime.fromisoformat(s)
    except ValueError:
        raise SettingsError(
            f"cannot read start time {text!r}; use ISO 8601 with a UTC offset, "
            f"e.g. {_ISO_EXAMPLE}"
        ) from None
    if when.utcoffset() is None:
        raise SettingsError(
            f"start time {text!r} has no UTC offset; add one, e.g. {_ISO_EXAMPLE} (Z for UTC)"
        )
    return when


def _format_offset(when: datetime) -> str:
    offset = when.utcoffset() or timedelta(0)
    sign = "-" if offset < timedelta(0) else "+"
    minutes = abs(offset) // timedelta(minutes=1)
    return f"{sign}{minutes // 60:02d}:{minutes % 60:02d}"


def _localize(naive: datetime, tz: tzinfo | None, what: str) -> tuple[datetime, list[str]]:
    """Attach the recorder's time zone to a wall-clock reading.

    Without a zone the reading is taken as UTC (with a warning). A reading that falls in a
    daylight-saving change of an IANA zone is kept with ``fold=0`` (an ambiguous time is the
    first occurrence; a time in the gap is read with the offset before the change), with a
    warning.
    """
    if tz is None:
        return naive.replace(tzinfo=timezone.utc), [_UTC_WARNING.format(what=what)]
    first = naive.replace(tzinfo=tz, fold=0)
    second = naive.replace(tzinfo=tz, fold=1)
    if first.utcoffset() == second.utcoffset():
        return first, []
    round_trip = first.astimezone(timezone.utc).astimezone(tz).replace(tzinfo=None)
    stamp = naive.isoformat(sep=" ")
    if round_trip != naive:
        note = (
            f"{what} time {stamp} does not exist in {tz} (clock change); read with the "
            f"offset before the change ({_format_offset(first)})"
        )
    else:
        note = (
            f"{what} time {stamp} occurs twice in {tz} (clock change); took the first "
            f"occurrence ({_format_offset(first)})"
        )
    return first, [note]


# --------------------------------------------------------------------------- bext


_BEXT_DATE_RE = re.compile(r"^(\d{4})\D(\d{2})\D(\d{2})$")
_BEXT_TIME_RE = re.compile(r"^(\d{2})\D(\d{2})\D(\d{2})$")


def _read_bext(path: str) -> tuple[WavBextReader, int] | None:
    """The wavinfo bext reader and sample rate of a RIFF/RF64 file, or None without bext."""
    check_readable_file(path)
    with open(path, "rb") as handle:
        magic = handle.read(4)
    if magic not in _RIFF_MAGIC:
        return None  # FLAC, W64, AIFF...: no RIFF bext chunk to read
    try:
        # latin_1: a non-ASCII Description must not stop us from reading the date and time.
        info = WavInfoReader(path, bext_encoding="latin_1")
    except Exception as exc:  # wavinfo raises EOFError, AssertionError, struct.error...
        raise AudioError(
            f"{path}: cannot read the WAV chunks ({type(exc).__name__}: {exc})"
        ) from exc
    if info.bext is None or info.fmt is None:
        return None
    return info.bext, int(info.fmt.sample_rate)


def _parse_bext_date(path: str, text: str) -> date | None:
    s = text.strip()
    if not s.strip("0-_:. "):
        return None  # empty or all zeros: the recorder did not set the date
    m = _BEXT_DATE_RE.match(s)
    try:
        if not m:
            raise ValueError
        return date(int(m.group(1)), int(m.group(2)), int(m.group(3)))
    except ValueError:
        raise AudioError(
            f"{path}: cannot read bext OriginationDate {text!r} (expected yyyy-mm-dd)"
        ) from None


def _parse_bext_time(text: str) -> int | None:
    """OriginationTime in seconds since midnight, or None when empty or unreadable."""
    m = _BEXT_TIME_RE.match(text.strip())
    if not m:
        return None
    h, mi, s = (int(g) for g in m.groups())
    if h > 23 or mi > 59 or s > 59:
        return None
    return h * 3600 + mi * 60 + s


def _clock(seconds: Fraction | int) -> str:
    """Seconds since midnight as ``hh:mm:ss.ffffff``."""
    us = round(Fraction(seconds) * 1_000_000)
    return (datetime.min + timedelta(microseconds=us)).strftime("%H:%M:%S.%f")


def _bext_seconds(
    path: str, ref: int, fs: int, ot: int | None, ot_text: str
) -> tuple[Fraction, str, list[str]]:
    """Seconds from midnight of OriginationDate to the first sample, detail and warnings."""
    if ref == 0:
        if ot is None:
            raise AudioError(
                f"{path}: bext OriginationTime {ot_text!r} is unreadable and TimeReference is 0"
            )
        return Fraction(ot), "bext OriginationDate/OriginationTime", []
    t_ref = Fraction(ref, fs)
    if ot is None:
        if t_ref >= DAY_S:
            raise AudioError(
                f"{path}: bext TimeReference {ref} is more than 24 h at {fs} Hz and "
                f"OriginationTime {ot_text!r} is unreadable"
            )
        note = f"bext OriginationTime {ot_text!r} is empty or unreadable; used TimeReference"
        return t_ref, "bext OriginationDate/TimeReference", [note]
    # Signed difference on the 24-h circle, so a start just after midnight that the
    # recorder dated before midnight (or the reverse) still counts as consistent.
    diff = (t_ref - ot) % DAY_S
    if diff > DAY_S / 2:
        diff -= DAY_S
    if t_ref < DAY_S and abs(diff) <= BEXT_CONSISTENCY_S:
        return ot + diff, "bext OriginationDate/TimeReference", []
    if t_ref >= DAY_S:
        note = (
            f"bext TimeReference {ref} is {float(t_ref) / 3600:.6g} h at {fs} Hz, more than "
            f"24 h (not a time of day); used OriginationTime {ot_text.strip()}"
        )
    else:
        note = (
            f"bext TimeReference {ref} ({_clock(t_ref)} at {fs} Hz) disagrees with "
            f"OriginationTime {ot_text.strip()} by more than {BEXT_CONSISTENCY_S} s; "
            f"used OriginationTime"
        )
    return Fraction(ot), "bext OriginationDate/OriginationTime", [note]


def start_from_bext(path: str | os.PathLike[str], tz: tzinfo | None) -> StartTime | None:
    """Start time from a broadcast-WAV ``bext`` chunk (EBU Tech 3285).

    Rule: the day is OriginationDate. When TimeReference (samples since midnight at the
    file's sample rate) is nonzero and agrees with OriginationTime within 1 s, the start is
    ``midnight + TimeReference / fs`` (sub-second). The two are compared on the 24-h circle:
    when they straddle midnight, the start is the TimeReference time next to
    OriginationDate + OriginationTime (possibly the day before or after). When they disagree
    by more than 1 s, or TimeReference is 24 h or more (a timecode rather than a time of
    day), OriginationTime is used and a warning says so. TimeReference 0 means
    OriginationTime. An empty or unreadable OriginationTime with a nonzero TimeReference
    uses TimeReference, with a warning.

    Parameters
    ----------
    path : str or path-like
        WAV, BWF or RF64 file. Other containers (FLAC, W64, AIFF) have no bext: None.
    tz : datetime.tzinfo or None
        Zone of the recorder's clock. None: UTC, with a warning.

    Returns
    -------
    StartTime or None
        None when the file has no bext chunk, an empty (or all-zero) OriginationDate, or
        an empty OriginationTime with TimeReference 0.

    Raises
    ------
    AudioError
        Missing or unreadable file, unreadable chunks, an OriginationDate that is not a date,
        or no usable time (TimeReference 0 and OriginationTime not a time).
    """
    spath = os.fspath(path)
    found = _read_bext(spath)
    if found is None:
        return None
    bext, fs = found
    day = _parse_bext_date(spath, bext.originator_date)
    if day is None:
        return None
    ot_text = bext.originator_time
    if not ot_text.strip() and not bext.time_reference:
        return None  # a date without a time of day
    seconds, detail, warnings = _bext_seconds(
        spath, int(bext.time_reference), fs, _parse_bext_time(ot_text), ot_text
    )
    naive = datetime.combine(day, time()) + timedelta(microseconds=round(seconds * 1_000_000))
    when, zone_notes = _localize(naive, tz, "bext")
    return StartTime(when, "bext", detail, tuple(warnings + zone_notes))


# --------------------------------------------------------------------------- file names


#: strftime codes understood in name patterns, with the regex of what they match.
_NAME_CODES = {
    "Y": r"\d{4}",
    "y": r"\d{2}",
    "m": r"\d{2}",
    "d": r"\d{2}",
    "j": r"\d{3}",
    "H": r"\d{2}",
    "I": r"\d{2}",
    "M": r"\d{2}",
    "S": r"\d{2}",
    "f": r"\d{1,6}",
    "b": r"(?i:[a-z]{3})",
    "B": r"(?i:[a-z]{3,9})",
    "p": r"(?i:am|pm)",
    "z": r"(?:Z|[+-]\d{2}:?\d{2})",
}
_NUMERIC_CODES = set("YymdjHIMSf")


def _split_pattern(pattern: str) -> list[tuple[str, str]]:
    """Cut a name pattern into ``("code", letter)`` and ``("text", literal)`` pieces."""
    pieces: list[tuple[str, str]] = []
    i = 0
    while i < len(pattern):
        if pattern[i] != "%":
            j = pattern.find("%", i)
            j = len(pattern) if j < 0 else j
            pieces.append(("text", pattern[i:j]))
            i = j
            continue
        code = pattern[i + 1 : i + 2]
        if code == "%":
            pieces.append(("text", "%"))
        elif code in _NAME_CODES:
            pieces.append(("code", code))
        else:
            raise SettingsError(
                f"name pattern {pattern!r}: unsupported code {'%' + code!r}; use "
                + " ".join("%" + c for c in _NAME_CODES)
            )
        i += 2
    return pieces


def _check_pattern_codes(pattern: str, codes: list[str]) -> None:
    repeated = sorted({c for c in codes if codes.count(c) > 1})
    if repeated:
        raise SettingsError(
            f"name pattern {pattern!r} repeats {' '.join('%' + c for c in repeated)}"
        )
    has = set(codes)
    year = bool(has & {"Y", "y"})
    day = "j" in has or ("d" in has and bool(has & {"m", "b", "B"}))
    if not (year and day):
        raise SettingsError(
            f"name pattern {pattern!r} must give a year (%Y or %y) and a day "
            f"(%m%d, %b%d or %j)"
        )
    if ("I" in has) != ("p" in has):
        raise SettingsError(f"name pattern {pattern!r}: %I needs %p (AM/PM) and the reverse")


def _name_regex(pattern: str) -> tuple[re.Pattern[str], set[str]]:
    """Compile a strftime-style name pattern into a regex; literal text matches literally.

    Returns the regex (a lookahead, so overlapping candidates are all found) and the set of
    code letters in the pattern.
    """
    if not pattern:
        raise SettingsError("name pattern is empty; use e.g. MP2_%Y%m%d_%H%M%S")
    if "/" in pattern or os.sep in pattern:
        raise SettingsError(
            f"name pattern {pattern!r} contains a folder separator; it is matched against "
            f"the file name only"
        )
    pieces = _split_pattern(pattern)
    codes = [v for k, v in pieces if k == "code"]
    _check_pattern_codes(pattern, codes)
    body = "".join(_NAME_CODES[v] if k == "code" else re.escape(v) for k, v in pieces)
    # A pattern that starts or ends with a number must not start or end inside a longer one.
    if pieces[0][0] == "code" and pieces[0][1] in _NUMERIC_CODES:
        body = r"(?<!\d)" + body
    if pieces[-1][0] == "code" and pieces[-1][1] in _NUMERIC_CODES:
        body += r"(?!\d)"
    return re.compile(f"(?=({body}))"), set(codes)


def start_from_name(
    path: str | os.PathLike[str], pattern: str, tz: tzinfo | None
) -> StartTime | None:
    """Start time read from the file name with a strftime-style pattern.

    The pattern is searched in the file name (folders removed), so it may include the
    extension or not and the name may carry text before or after it. Codes: ``%Y %y %m %d
    %j %H %I %p %M %S %f %b %B %z %%`` (fixed widths as recorders write them: ``%m`` is two
    digits, ``%f`` 1 to 6 digits); all other text matches literally (``rec(1)_%Y`` needs
    the parentheses). The pattern must give a year and a day; without an hour the time is
    midnight, with a warning.

    Parameters
    ----------
    path : str or path-like
        Recording file (it need not exist).
    pattern : str
        E.g. ``"MP2_%Y%m%d_%H%M%S"``.
    tz : datetime.tzinfo or None
        Zone of the recorder's clock. With ``%z`` in the pattern the zone comes from the
        name instead (a warning notes a differing ``tz``). None without ``%z``: UTC, with a
        warning.

    Returns
    -------
    StartTime or None
        None when the name does not match the pattern.

    Raises
    ------
    SettingsError
        A malformed pattern (unknown or repeated code, no year or day, %I without %p).
    AudioError
        The name matches the pattern's shape but holds no valid date (e.g. month 13).
    """
    regex, codes = _name_regex(pattern)
    name = os.path.basename(os.fspath(path))
    candidates = [m.group(1) for m in regex.finditer(name)]
    if not candidates:
        return None
    for text in candidates:
        try:
            parsed = datetime.strptime(text, pattern)
        except ValueError:
            continue
        break
    else:
        raise AudioError(
            f"{name}: {candidates[0]!r} matches name pattern {pattern!r} but is not a valid "
            f"date and time"
        )
    detail = f"name pattern {pattern}"
    warnings: list[str] = []
    if not codes & {"H", "I"}:
        warnings.append(f"name pattern {pattern!r} gives no time of day; assumed 00:00:00")
    if parsed.tzinfo is not None:
        if tz is not None and parsed.utcoffset() != parsed.astimezone(tz).utcoffset():
            warnings.append(
                f"time zone {_format_offset(parsed)} from the file name used instead of {tz}"
            )
        return StartTime(parsed, "name", detail, tuple(warnings))
    when, notes = _localize(parsed, tz, "name")
    return StartTime(when, "name", detail, tuple(warnings + notes))


# --------------------------------------------------------------------------- choice


def _start_from_option(option: str | datetime) -> StartTime:
    if isinstance(option, datetime):
        if option.utcoffset() is None:
            raise SettingsError(
                f"start time {option.isoformat()} has no UTC offset; give an aware datetime"
            )
        when = option
    else:
        when = parse_start_option(option)
    return StartTime(when, "option", f"start option {when.isoformat()}")


def resolve_start(
    path: str | os.PathLike[str],
    *,
    name_pattern: str | None = None,
    option: str | datetime | None = None,
    tz: tzinfo | None = None,
    prefer: tuple[str, ...] = SOURCES,
) -> StartTime | None:
    """Start time from the first source, in ``prefer`` order, that gives one.

    The default order trusts what the recorder wrote: the bext chunk, then the file name,
    then an explicit option (a fallback for files without metadata). A start time the user
    gives explicitly for one file should win: callers then pass
    ``prefer=("option", "bext", "name")``.

    Parameters
    ----------
    path : str or path-like
        Recording file.
    name_pattern : str, optional
        strftime-style pattern for :func:`start_from_name`; the ``"name"`` source is skipped
        without one.
    option : str or datetime, optional
        Explicit start (ISO 8601 with offset, or an aware datetime); the ``"option"`` source
        is skipped without one. Its own offset is kept (``tz`` does not apply).
    tz : datetime.tzinfo, optional
        Zone of the recorder's clock for bext and name times (None: UTC, with a warning).
    prefer : tuple of str
        Sources to try, among ``"bext"``, ``"name"``, ``"option"``; sources left out are
        not tried.

    Returns
    -------
    StartTime or None
        None when no source gives a time.

    Raises
    ------
    SettingsError
        Unknown source name, bad pattern or unreadable option.
    AudioError
        Unreadable file or bext chunk (see :func:`start_from_bext`).
    """
    unknown = [s for s in prefer if s not in SOURCES]
    if unknown:
        raise SettingsError(
            f"unknown start-time source {unknown[0]!r}; use {', '.join(SOURCES)}"
        )
    for source in prefer:
        if source == "bext":
            found = start_from_bext(path, tz)
        elif source == "name":
            found = None if name_pattern is None else start_from_name(path, name_pattern, tz)
        else:
            found = None if option is None else _start_from_option(option)
        if found is not None:
            return found
    return None


# --------------------------------------------------------------------------- alignment


def _exact(value: float, what: str) -> Fraction:
    """A positive finite number as the fraction of its shortest decimal form (0.1 -> 1/10)."""
    if isinstance(value, bool) or not isinstance(value, (int, float, Fraction)):
        raise SettingsError(f"{what} must be a number, got {value!r}")
    if isinstance(value, float) and not math.isfinite(value):
        raise SettingsError(f"{what} must be positive and finite, got {value!r}")
    exact = Fraction(repr(value)) if isinstance(value, float) else Fraction(value)
    if exact <= 0:
        raise SettingsError(f"{what} must be positive and finite, got {value!r}")
    return exact


def aligned_first_boundary(start: datetime, interval_s: float, fs: float) -> int:
    """Samples from the first sample to the first clock-aligned interval boundary.

    Boundaries fall where the local wall-clock time of ``start`` (in its own tzinfo) since
    local midnight is a whole multiple of ``interval_s``: 15 min gives :00, :15, :30, :45,
    1 h the full hours, 1 s whole seconds. The wall clock is used, not elapsed time, so on a
    daylight-saving day boundaries still fall on :00 (clock changes shift by whole hours or
    half hours, so later boundaries of intervals dividing the shift stay aligned too).
    Arithmetic is exact (integer microseconds, fractions), so 44.1 kHz and 48 kHz give
    exact sample counts.

    Parameters
    ----------
    start : datetime
        Clock time of the first sample (aware; a naive one is read as wall-clock time).
    interval_s : float
        Interval length in seconds; must divide 24 h evenly.
    fs : float
        Sampling rate in Hz.

    Returns
    -------
    int
        0 when the start lies on a boundary (within half a sample), otherwise
        ``round(seconds_to_next_boundary * fs)``, in ``1 .. interval_samples - 1`` where
        ``interval_samples = round(interval_s * fs)``.

    Raises
    ------
    SettingsError
        Non-positive values, or an interval that does not divide 24 h (e.g. 7 min).
    """
    interval = _exact(interval_s, "interval")
    rate = _exact(fs, "sample rate")
    if interval > DAY_S or (DAY_S / interval).denominator != 1:
        raise SettingsError(
            f"interval {float(interval):g} s does not divide 24 h evenly; clock alignment "
            f"needs e.g. 1 s, 1 min, 5 min, 10 min, 15 min, 30 min or 1 h"
        )
    wall = start.time()
    since_midnight = Fraction(
        ((wall.hour * 60 + wall.minute) * 60 + wall.second) * 1_000_000 + wall.microsecond,
        1_000_000,
    )
    to_next = (-since_midnight) % interval
    samples = math.floor(to_next * rate + Fraction(1, 2))
    interval_samples = max(1, math.floor(interval * rate + Fraction(1, 2)))
    return samples if 0 < samples < interval_samples else 0


# --------------------------------------------------------------------------- runs


def _seconds_between(later: datetime, earlier: datetime) -> float:
    return ((later - earlier) // timedelta(microseconds=1)) / 1_000_000


def contiguous_runs(
    items: Sequence[tuple[datetime, float, float]], tolerance_s: float = 0.002
) -> list[list[int]]:
    """Group recordings that continue each other without a gap.

    A recording continues a run when its start is within ``tolerance_s`` of the run's end
    (previous start + duration) and its sample rate is the same. Gaps and overlaps beyond
    the tolerance break a run. Recordings with equal start times (e.g. one file per channel)
    each continue their own run: a run is extended once, by the best-fitting recording.

    Parameters
    ----------
    items : sequence of (datetime, float, float)
        ``(start, duration_s, sample_rate)`` of each recording, in any order; starts all
        aware (compared as instants) or all naive.
    tolerance_s : float, optional
        Allowed gap or overlap in seconds (default 2 ms).

    Returns
    -------
    list of list of int
        Indices into ``items``, each group sorted by start, groups sorted by their first
        start. A recording that continues nothing is a group of one.

    Raises
    ------
    SettingsError
        A negative tolerance, or aware and naive starts mixed.
    """
    if not tolerance_s >= 0:
        raise SettingsError(f"tolerance must be >= 0 s, got {tolerance_s!r}")
    aware = {item[0].utcoffset() is not None for item in items}
    if len(aware) > 1:
        raise SettingsError("recording start times mix aware and naive datetimes")
    order = sorted(range(len(items)), key=lambda i: (items[i][0], i))
    runs: list[list[int]] = []
    for i in order:
        start, _, rate = items[i]
        best, best_gap = None, math.inf
        for run in runs:
            prev_start, prev_duration, prev_rate = items[run[-1]]
            gap = abs(_seconds_between(start, prev_start) - float(prev_duration))
            if prev_rate == rate and gap <= tolerance_s and gap < best_gap:
                best, best_gap = run, gap
        if best is None:
            runs.append([i])
        else:
            best.append(i)
    return runs


def after(origin: datetime, seconds: float) -> datetime:
    """The clock time ``seconds`` of elapsed time after ``origin``, in ``origin``'s zone.

    Computed through UTC: adding a timedelta to an aware datetime directly adds wall-clock
    time, which is an hour off across a daylight-saving change in an IANA zone.
    """
    if origin.utcoffset() is None:
        raise SettingsError(f"start time {origin.isoformat()} has no UTC offset")
    utc = origin.astimezone(timezone.utc) + timedelta(seconds=float(seconds))
    return utc.astimezone(origin.tzinfo)
