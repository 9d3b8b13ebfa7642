"""Figures of level analyses and calibrations (matplotlib object API, headless).

Every figure is built from plain data, the dictionaries that bandmeter writes as JSON:

- a level result, :meth:`bandmeter.results.LevelResult.to_dict` (``bandmeter levels --json``,
  and each ``results/<id>.json`` of a batch);
- a calibration, :meth:`bandmeter.calibration.Calibration.to_dict` (a ``--save`` file, or the
  ``calibration`` key of a level result).

Figure kinds (:data:`FIGURE_KINDS`):

``time``
    :func:`time_history_figure`: LAeq per interval with LAFmax and percentile levels, as
    steps; overload intervals, events and excluded ranges shaded; clock time on the axis
    when the intervals carry it.
``spectrum``
    :func:`band_spectrum_figure`: whole-recording band Leq as bars on the nominal-frequency
    axis, with A-weighted values beside them and tonal bands marked.
``bandmap``
    :func:`band_time_figure`: band levels over time (a spectrogram on the fractional-octave
    axis) with a colour bar in dB.
``distribution``
    :func:`level_distribution_figure`: histogram and exceedance curve of the F time-weighted
    A level, with the percentile levels marked.
``calibration``
    :func:`calibration_figure`: the calibrator tone's level over its file with the span
    measured, pre and post tone, and the drift.

Figures use :class:`matplotlib.figure.Figure` with an Agg canvas, never pyplot, so they work
without a display and in worker processes, and nothing is registered globally: a figure is
freed when the last reference to it goes. Long results stay cheap: each series is a single
artist (a step line, one collection of shaded ranges, one mesh), whatever the number of
intervals, and very long series are rasterised inside SVG files so those stay small.

Style (:mod:`bandmeter.plotstyle`): white background, Okabe-Ito colours, axes labelled with
units (dB re 20 uPa; dB re full scale for an uncalibrated result, whose keys end in
``_dBFS``; Hz; s or clock time).
"""

from __future__ import annotations

import functools
import io
import math
import os
import re
from collections.abc import Callable, Iterable, Iterator, Mapping, Sequence
from datetime import datetime, timedelta
from pathlib import Path
from typing import Any

import numpy as np
from matplotlib import dates as mdates
from matplotlib.axes import Axes
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.collections import PolyCollection
from matplotlib.figure import Figure

from . import plotstyle as style
from .errors import OutputError, SettingsError
from .outputs import check_writable, read_json, write_bytes

__all__ = [
    "FIGURE_KINDS",
    "FORMATS",
    "available_kinds",
    "band_spectrum_figure",
    "band_time_figure",
    "calibration_figure",
    "clock_origin",
    "exceedance_percent",
    "figure_bytes",
    "figure_paths",
    "figures_for_result",
    "level_distribution_figure",
    "load_plot_input",
    "make_figure",
    "plot_path",
    "read_events",
    "save_figures",
    "time_history_figure",
]

#: Figure kinds, in the order they are produced.
FIGURE_KINDS = ("time", "spectrum", "bandmap", "distribution", "calibration")

#: File formats of :func:`figure_bytes` and :func:`save_figures`.
FORMATS = ("png", "svg")

#: Above this many intervals the step lines of the time history are rasterised in SVG files
#: (one image instead of a path with two vertices per interval).
RASTER_ABOVE_INTERVALS = 5000

#: Most time columns drawn in the band-time map; longer results are drawn with columns that
#: each hold the energy mean of consecutive intervals.
MAP_MAX_COLUMNS = 3000

#: Colour range of the band-time map: at most this many dB below its highest level.
MAP_RANGE_DB = 70.0

#: Most bars of a histogram bin display; finer bins are regrouped (0.1, 0.2, 0.5, 1, 2 dB...).
HISTOGRAM_MAX_BINS = 120

_UNIT_SPL = "dB re 20 µPa"
_UNIT_DBFS = "dB re full scale (dBFS)"
_DBFS = "_dBFS"
_PERCENTILE_RE = re.compile(r"^LAF(\d+(?:\.\d+)?)(_dBFS)?$")
_BAND_LEQ_RE = re.compile(r"^L([AZC])eq(_dBFS)?$")


# --------------------------------------------------------------------------------------------
# Plain-data helpers
# --------------------------------------------------------------------------------------------


def _as_data(obj: Any, what: str) -> Mapping[str, Any]:
    """A mapping from a result/calibration dictionary or an object with ``to_dict``."""
    if isinstance(obj, Mapping):
        return obj
    to_dict = getattr(obj, "to_dict", None)
    if callable(to_dict):
        data = to_dict()
        if isinstance(data, Mapping):
            return data
    raise TypeError(f"{what} must be a mapping (its to_dict() output), got {type(obj).__name__}")


def _num(value: Any) -> float:
    """A level from JSON data: None (JSON null for -inf/NaN) becomes NaN."""
    if value is None or isinstance(value, bool):
        return math.nan
    try:
        return float(value)
    except (TypeError, ValueError):
        return math.nan


def _name(result: Mapping[str, Any]) -> str:
    return os.path.basename(str(result.get("file") or "result"))


def _suffix(result: Mapping[str, Any]) -> str:
    """``""`` for a calibrated result, ``"_dBFS"`` for one in dB re full scale."""
    overall = result.get("overall") or {}
    if any(str(k).endswith(_DBFS) for k in overall):
        return _DBFS
    if result.get("calibration") is None and "LAeq" not in overall:
        return _DBFS
    return ""


def _unit(suffix: str) -> str:
    return _UNIT_DBFS if suffix else _UNIT_SPL


def _key(key: str, suffix: str) -> str:
    return key if not suffix or key.endswith(suffix) else key + suffix


def _intervals(result: Mapping[str, Any]) -> list[Mapping[str, Any]]:
    intervals = result.get("intervals")
    if not isinstance(intervals, list):
        raise SettingsError(f"{_name(result)}: not a level result (no 'intervals' list)")
    return intervals


def _column(rows: Sequence[Mapping[str, Any]], key: str) -> np.ndarray:
    return np.array([_num(row.get(key)) for row in rows], dtype=np.float64)


def _duration_text(seconds: float) -> str:
    """``900`` -> ``"15 min"``, ``0.1`` -> ``"100 ms"``."""
    for unit, size in (("h", 3600.0), ("min", 60.0), ("s", 1.0)):
        if seconds >= size and abs(seconds / size - round(seconds / size)) < 1e-9:
            return f"{seconds / size:g} {unit}"
    if seconds < 1.0:
        return f"{seconds * 1000:g} ms"
    return f"{seconds:g} s"


def _new_figure(height_in: float) -> Figure:
    fig = Figure(figsize=(style.FIGURE_WIDTH_IN, height_in), layout="constrained")
    FigureCanvasAgg(fig)
    return fig


def _styled(build: Callable[..., Figure]) -> Callable[..., Figure]:
    """Run a figure builder inside :func:`bandmeter.plotstyle.styled`."""

    @functools.wraps(build)
    def wrapper(*args: Any, **kwargs: Any) -> Figure:
        with style.styled():
            return build(*args, **kwargs)

    return wrapper


# --------------------------------------------------------------------------------------------
# Time axis
# --------------------------------------------------------------------------------------------


class _TimeAxis:
    """Maps seconds from the first sample to x values: clock time when known, else s/min/h."""

    def __init__(self, intervals: Sequence[Mapping[str, Any]], total_s: float) -> None:
        self.origin: datetime | None = None
        for iv in intervals:
            text = iv.get("start_time")
            if text:
                when = datetime.fromisoformat(str(text))
                if when.utcoffset() is not None:
                    self.origin = when - timedelta(seconds=_num(iv.get("start_s")))
                break
        if total_s >= 2 * 3600:
            self.unit, self.size = "h", 3600.0
        elif total_s >= 120:
            self.unit, self.size = "min", 60.0
        else:
            self.unit, self.size = "s", 1.0

    @property
    def clock(self) -> bool:
        return self.origin is not None

    def x(self, seconds: Any) -> np.ndarray:
        s = np.asarray(seconds, dtype=np.float64)
        if self.origin is not None:
            return mdates.date2num(self.origin) + s / 86400.0
        return s / self.size

    def configure(self, ax: Axes) -> None:
        if self.origin is not None:
            tz = self.origin.tzinfo
            locator = mdates.AutoDateLocator(tz=tz, minticks=4, maxticks=10)
            ax.xaxis.set_major_locator(locator)
            ax.xaxis.set_major_formatter(mdates.ConciseDateFormatter(locator, tz=tz))
            offset = self.origin.strftime("%z")
            ax.set_xlabel(f"clock time (UTC{offset[:3]}:{offset[3:]})")
        else:
            ax.set_xlabel(f"time from the start of the recording, {self.unit}")


def _edges(intervals: Sequence[Mapping[str, Any]]) -> tuple[np.ndarray, np.ndarray]:
    """Start and end of each interval, s."""
    start = _column(intervals, "start_s")
    end = start + _column(intervals, "duration_s")
    return start, end


def _step_line(ax: Axes, edges: np.ndarray, values: np.ndarray, **kw: Any) -> Any:
    """A step line, value ``i`` from ``edges[i]`` to ``edges[i + 1]``: one Line2D (cheaper
    than ``Axes.stairs`` for long series, whose patch limits are found segment by segment)."""
    y = np.append(values, values[-1] if values.size else np.nan)
    (line,) = ax.plot(edges, y, drawstyle="steps-post", **kw)
    return line


def _mask_runs(mask: np.ndarray, start: np.ndarray, end: np.ndarray) -> np.ndarray:
    """(k, 2) start and end, s, of each run of consecutive True intervals."""
    m = np.asarray(mask, dtype=bool)
    if not m.any():
        return np.empty((0, 2))
    d = np.diff(np.concatenate(([0], m.astype(np.int8), [0])))
    first = np.flatnonzero(d == 1)
    last = np.flatnonzero(d == -1) - 1
    return np.column_stack((start[first], end[last]))


def _time_ranges(items: Iterable[Any] | None, what: str) -> np.ndarray:
    """(k, 2) start and end, s, of events or exclusions given as mappings or objects with
    ``start_s`` and ``end_s``."""
    out = []
    for item in items or ():
        if isinstance(item, Mapping):
            a, b = item.get("start_s"), item.get("end_s")
        else:
            a, b = getattr(item, "start_s", None), getattr(item, "end_s", None)
        if a is None or b is None or not (math.isfinite(_num(a)) and math.isfinite(_num(b))):
            raise SettingsError(f"{what} need 'start_s' and 'end_s' in s, got {item!r}")
        out.append((_num(a), _num(b)))
    return np.array(out, dtype=np.float64).reshape(-1, 2)


def _shade(ax: Axes, ranges_x: np.ndarray, label: str, **kw: Any) -> PolyCollection | None:
    """One collection of full-height bands at the given x ranges (a single artist)."""
    if ranges_x.size == 0:
        return None
    verts = [[(a, 0.0), (a, 1.0), (b, 1.0), (b, 0.0)] for a, b in ranges_x]
    col = PolyCollection(verts, transform=ax.get_xaxis_transform(), label=label, **kw)
    ax.add_collection(col, autolim=False)
    return col


# --------------------------------------------------------------------------------------------
# Time history
# --------------------------------------------------------------------------------------------


def _percentile_keys_available(row: Mapping[str, Any]) -> list[str]:
    return [k for k in row if _PERCENTILE_RE.match(str(k))]


@_styled
def time_history_figure(
    result: Mapping[str, Any],
    *,
    percentile_keys: Sequence[str] = ("LAF90",),
    events: Sequence[Mapping[str, Any]] | None = None,
    exclusions: Sequence[Mapping[str, Any]] | None = None,
) -> Figure:
    """Time history: LAeq per interval with LAFmax and percentile levels.

    Parameters
    ----------
    result : mapping
        A level result (:meth:`~bandmeter.results.LevelResult.to_dict`) with at least two
        intervals.
    percentile_keys : sequence of str
        Percentile levels drawn with LAeq and LAFmax (default ``("LAF90",)``); ``"_dBFS"``
        is appended for an uncalibrated result.
    events : sequence of mapping, optional
        Noise events (:meth:`bandmeter.assess.events.NoiseEvent.to_dict`, or objects with
        ``start_s`` and ``end_s`` in s), shaded.
    exclusions : sequence, optional
        Excluded ranges (:func:`bandmeter.assess.exclusions.read_ranges` ranges, or mappings
        with ``start_s`` and ``end_s`` in s), hatched.

    Returns
    -------
    matplotlib.figure.Figure
        Levels in dB re 20 uPa (dB re full scale when uncalibrated) against clock time when
        the intervals carry ``start_time``, else against s, min or h from the first sample.
        Intervals with samples at full scale are hatched ("overload").

    Raises
    ------
    SettingsError
        Fewer than two intervals, or a percentile level the result does not hold.
    """
    result = _as_data(result, "result")
    intervals = _intervals(result)
    if len(intervals) < 2:
        raise SettingsError(
            f"{_name(result)}: {len(intervals)} interval(s); a time history needs intervals "
            f"(analyse with --interval)"
        )
    suffix = _suffix(result)
    start, end = _edges(intervals)
    axis = _TimeAxis(intervals, float(end[-1] - start[0]))
    x_edges = axis.x(np.append(start, end[-1]))
    fig = _new_figure(4.2)
    ax = fig.add_subplot()
    raster = len(intervals) > RASTER_ABOVE_INTERVALS
    series: list[tuple[str, str, str]] = [
        ("LAeq", *style.SERIES["LAeq"]), ("LAFmax", *style.SERIES["LAFmax"])]
    first = intervals[0]
    for i, key in enumerate(percentile_keys):
        full = _key(str(key), suffix)
        if full not in first:
            available = ", ".join(_percentile_keys_available(first)) or "none"
            raise SettingsError(f"{_name(result)}: no {full!r} in the intervals; "
                                f"percentile levels available: {available}")
        colour, line = style.PERCENTILE_STYLES[i % len(style.PERCENTILE_STYLES)]
        series.append((str(key), colour, line))
    for key, colour, line in series:
        full = _key(key, suffix)
        values = _column(intervals, full)
        artist = _step_line(ax, x_edges, values, color=colour, linestyle=line,
                            linewidth=1.6 if key == "LAeq" else 1.1, label=full)
        artist.set_rasterized(raster)
    overload = np.array([bool(iv.get("overload")) or _num(iv.get("full_scale_samples")) > 0
                         for iv in intervals])
    runs = _mask_runs(overload, start, end)
    _shade(ax, axis.x(runs), f"overload: samples at full scale ({int(overload.sum())} "
                             f"interval{'s' if overload.sum() != 1 else ''})",
           facecolor="none", edgecolor=style.VERMILLION, hatch="////", linewidth=0.0)
    ev = _time_ranges(events, "events")
    _shade(ax, axis.x(ev), f"events ({len(ev)})", facecolor=style.ORANGE, alpha=0.25,
           edgecolor="none")
    ex = _time_ranges(exclusions, "exclusions")
    _shade(ax, axis.x(ex), f"excluded ranges ({len(ex)})", facecolor=style.GREY, alpha=0.18,
           edgecolor=style.GREY, hatch="\\\\", linewidth=0.0)
    ax.set_xlim(x_edges[0], x_edges[-1])
    axis.configure(ax)
    ax.set_ylabel(f"sound level, {_unit(suffix)}")
    interval_s = (result.get("settings") or {}).get("interval_s")
    per = f" per {_duration_text(float(interval_s))}" if interval_s else " per interval"
    ax.set_title(f"{_name(result)}: A-weighted levels{per}", loc="left")
    fig.legend(loc="outside lower center", ncols=min(4, len(series) + 3))
    return fig


# --------------------------------------------------------------------------------------------
# Bands
# --------------------------------------------------------------------------------------------


def _band_key(bands: Sequence[Mapping[str, Any]], result: Mapping[str, Any]) -> str:
    """The band Leq key (``LZeq``, ``LAeq``, ``LCeq``, with ``_dBFS`` when uncalibrated)."""
    letter = str((result.get("settings") or {}).get("band_weighting") or "Z").upper()
    suffix = _suffix(result)
    wanted = f"L{letter}eq{suffix}"
    if wanted in bands[0]:
        return wanted
    for key in bands[0]:
        if _BAND_LEQ_RE.match(str(key)):
            return str(key)
    raise SettingsError(f"{_name(result)}: the bands hold no Leq level "
                        f"(keys: {', '.join(map(str, bands[0]))})")


def _overall_bands(result: Mapping[str, Any]) -> list[Mapping[str, Any]]:
    bands = (result.get("overall") or {}).get("bands")
    if not bands:
        raise SettingsError(f"{_name(result)}: no band levels (analysed without --bands); "
                            f"the spectrum and the band map need a band analysis")
    return bands


def _band_name(result: Mapping[str, Any]) -> str:
    b = (result.get("settings") or {}).get("bands")
    return {1: "octave", 3: "one-third-octave"}.get(b, f"1/{b}-octave" if b else "band")


def _tick_step(n: int, most: int = 36) -> int:
    return max(1, math.ceil(n / most))


def _band_ticks(ax: Axes, labels: Sequence[str], axis: str = "x") -> None:
    step = _tick_step(len(labels))
    positions = np.arange(0, len(labels), step)
    shown = [labels[i] for i in positions]
    if axis == "x":
        ax.set_xticks(positions, shown, rotation=90 if len(shown) > 12 else 0)
        ax.set_xlim(-0.6, len(labels) - 0.4)
        ax.grid(False, axis="x")
    else:
        ax.set_yticks(positions, shown)


def _tonal_indices(result: Mapping[str, Any], bands: Sequence[Mapping[str, Any]], key: str,
                   tonal_labels: Sequence[str] | None) -> tuple[list[int], str]:
    """Indices of the tonal bands and the legend text of their marks."""
    if tonal_labels is not None:
        found = []
        for text in tonal_labels:
            index = _find_band(bands, str(text))
            if index is None:
                labels = ", ".join(str(b.get("label")) for b in bands)
                raise SettingsError(f"{_name(result)}: no band {text!r}; bands: {labels}")
            found.append(index)
        return sorted(set(found)), "tonal band (given)"
    settings = result.get("settings") or {}
    if settings.get("bands") != 3 or not key.startswith("LZeq"):
        return [], ""
    from .assess.tonality import screen_third_octaves

    pairs = [(float(b["nominal_hz"]), _num(b.get(key))) for b in bands]
    tones = {t.nominal_hz for t in screen_third_octaves(pairs)}
    indices = [i for i, b in enumerate(bands) if float(b["nominal_hz"]) in tones]
    return indices, "tonal band (one-third-octave screen, ISO 1996-2 Annex K)"


def _find_band(bands: Sequence[Mapping[str, Any]], text: str) -> int | None:
    for i, b in enumerate(bands):
        if str(b.get("label")) == text:
            return i
    try:
        hz = float(text[:-1]) * 1000.0 if text.lower().endswith("k") else float(text)
    except ValueError:
        return None
    for i, b in enumerate(bands):
        if math.isclose(float(b["nominal_hz"]), hz, rel_tol=0.01):
            return i
    return None


@_styled
def band_spectrum_figure(result: Mapping[str, Any], *,
                         tonal_labels: Sequence[str] | None = None) -> Figure:
    """Band spectrum of the whole recording: band Leq as bars on the nominal-frequency axis.

    Parameters
    ----------
    result : mapping
        A level result with a band analysis (``overall["bands"]``).
    tonal_labels : sequence of str, optional
        Band labels (``"630"``, ``"1k"``) or nominal frequencies in Hz to mark as tonal.
        Default: with Z-weighted one-third-octave bands, the bands that
        :func:`bandmeter.assess.tonality.screen_third_octaves` flags; otherwise none.

    Returns
    -------
    matplotlib.figure.Figure
        Bars of the band Leq (dB re 20 uPa, or dB re full scale) labelled with the nominal
        mid-band frequencies (25, 31.5, 40 ... 1k, 1.25k ...). Beside them the A-weighted
        band levels: measured when the bands were A-weighted, otherwise computed as band
        Leq + A weighting - the bands' own weighting at the exact mid-band frequency
        (IEC 61672-1 analytic response, :func:`bandmeter.weighting.analytic_response_db`),
        which the legend says. With ``--band-max`` the F-weighted band maxima are ticks.

    Raises
    ------
    SettingsError
        No band levels, or a tonal label that is not a band of the result.
    """
    from .weighting import analytic_response_db

    result = _as_data(result, "result")
    bands = _overall_bands(result)
    key = _band_key(bands, result)
    suffix = _suffix(result)
    letter = _BAND_LEQ_RE.match(key).group(1)  # type: ignore[union-attr]
    labels = [str(b.get("label")) for b in bands]
    levels = _column(bands, key)
    exact = np.array([float(b["exact_hz"]) for b in bands])
    x = np.arange(len(bands))
    own = {"A": "A-weighted before the band filters", "C": "C-weighted before the band filters"}
    series = [(levels, f"{key} ({own.get(letter, 'band Leq')})", style.BLUE)]
    if letter != "A":
        a_levels = (levels + analytic_response_db("A", exact)
                    - analytic_response_db(letter, exact))
        series.append((a_levels, f"LAeq{suffix}, computed: {key} + A weighting at the exact "
                                 f"mid-band frequency", style.ORANGE))
    finite = np.concatenate([s[0][np.isfinite(s[0])] for s in series])
    if finite.size == 0:
        raise SettingsError(f"{_name(result)}: every band level is empty (silence)")
    floor = 10.0 * math.floor((float(finite.min()) - 5.0) / 10.0)
    top = float(finite.max())
    fig = _new_figure(4.4)
    ax = fig.add_subplot()
    width = 0.8 / len(series)
    handles = []
    for i, (values, label, colour) in enumerate(series):
        offset = (i - (len(series) - 1) / 2.0) * width
        heights = np.where(np.isfinite(values), values - floor, 0.0)
        handles.append(ax.bar(x + offset, heights, width=width, bottom=floor, color=colour,
                              label=label, edgecolor="white", linewidth=0.3))
    fmax_key = f"L{letter}Fmax{suffix}"
    if fmax_key in bands[0]:
        fmax = _column(bands, fmax_key)
        top = max(top, float(np.nanmax(fmax)) if np.isfinite(fmax).any() else top)
        handles.append(ax.scatter(x, fmax, marker="_", s=60, color=style.BLACK,
                                  linewidths=1.2, label=f"{fmax_key} (F-weighted band maximum)",
                                  zorder=3))
    tonal, tonal_text = _tonal_indices(result, bands, key, tonal_labels)
    if tonal:
        peak = np.nanmax(np.vstack([s[0] for s in series]), axis=0)
        handles.append(ax.scatter(x[tonal], peak[tonal] + 0.04 * (top - floor + 10.0),
                                  marker="v", s=42, color=style.VERMILLION,
                                  edgecolors=style.BLACK, linewidths=0.5, label=tonal_text,
                                  zorder=4))
    ax.set_ylim(floor, top + 0.12 * (top - floor + 10.0))
    _band_ticks(ax, labels)
    ax.set_xlabel("nominal mid-band frequency, Hz")
    ax.set_ylabel(f"band level (Leq), {_unit(suffix)}")
    duration = _num(result.get("duration_s"))
    dur = f", {_duration_text(duration)}" if math.isfinite(duration) else ""
    ax.set_title(f"{_name(result)}: {_band_name(result)} band levels, whole recording{dur}",
                 loc="left")
    fig.legend(handles=handles, loc="outside lower left", ncols=1)
    return fig


def _energy_groups(levels: np.ndarray, duration: np.ndarray, group: int
                   ) -> tuple[np.ndarray, np.ndarray]:
    """Duration-weighted energy mean of ``group`` consecutive rows (NaN rows left out)."""
    k = levels.shape[0]
    n = -(-k // group)
    pad = n * group - k
    lv = np.vstack([levels, np.full((pad, levels.shape[1]), np.nan)])
    du = np.concatenate([duration, np.zeros(pad)])
    energy = np.where(np.isfinite(lv), np.power(10.0, lv / 10.0), 0.0) * du[:, None]
    weight = np.where(np.isfinite(lv), du[:, None], 0.0)
    e = energy.reshape(n, group, -1).sum(axis=1)
    w = weight.reshape(n, group, -1).sum(axis=1)
    with np.errstate(divide="ignore", invalid="ignore"):
        out = 10.0 * np.log10(e / w)
    out[w == 0] = np.nan
    return out, np.arange(n) * group


@_styled
def band_time_figure(result: Mapping[str, Any]) -> Figure:
    """Band-time map: band Leq per interval as colours on time x band axes.

    Parameters
    ----------
    result : mapping
        A level result with a band analysis and at least two intervals.

    Returns
    -------
    matplotlib.figure.Figure
        A mesh (one cell per interval and band, rasterised in SVG) with a colour bar in
        dB re 20 uPa (dB re full scale when uncalibrated), at most :data:`MAP_RANGE_DB`
        deep. Above :data:`MAP_MAX_COLUMNS` intervals each column is the energy mean of
        consecutive intervals (stated in the title).

    Raises
    ------
    SettingsError
        No band levels per interval, or fewer than two intervals.
    """
    result = _as_data(result, "result")
    bands = _overall_bands(result)
    intervals = _intervals(result)
    if len(intervals) < 2 or not intervals[0].get("bands"):
        raise SettingsError(f"{_name(result)}: no band levels per interval; the band map needs "
                            f"a band analysis with --interval")
    key = _band_key(bands, result)
    suffix = _suffix(result)
    labels = [str(b.get("label")) for b in bands]
    levels = np.array([[_num(b.get(key)) for b in iv["bands"]] for iv in intervals])
    start, end = _edges(intervals)
    note = ""
    if len(intervals) > MAP_MAX_COLUMNS:
        group = -(-len(intervals) // MAP_MAX_COLUMNS)
        levels, firsts = _energy_groups(levels, end - start, group)
        lasts = np.minimum(firsts + group, len(intervals)) - 1
        start, end = start[firsts], end[lasts]
        note = f" (each column: energy mean of {group} intervals)"
    axis = _TimeAxis(intervals, float(end[-1] - start[0]))
    x_edges = axis.x(np.append(start, end[-1]))
    y_edges = np.arange(len(bands) + 1) - 0.5
    finite = levels[np.isfinite(levels)]
    if finite.size == 0:
        raise SettingsError(f"{_name(result)}: every band level is empty (silence)")
    vmax = float(finite.max())
    vmin = max(float(finite.min()), vmax - MAP_RANGE_DB)
    fig = _new_figure(4.6)
    ax = fig.add_subplot()
    mesh = ax.pcolormesh(x_edges, y_edges, np.ma.masked_invalid(levels.T), shading="flat",
                         cmap=style.LEVEL_CMAP, vmin=vmin, vmax=vmax, rasterized=True)
    ax.grid(False)
    _band_ticks(ax, labels, axis="y")
    ax.set_ylabel("nominal mid-band frequency, Hz")
    axis.configure(ax)
    fig.colorbar(mesh, ax=ax, label=f"{key}, {_unit(suffix)}", pad=0.01)
    ax.set_title(f"{_name(result)}: {_band_name(result)} band levels over time{note}",
                 loc="left")
    return fig


# --------------------------------------------------------------------------------------------
# Level distribution
# --------------------------------------------------------------------------------------------


def _distribution(result: Mapping[str, Any]) -> Mapping[str, Any]:
    dist = result.get("distribution")
    if not isinstance(dist, Mapping) or not dist.get("counts"):
        raise SettingsError(f"{_name(result)}: no level distribution in the result (written "
                            f"by an older bandmeter, or nothing was counted); analyse again")
    return dist


def _display_factor(width: float, n: int) -> int:
    """Bins regrouped per displayed bar, so that at most HISTOGRAM_MAX_BINS remain."""
    for size in (0.1, 0.2, 0.5, 1.0, 2.0, 5.0, 10.0):
        factor = max(1, int(round(size / width)))
        if -(-n // factor) <= HISTOGRAM_MAX_BINS:
            return factor
    return -(-n // HISTOGRAM_MAX_BINS)


def exceedance_percent(distribution: Mapping[str, Any]) -> tuple[np.ndarray, np.ndarray]:
    """Share of the time each level is exceeded, from a result's ``distribution``.

    Parameters
    ----------
    distribution : mapping
        ``{"bin_width_db", "first_bin_db", "counts", "below", "above"}`` (bin ``i`` covers
        ``[first + i w, first + (i + 1) w)`` dB).

    Returns
    -------
    levels_db, percent : ndarray
        The bin edges, dB, and the percentage of all counted values (including those below
        and above the histogram's range) at or above each edge.
    """
    counts = np.asarray(distribution["counts"], dtype=np.float64)
    width = float(distribution["bin_width_db"])
    first = float(distribution["first_bin_db"])
    below = float(distribution.get("below") or 0)
    above = float(distribution.get("above") or 0)
    total = counts.sum() + below + above
    edges = first + width * np.arange(counts.size + 1)
    from_top = np.concatenate((np.cumsum(counts[::-1])[::-1], [0.0])) + above
    return edges, 100.0 * from_top / total


@_styled
def level_distribution_figure(result: Mapping[str, Any]) -> Figure:
    """Distribution of the F time-weighted A level: histogram, exceedance curve, LAFN marks.

    Parameters
    ----------
    result : mapping
        A level result with a ``distribution`` (the whole-recording histogram of the LAF
        level, ``metric`` ``"LAF"`` or ``"LAF_dBFS"``).

    Returns
    -------
    matplotlib.figure.Figure
        Bars: share of the time per level bin, % (fine bins regrouped to at most
        :data:`HISTOGRAM_MAX_BINS`). Line (right axis): share of the time the level is
        exceeded, % (:func:`exceedance_percent`); each percentile level LAFN of the result
        lies on it at N %, marked and labelled. Levels in dB re 20 uPa (dB re full scale
        when uncalibrated).

    Raises
    ------
    SettingsError
        The result holds no distribution.
    """
    result = _as_data(result, "result")
    dist = _distribution(result)
    suffix = _suffix(result)
    metric = str(dist.get("metric") or _key("LAF", suffix))
    counts = np.asarray(dist["counts"], dtype=np.float64)
    width = float(dist["bin_width_db"])
    edges, exceeded = exceedance_percent(dist)
    total = counts.sum() + float(dist.get("below") or 0) + float(dist.get("above") or 0)
    factor = _display_factor(width, counts.size)
    n_show = -(-counts.size // factor)
    grouped = np.concatenate((counts, np.zeros(n_show * factor - counts.size)))
    grouped = grouped.reshape(n_show, factor).sum(axis=1)
    show_edges = edges[0] + factor * width * np.arange(n_show + 1)
    fig = _new_figure(4.2)
    ax = fig.add_subplot()
    ax.stairs(100.0 * grouped / total, show_edges, fill=True, color=style.SKY_BLUE,
              alpha=0.8, label=f"time per {factor * width:g} dB bin, %")
    ax.set_ylabel(f"share of the time per {factor * width:g} dB, %")
    ax.set_xlabel(f"{metric} (F time-weighted A level), {_unit(suffix)}")
    right = ax.twinx()
    right.grid(False)
    right.spines["right"].set_visible(True)
    right.plot(edges, exceeded, color=style.BLACK, linewidth=1.3,
               label="time the level is exceeded, % (right axis)")
    right.set_ylim(0.0, 100.0)
    right.set_ylabel("time the level is exceeded, %")
    overall = result.get("overall") or {}
    marks = []
    for k in overall:
        match = _PERCENTILE_RE.match(str(k))
        if match and (match.group(2) or "") == suffix and math.isfinite(_num(overall[k])):
            marks.append((float(match.group(1)), str(k), _num(overall[k])))
    marks.sort()
    if marks:
        right.scatter([m[2] for m in marks], [m[0] for m in marks], marker="o", s=18,
                      color=style.VERMILLION, zorder=4,
                      label="percentile level LAFN: exceeded N % of the time")
        for _, _, value in marks:
            ax.axvline(value, color=style.VERMILLION, linestyle=":", linewidth=0.9)
        table = "\n".join(f"{k.replace(_DBFS, '')}  {value:6.1f} dB" for _, k, value in marks)
        right.text(0.99, 0.97, table, transform=right.transAxes, ha="right", va="top",
                   fontsize=7.5, family="DejaVu Sans Mono", color=style.BLACK,
                   bbox={"facecolor": "white", "edgecolor": "#BBBBBB", "linewidth": 0.6})
    below = float(dist.get("below") or 0)
    if below:
        ax.text(0.01, 0.98, f"{100 * below / total:.1f} % of the time below "
                            f"{edges[0]:.1f} dB (not shown)", transform=ax.transAxes,
                va="top", fontsize=7)
    ax.set_xlim(edges[0], edges[-1])
    ax.set_title(f"{_name(result)}: distribution of {metric}, whole recording", loc="left")
    handles = ax.get_legend_handles_labels()
    more = right.get_legend_handles_labels()
    fig.legend(handles[0] + more[0], handles[1] + more[1], loc="outside lower center",
               ncols=3)
    return fig


# --------------------------------------------------------------------------------------------
# Calibration
# --------------------------------------------------------------------------------------------


def _has_history(cal: Mapping[str, Any] | None) -> bool:
    if not isinstance(cal, Mapping):
        return False
    post = cal.get("post")
    return bool(cal.get("level_history")) or (isinstance(post, Mapping)
                                              and bool(post.get("level_history")))


def _tone_panel(ax: Axes, tone: Mapping[str, Any], title: str) -> None:
    history = tone.get("level_history")
    level = _num(tone.get("tone_level_dbfs"))
    span = tone.get("span_s")
    name = os.path.basename(str(tone.get("source_file") or ""))
    ax.set_title(f"{title}: {name}, {_num(tone.get('frequency_hz')):.1f} Hz", loc="left")
    ax.set_xlabel("time from the start of the tone file, s")
    ax.set_ylabel("tone level, dBFS")
    if not history:
        ax.text(0.5, 0.5, "no level history in this calibration file\n(made by an earlier "
                          "bandmeter version)", ha="center", va="center",
                transform=ax.transAxes)
        return
    step = float(history["step_s"])
    values = np.array([_num(v) for v in history["levels_dbfs"]])
    edges = step * np.arange(values.size + 1)
    if span:
        ax.axvspan(float(span[0]), float(span[1]), color=style.BLUISH_GREEN, alpha=0.18,
                   linewidth=0, label=f"span measured, {float(span[0]):.1f} to "
                                      f"{float(span[1]):.1f} s")
    _step_line(ax, edges, values, color=style.BLUE, linewidth=1.2,
               label=f"tone level per {_duration_text(step)}")
    if math.isfinite(level):
        stability = _num(tone.get("stability_db"))
        extra = f", stability {stability:.3f} dB" if math.isfinite(stability) else ""
        ax.axhline(level, color=style.VERMILLION, linestyle="--", linewidth=1.0,
                   label=f"tone level {level:.2f} dBFS{extra}")
    finite = values[np.isfinite(values)]
    if finite.size:
        top = float(finite.max())
        low = max(float(finite.min()), top - 40.0)
        ax.set_ylim(low - 1.0, top + 2.0)
    ax.set_xlim(0.0, edges[-1])
    ax.legend(loc="lower center", ncols=3)


@_styled
def calibration_figure(calibration: Mapping[str, Any]) -> Figure:
    """The calibrator tone's level over its file, with the span measured; pre and post tone.

    Parameters
    ----------
    calibration : mapping
        :meth:`bandmeter.calibration.Calibration.to_dict` (a calibration file, or the
        ``calibration`` key of a level result), with the tone level history
        (``level_history``, kept since bandmeter records it).

    Returns
    -------
    matplotlib.figure.Figure
        One panel per tone (pre, and post when measured): the level in dB re full scale per
        step, the span measured shaded, the measured tone level as a line. The title gives
        the calibrator level, the full-scale level and the drift (post - pre, dB), flagged
        when it exceeds :data:`bandmeter.calibration.DRIFT_LIMIT_DB`.

    Raises
    ------
    SettingsError
        A stated sensitivity, or a calibration without a level history.
    """
    from .calibration import DRIFT_LIMIT_DB

    cal = _as_data(calibration, "calibration")
    if not _has_history(cal):
        source = cal.get("source_file") if isinstance(cal, Mapping) else None
        raise SettingsError(
            f"calibration from {source or 'unknown source'} has no tone level history (a "
            f"stated sensitivity, or a file made by an earlier bandmeter); calibrate again "
            f"from the tone file to plot it"
        )
    post = cal.get("post")
    panels = [(cal, "pre tone")] + ([(post, "post tone")] if isinstance(post, Mapping) else [])
    fig = _new_figure(2.9 * len(panels) + 0.5)
    axes = fig.subplots(len(panels), 1, squeeze=False)[:, 0]
    for ax, (tone, title) in zip(axes, panels, strict=True):
        _tone_panel(ax, tone, title)
    head = f"full scale = {_num(cal.get('full_scale_level_db')):.2f} dB re 20 µPa"
    reference = _num(cal.get("reference_level_db"))
    if math.isfinite(reference):
        head = f"{reference:.1f} dB calibrator: {head}"
    drift = _num(cal.get("drift_db"))
    if math.isfinite(drift):
        head += f"; drift (post - pre) {drift:+.2f} dB"
        if abs(drift) > DRIFT_LIMIT_DB:
            head += f", more than ±{DRIFT_LIMIT_DB:g} dB"
    fig.suptitle(f"Calibration: {head}", x=0.01, ha="left", fontsize=10)
    return fig


# --------------------------------------------------------------------------------------------
# All figures of a result
# --------------------------------------------------------------------------------------------


def available_kinds(result: Mapping[str, Any]) -> list[str]:
    """The figure kinds the data of a level result (or a calibration) allows, in order."""
    data = _as_data(result, "result")
    if "intervals" not in data:
        return ["calibration"] if _has_history(data) else []
    intervals = data.get("intervals") or []
    bands = bool((data.get("overall") or {}).get("bands"))
    kinds = []
    if len(intervals) >= 2:
        kinds.append("time")
    if bands:
        kinds.append("spectrum")
    if bands and len(intervals) >= 2 and intervals[0].get("bands"):
        kinds.append("bandmap")
    dist = data.get("distribution")
    if isinstance(dist, Mapping) and dist.get("counts"):
        kinds.append("distribution")
    if _has_history(data.get("calibration")):
        kinds.append("calibration")
    return kinds


def make_figure(
    kind: str,
    data: Mapping[str, Any],
    *,
    percentile_keys: Sequence[str] = ("LAF90",),
    events: Sequence[Mapping[str, Any]] | None = None,
    exclusions: Sequence[Mapping[str, Any]] | None = None,
    tonal_labels: Sequence[str] | None = None,
) -> Figure:
    """One figure of ``kind`` (:data:`FIGURE_KINDS`) from a level result, or a calibration
    for ``"calibration"`` (a level result's own calibration is used when given a result).

    Raises
    ------
    SettingsError
        Unknown kind, or data that cannot make it (e.g. a spectrum without bands).
    """
    data = _as_data(data, "data")
    is_result = "intervals" in data
    if kind == "calibration":
        if is_result and data.get("calibration") is None:
            raise SettingsError(f"{_name(data)}: uncalibrated result, no calibration to plot")
        return calibration_figure(data["calibration"] if is_result else data)
    if kind not in FIGURE_KINDS:
        raise SettingsError(f"figure kind must be one of {', '.join(FIGURE_KINDS)}, "
                            f"got {kind!r}")
    if not is_result:
        raise SettingsError(f"a {kind!r} figure needs a level result, not a calibration")
    if kind == "time":
        return time_history_figure(data, percentile_keys=percentile_keys, events=events,
                                   exclusions=exclusions)
    if kind == "spectrum":
        return band_spectrum_figure(data, tonal_labels=tonal_labels)
    if kind == "bandmap":
        return band_time_figure(data)
    return level_distribution_figure(data)


def figures_for_result(
    result: Mapping[str, Any],
    *,
    events: Sequence[Mapping[str, Any]] | None = None,
    exclusions: Sequence[Mapping[str, Any]] | None = None,
) -> dict[str, Figure]:
    """Every figure the data of a level result allows, kind -> Figure, in
    :data:`FIGURE_KINDS` order (see :func:`available_kinds`): the time history with two or
    more intervals, spectrum and band map with bands, the distribution when the result holds
    one, the calibration figure when ``result["calibration"]`` holds a tone level history.
    """
    data = _as_data(result, "result")
    return {kind: make_figure(kind, data, events=events, exclusions=exclusions)
            for kind in available_kinds(data)}


# --------------------------------------------------------------------------------------------
# Output
# --------------------------------------------------------------------------------------------


def _check_format(fmt: str) -> str:
    if fmt not in FORMATS:
        raise SettingsError(f"figure format must be one of {', '.join(FORMATS)}, got {fmt!r}")
    return fmt


def figure_bytes(fig: Figure, fmt: str) -> bytes:
    """The figure as a PNG (:data:`~bandmeter.plotstyle.PNG_DPI` dpi) or SVG file.

    SVG text is drawn as outlines (no fonts needed) and rasterised parts are embedded, so
    the SVG references no other file; it carries no date, and element ids are salted with a
    fixed string, so figures of the same data give the same file.

    Parameters
    ----------
    fig : matplotlib.figure.Figure
    fmt : {"png", "svg"}

    Returns
    -------
    bytes
    """
    _check_format(fmt)
    if not isinstance(fig.canvas, FigureCanvasAgg):
        FigureCanvasAgg(fig)
    buffer = io.BytesIO()
    metadata = {"Date": None} if fmt == "svg" else {"Software": "bandmeter (matplotlib)"}
    with style.styled():
        fig.savefig(buffer, format=fmt, dpi=style.PNG_DPI, metadata=metadata)
    return buffer.getvalue()


def _stem_ok(stem: str) -> str:
    if not stem or os.sep in stem or (os.altsep and os.altsep in stem) or stem in (".", ".."):
        raise SettingsError(f"figure file stem must be a plain file name, got {stem!r}")
    return stem


def figure_paths(kinds: Iterable[str], directory: str | os.PathLike[str], stem: str,
                 formats: Sequence[str] = FORMATS) -> list[Path]:
    """The files :func:`save_figures` writes: ``DIRECTORY/STEM_KIND.FMT``."""
    stem = _stem_ok(stem)
    formats = [_check_format(f) for f in formats]
    return [Path(directory) / f"{stem}_{kind}.{fmt}" for kind in kinds for fmt in formats]


def _make_dir(directory: str | os.PathLike[str]) -> None:
    try:
        os.makedirs(directory, exist_ok=True)
    except OSError as exc:
        raise OutputError(f"{os.fspath(directory)}: cannot create the folder "
                          f"({exc.strerror or exc})") from None


def save_figures(
    figures: Mapping[str, Figure],
    directory: str | os.PathLike[str],
    stem: str,
    formats: Sequence[str] = FORMATS,
    force: bool = False,
) -> list[Path]:
    """Write each figure as ``DIRECTORY/STEM_KIND.FMT`` for every format, atomically.

    Parameters
    ----------
    figures : mapping
        Kind -> Figure (e.g. :func:`figures_for_result`).
    directory : str or path-like
        Output folder (created when missing).
    stem : str
        File name prefix, e.g. the recording's stem.
    formats : sequence of {"png", "svg"}
    force : bool
        Replace existing files; without it nothing is written when any target exists.

    Returns
    -------
    list of Path
        The files written.

    Raises
    ------
    OutputError
        A target exists (without ``force``), or a file or the folder cannot be written.
    """
    paths = figure_paths(figures, directory, stem, formats)
    _make_dir(directory)
    for path in paths:
        check_writable(path, force)
    written = []
    for kind, fig in figures.items():
        for fmt in formats:
            path = Path(directory) / f"{stem}_{kind}.{fmt}"
            write_bytes(path, figure_bytes(fig, fmt), force=force)
            written.append(path)
    return written


# --------------------------------------------------------------------------------------------
# Files: what `bandmeter plot` reads
# --------------------------------------------------------------------------------------------


def _safe_stem(text: str) -> str:
    return "".join(c if c.isalnum() or c in "._-" else "_" for c in text) or "result"


def load_plot_input(path: str | os.PathLike[str]) -> list[tuple[str, Mapping[str, Any]]]:
    """What to plot from a path: ``(stem, data)`` pairs.

    Parameters
    ----------
    path : str or path-like
        A level result JSON (``bandmeter levels --json``; stem: the recording's stem), a
        calibration JSON (stem: the file's own stem), or a batch output folder (every
        measurement that succeeded, stem: its recording's stem, or its measurement id when
        two recordings share a stem).

    Raises
    ------
    SettingsError
        Not one of these, unreadable or invalid JSON.
    CalibrationError
        A malformed calibration file.
    """
    spath = os.fspath(path)
    if os.path.isdir(spath):
        return _batch_inputs(spath)
    data = read_json(spath)
    if isinstance(data, Mapping) and data.get("format") == "bandmeter-calibration":
        from .calibration import Calibration

        cal = Calibration.from_dict(data, source=spath)
        return [(_safe_stem(Path(spath).stem), cal.to_dict())]
    if isinstance(data, Mapping) and isinstance(data.get("intervals"), list) \
            and isinstance(data.get("overall"), Mapping):
        return [(_safe_stem(Path(str(data.get("file") or spath)).stem), data)]
    raise SettingsError(f"{spath}: neither a level result (`bandmeter levels --json`), a "
                        f"calibration file nor a batch output folder")


def _batch_inputs(folder: str) -> list[tuple[str, Mapping[str, Any]]]:
    from .manifest import Manifest

    manifest = Manifest.of_finished_batch(folder)
    entries = [e for e in manifest.entries.values() if Manifest.analysed(e)]
    stems = [_safe_stem(Path(str(e.get("path") or e["id"])).stem) for e in entries]
    out = []
    for entry, stem in zip(entries, stems, strict=True):
        if stems.count(stem) > 1:
            stem = _safe_stem(str(entry["id"]))
        out.append((stem, _LazyResult(os.path.join(folder, entry["result_file"]))))
    if not out:
        raise SettingsError(f"{folder}: the batch holds no analysed measurement")
    return out


class _LazyResult(Mapping[str, Any]):
    """A batch result read when first used (so a large batch is not held in memory)."""

    def __init__(self, path: str) -> None:
        self.path = path
        self._data: Mapping[str, Any] | None = None

    def _load(self) -> Mapping[str, Any]:
        if self._data is None:
            data = read_json(self.path)
            if not isinstance(data, Mapping) or not isinstance(data.get("intervals"), list):
                raise SettingsError(f"{self.path}: not a level result")
            self._data = data
        return self._data

    def release(self) -> None:
        self._data = None

    def __getitem__(self, key: str) -> Any:
        return self._load()[key]

    def __iter__(self) -> Iterator[str]:
        return iter(self._load())

    def __len__(self) -> int:
        return len(self._load())


def read_events(path: str | os.PathLike[str]) -> list[Mapping[str, Any]]:
    """Events from ``bandmeter events --json`` output (its ``events`` list) or a JSON list
    of objects with ``start_s`` and ``end_s`` (s).

    Raises
    ------
    SettingsError
        Unreadable file or no events list.
    """
    spath = os.fspath(path)
    data = read_json(spath)
    events = data.get("events") if isinstance(data, Mapping) else data
    if not isinstance(events, list):
        raise SettingsError(f"{spath}: no events list (expected `bandmeter events --json` "
                            f"output)")
    _time_ranges(events, f"{spath}: events")
    return events


def clock_origin(result: Mapping[str, Any]) -> datetime | None:
    """Clock time of the first sample of a level result, when its intervals carry it."""
    data = _as_data(result, "result")
    return _TimeAxis(_intervals(data), 0.0).origin


def _refuse_existing(kinds: Iterable[str], targets: Sequence[tuple[Any, str]], stem: str,
                     force: bool) -> None:
    """OutputError when a figure file of ``stem`` exists (without ``force``)."""
    kinds = list(kinds)
    for directory, fmt in targets:
        for target in figure_paths(kinds, directory, stem, [fmt]):
            if target.exists():
                check_writable(target, force)


def plot_path(
    path: str | os.PathLike[str],
    *,
    png_dir: str | os.PathLike[str] | None = None,
    svg_dir: str | os.PathLike[str] | None = None,
    kinds: Sequence[str] | None = None,
    force: bool = False,
    percentile_keys: Sequence[str] = ("LAF90",),
    events: Sequence[Mapping[str, Any]] | None = None,
    exclusions: Sequence[Any] | None = None,
    tonal_labels: Sequence[str] | None = None,
    stem: str | None = None,
    exclusions_csv: str | os.PathLike[str] | None = None,
) -> list[Path]:
    """Figures of a level result, calibration file or batch folder, written as PNG and/or SVG.

    Parameters
    ----------
    path : str or path-like
        See :func:`load_plot_input`.
    png_dir, svg_dir : str or path-like, optional
        Folders for PNG and SVG files (at least one; created when missing).
    kinds : sequence of str, optional
        Figure kinds (:data:`FIGURE_KINDS`); default every kind the data allows.
    force : bool
        Replace existing files (else nothing is written for a measurement any of whose
        files exist).
    percentile_keys, events, exclusions, tonal_labels
        As in :func:`make_figure` (events and exclusions only for a single result).
    stem : str, optional
        File name prefix for a single result or calibration (default: see
        :func:`load_plot_input`).
    exclusions_csv : str or path-like, optional
        A range table (:func:`bandmeter.assess.exclusions.read_ranges`; clock times need
        the result's start time) whose ranges are added to ``exclusions``.

    Returns
    -------
    list of Path
        Files written, in order.

    Raises
    ------
    SettingsError
        No output folder, bad input, or a kind the data cannot make.
    OutputError
        A file exists (without ``force``) or cannot be written.
    """
    targets = [(d, fmt) for d, fmt in ((png_dir, "png"), (svg_dir, "svg")) if d is not None]
    if not targets:
        raise SettingsError("give --png-dir and/or --svg-dir (where to write the figures)")
    wanted = None if kinds is None else list(dict.fromkeys(kinds))
    for kind in wanted or ():
        if kind not in FIGURE_KINDS:
            raise SettingsError(f"figure kind must be one of {', '.join(FIGURE_KINDS)}, "
                                f"got {kind!r}")
    inputs = load_plot_input(path)
    if len(inputs) > 1 and (events or exclusions or exclusions_csv or stem):
        raise SettingsError(f"{os.fspath(path)} is a batch folder: events, exclusions and a "
                            f"stem go with a single result")
    if exclusions_csv is not None:
        from .assess.exclusions import read_ranges

        data = inputs[0][1]
        origin = clock_origin(data) if "intervals" in data else None
        exclusions = [*(exclusions or ()), *read_ranges(os.fspath(exclusions_csv), origin)]
    if stem is not None:
        inputs = [(_stem_ok(stem), inputs[0][1])]
    if wanted is not None:  # refuse before writing anything when a target exists
        for name, _ in inputs:
            _refuse_existing(wanted, targets, name, force)
    written: list[Path] = []
    for name, data in inputs:
        try:
            chosen = wanted if wanted is not None else available_kinds(data)
            if not chosen:
                raise SettingsError(f"{name}: nothing to plot (no intervals, bands, "
                                    f"distribution or calibration history)")
            figures = {kind: make_figure(kind, data, percentile_keys=percentile_keys,
                                         events=events, exclusions=exclusions,
                                         tonal_labels=tonal_labels) for kind in chosen}
            _refuse_existing(figures, targets, name, force)
            for directory, fmt in targets:
                written += save_figures(figures, directory, name, [fmt], force=force)
            for fig in figures.values():
                fig.clear()
        finally:
            if isinstance(data, _LazyResult):
                data.release()
    return written
