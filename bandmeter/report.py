"""One self-contained HTML report of a batch output folder or of a single level result.

The report is a single HTML file: figures are inline PNG images (``data:`` URIs), the style
sheet is inline, and nothing is linked (no scripts, fonts, style sheets or images from
elsewhere), so it opens in any browser without a network and can be archived or sent as it
is. It prints on A4 (``@page`` rule, figures and tables kept whole where they fit).

Contents, in order:

1. title, sources, tool version, creation time, and the cautions;
2. summary: one row per measurement (whole-recording LAeq, LAFmax, LAF90, LCpeak, duration,
   start, calibration, overload) and the measurements that failed with their errors;
3. assessments present: the ``--include`` files (``events --json``, ``rating --json``,
   ``exposure --json`` outputs), each as tables;
4. per measurement: whole-recording metrics, warnings, the figures of :mod:`bandmeter.plots`
   (time history, band spectrum, band-time map, level distribution, calibration), the tone
   screen of one-third-octave results, the band table, calibration and drift, and the
   interval table (at most :data:`MAX_INTERVAL_ROWS` rows; the full tables are in the batch
   folder or the ``levels`` outputs);
5. provenance: per measurement the recording files with size and SHA-256, the calibration
   source and its SHA-256, tool version, the analysis settings and their hash.

Levels are as the results state them (dB re 20 uPa when calibrated, dB re full scale when
not; the unit is printed with every table).
"""

from __future__ import annotations

import base64
import html
import json
import math
import os
from collections.abc import Iterable, Mapping, Sequence
from dataclasses import dataclass, field
from typing import Any

from . import __version__
from .errors import SettingsError
from .manifest import settings_hash
from .outputs import check_writable, json_safe, read_json, write_text
from .provenance import now_iso

__all__ = [
    "CAUTION",
    "MAX_INTERVAL_ROWS",
    "Included",
    "ReportSource",
    "build_report",
    "source_from_result",
    "load_includes",
    "load_source",
    "report_path",
    "write_report",
]

#: Printed at the top of every report.
CAUTION = (
    "Results are indicative. They are computed from the recordings and calibrations listed "
    "under provenance and are only as good as the measurement chain, its calibration and the "
    "measurement procedure. Ratings, exposure and dose figures are no substitute for an "
    "assessment by a competent person under the applicable regulations; compliance and "
    "hearing-protection decisions follow local codes, standards and licensed practice. "
    "bandmeter verifies its own digital processing only, not the microphone, preamplifier or "
    "recorder."
)
#: Interval rows shown per measurement; longer results show the first rows and say so.
MAX_INTERVAL_ROWS = 500
#: Whole-recording metrics in the summary table, in order (the ``_dBFS`` forms when
#: uncalibrated).
SUMMARY_METRICS = ("LAeq", "LAFmax", "LAF90", "LCpeak")
#: Texts longer than this (characters) are listed below a table instead of in a cell.
_LONG_TEXT = 40

_STYLE = """
@page { size: A4; margin: 14mm 12mm; }
body { font-family: "DejaVu Sans", "Helvetica", "Arial", sans-serif; font-size: 10pt;
       color: #1a1a1a; max-width: 190mm; margin: 0 auto; padding: 6mm 0; }
h1 { font-size: 17pt; margin: 0 0 2mm 0; }
h2 { font-size: 13pt; border-bottom: 1.5px solid #0072b2; padding-bottom: 1mm;
     margin-top: 8mm; }
h3 { font-size: 11pt; margin: 5mm 0 2mm 0; }
table { border-collapse: collapse; margin: 2mm 0 4mm 0; font-size: 8.5pt; }
th, td { border: 0.6px solid #b0b0b0; padding: 1px 4px; text-align: right; }
td { overflow-wrap: anywhere; }
th { background: #eef3f8; font-size: 8pt; overflow-wrap: normal; }
td.t, th.t { text-align: left; }
tr.flag td { background: #fdf0e1; }
.caution { border: 1.5px solid #d55e00; background: #fff7f0; padding: 2mm 3mm;
           margin: 3mm 0; }
.warn { color: #a04000; }
.meta { color: #444; }
figure { margin: 3mm 0; page-break-inside: avoid; break-inside: avoid; }
figure img { max-width: 100%; height: auto; }
figcaption { font-size: 8.5pt; color: #444; }
code, pre { font-family: "DejaVu Sans Mono", monospace; font-size: 8pt; }
pre { white-space: pre-wrap; word-break: break-all; background: #f6f6f6; padding: 2mm; }
section.measurement { page-break-before: always; break-before: page; }
@media print { h2, h3 { page-break-after: avoid; break-after: avoid; } }
"""

_FIGURE_CAPTIONS = {
    "time": "Time history: LAeq per interval with LAFmax and LAF90; overload intervals, "
            "events and exclusions marked.",
    "spectrum": "Band spectrum of the whole recording: band Leq and A-weighted band levels; "
                "tonal bands marked.",
    "bandmap": "Band levels over time.",
    "distribution": "Distribution of the F time-weighted A level over the whole recording, "
                    "with the percentile levels.",
    "calibration": "Calibrator tone level over each tone file, with the span measured; drift "
                   "between the pre and post tones.",
}


# --------------------------------------------------------------------------------------------
# Sources
# --------------------------------------------------------------------------------------------


@dataclass
class Measurement:
    """One analysed measurement: its result data and, in a batch, its manifest entry."""

    name: str
    result: Mapping[str, Any]
    entry: Mapping[str, Any] | None = None


@dataclass
class ReportSource:
    """What a report is made of: measurements that succeeded and the ones that failed."""

    path: str
    kind: str  # "batch" or "result"
    measurements: list[Measurement]
    failed: list[Mapping[str, Any]] = field(default_factory=list)
    settings: Mapping[str, Any] | None = None


def _as_mapping(result: Any) -> Mapping[str, Any]:
    if isinstance(result, Mapping):
        return result
    if hasattr(result, "to_dict"):
        return json_safe(result.to_dict())  # type: ignore[return-value]
    raise SettingsError(f"not a level result: {type(result).__name__}")


def source_from_result(result: Any, path: str = "") -> ReportSource:
    """A report source of one level result (a :class:`~bandmeter.results.LevelResult` or its
    ``to_dict()``)."""
    data = _as_mapping(result)
    name = os.path.basename(str(data.get("file") or path or "recording"))
    return ReportSource(path or str(data.get("file", "")), "result", [Measurement(name, data)],
                        settings=data.get("settings"))


def load_source(path: str | os.PathLike[str]) -> ReportSource:
    """Read a batch output folder or a ``levels --json`` file.

    Raises
    ------
    SettingsError
        Neither, unreadable, or invalid JSON (one-line message naming the path).
    """
    spath = os.fspath(path)
    if os.path.isdir(spath):
        from .manifest import Manifest

        manifest = Manifest.of_finished_batch(
            spath, "; give a batch --out folder or a `levels --json` file")
        measurements, failed = [], []
        for entry in manifest.entries.values():
            if Manifest.analysed(entry):
                data = read_json(os.path.join(spath, str(entry["result_file"])))
                if not isinstance(data, Mapping) or not isinstance(data.get("overall"),
                                                                   Mapping):
                    raise SettingsError(f"{entry['result_file']}: not a level result")
                name = os.path.basename(str(entry.get("path") or data.get("file") or ""))
                measurements.append(Measurement(name, data, entry))
            else:
                failed.append(entry)
        if not measurements and not failed:
            raise SettingsError(f"{spath}: the batch holds no measurement")
        return ReportSource(spath, "batch", measurements, failed, manifest.settings)
    data = read_json(spath)
    if not (isinstance(data, Mapping) and isinstance(data.get("overall"), Mapping)
            and isinstance(data.get("intervals"), list)):
        raise SettingsError(f"{spath}: not a level result (`bandmeter levels FILE --json`) or "
                            "a batch output folder")
    return source_from_result(data, spath)


# --------------------------------------------------------------------------------------------
# Included assessments
# --------------------------------------------------------------------------------------------


@dataclass
class Included:
    """An assessment output included in the report: ``kind`` is events, rating or exposure."""

    path: str
    kind: str
    data: Mapping[str, Any]


def _include_kind(data: Any) -> str | None:
    if not isinstance(data, Mapping):
        return None
    if "rule" in data and ("events" in data or "measurements" in data):
        return "events"
    if "days" in data and "periods" in data and "overall" in data:
        return "rating"
    if "LEX_8h_dBA" in data and "tasks" in data:
        return "exposure"
    return None


def load_includes(paths: Iterable[str | os.PathLike[str]]) -> list[Included]:
    """Read assessment outputs (``events --json``, ``rating --json``, ``exposure --json``).

    Raises
    ------
    SettingsError
        A file that is none of these (one line naming it).
    """
    out = []
    for path in paths:
        spath = os.fspath(path)
        data = read_json(spath)
        kind = _include_kind(data)
        if kind is None:
            raise SettingsError(f"{spath}: not an events, rating or exposure JSON output "
                                "(`bandmeter events|rating|exposure ... --json`)")
        out.append(Included(spath, kind, data))
    return out


def _events_for(measurement: Measurement, included: Sequence[Included]) -> list[Mapping]:
    """Events of the included events outputs that belong to this measurement."""
    file = str(measurement.result.get("file", ""))
    mid = measurement.entry.get("id") if measurement.entry else None
    found: list[Mapping] = []
    for inc in included:
        if inc.kind != "events":
            continue
        if "measurements" in inc.data:
            for m in inc.data["measurements"]:
                if (mid is not None and m.get("id") == mid) or m.get("file") == file:
                    found.extend(m.get("events") or [])
        elif os.path.basename(str(inc.data.get("file", ""))) == os.path.basename(file):
            found.extend(inc.data.get("events") or [])
    return found


# --------------------------------------------------------------------------------------------
# HTML pieces
# --------------------------------------------------------------------------------------------


def _e(value: Any) -> str:
    return html.escape(str(value), quote=True)


def _fmt(value: Any, decimals: int = 1) -> str:
    if value is None:
        return "-"
    if isinstance(value, bool):
        return "yes" if value else "no"
    if isinstance(value, float):
        if math.isnan(value):
            return "-"
        if math.isinf(value):
            return "-inf" if value < 0 else "inf"
        return f"{value:.{decimals}f}"
    return str(value)


def _table(headers: Sequence[str], rows: Iterable[Sequence[Any]], text_cols: int = 1,
           flags: Sequence[bool] | None = None, decimals: int = 1) -> str:
    """An HTML table; the first ``text_cols`` columns are left-aligned text."""
    head = "".join(f'<th class="{"t" if i < text_cols else ""}">{_e(h)}</th>'
                   for i, h in enumerate(headers))
    body = []
    for r, row in enumerate(rows):
        cls = ' class="flag"' if flags is not None and flags[r] else ""
        cells = "".join(f'<td class="{"t" if i < text_cols else ""}">{_e(_fmt(v, decimals))}'
                        "</td>" for i, v in enumerate(row))
        body.append(f"<tr{cls}>{cells}</tr>")
    return f"<table><thead><tr>{head}</tr></thead><tbody>{''.join(body)}</tbody></table>"


def _key_table(pairs: Sequence[tuple[str, Any]], decimals: int = 2) -> str:
    rows = "".join(f'<tr><th class="t">{_e(k)}</th><td class="t">{_e(_fmt(v, decimals))}</td>'
                   "</tr>" for k, v in pairs)
    return f"<table><tbody>{rows}</tbody></table>"


def _records(items: Sequence[Mapping[str, Any]], decimals: int = 1) -> str:
    """A table of dicts: the columns are their scalar keys, in first-seen order. Long texts
    (over :data:`_LONG_TEXT` characters, e.g. a source citation) go below the table."""
    cols: list[str] = []
    for item in items:
        for key, value in item.items():
            if key not in cols and not isinstance(value, (dict, list)):
                cols.append(key)
    long = [c for c in cols if any(isinstance(i.get(c), str) and len(i[c]) > _LONG_TEXT
                                   for i in items)]
    cols = [c for c in cols if c not in long]
    text = [c for c in cols if all(isinstance(i.get(c), str) or i.get(c) is None
                                   for i in items)]
    ordered = text + [c for c in cols if c not in text]
    notes = [f"{i.get(ordered[0]) if ordered else ''} {c}: {i[c]}" for i in items for c in long
             if i.get(c)]
    return (_table(ordered, ([i.get(c) for c in ordered] for i in items), len(text),
                   decimals=decimals)
            + (f'<ul class="meta">{"".join(f"<li>{_e(n)}</li>" for n in notes)}</ul>'
               if notes else ""))


def _warnings(items: Iterable[str]) -> str:
    lines = [f'<li class="warn">{_e(w)}</li>' for w in items]
    return f"<ul>{''.join(lines)}</ul>" if lines else ""


def _figure_html(kind: str, fig: Any) -> str:
    from .plots import figure_bytes

    png = figure_bytes(fig, "png")
    data = base64.b64encode(png).decode("ascii")
    return (f'<figure class="fig-{kind}"><img alt="{_e(kind)} figure" '
            f'src="data:image/png;base64,{data}"><figcaption>{_e(_FIGURE_CAPTIONS[kind])}'
            "</figcaption></figure>")


# --------------------------------------------------------------------------------------------
# Sections
# --------------------------------------------------------------------------------------------


def _suffix(result: Mapping[str, Any]) -> str:
    return "" if result.get("calibration") else "_dBFS"


def _unit(result: Mapping[str, Any]) -> str:
    return "dB re 20 µPa" if result.get("calibration") else "dB re full scale (uncalibrated)"


def _summary(source: ReportSource) -> str:
    rows, flags = [], []
    for m in source.measurements:
        r, suffix = m.result, _suffix(m.result)
        overall = r["overall"]
        cal = r.get("calibration") or {}
        rows.append([m.name, str(r["intervals"][0].get("start_time", "-") if r["intervals"]
                                 else "-"),
                     float(r.get("duration_s", math.nan)) / 60.0,
                     *[overall.get(k + suffix) for k in SUMMARY_METRICS],
                     cal.get("full_scale_level_db"), cal.get("drift_db"),
                     int(overall.get("full_scale_samples", 0))])
        flags.append(bool(overall.get("overload")))
    headers = ["recording", "start", "minutes", *SUMMARY_METRICS, "cal. full scale dB",
               "drift dB", "samples at full scale"]
    parts = ["<h2>Summary</h2>",
             f'<p class="meta">Levels in dB re 20 µPa (uncalibrated results: dB re full '
             f"scale). {len(source.measurements)} measurement(s) analysed"
             f"{f', {len(source.failed)} failed' if source.failed else ''}. Rows with "
             "samples at full scale (possible overload) are shaded.</p>",
             _table(headers, rows, 2, flags)]
    if source.failed:
        parts += ["<h3>Failed</h3>",
                  _table(["recording", "error"],
                         [[str(f.get("path", f.get("id"))), str(f.get("error", ""))]
                          for f in source.failed], 2)]
    return "\n".join(parts)


def _included_section(included: Sequence[Included]) -> str:
    if not included:
        return ""
    parts = ["<h2>Assessments</h2>"]
    for inc in included:
        d = inc.data
        parts.append(f"<h3>{_e(inc.kind.capitalize())}: {_e(os.path.basename(inc.path))}</h3>")
        if inc.kind == "events":
            parts.append(f'<p class="meta">Rule: {_e(d.get("rule", ""))}</p>')
            groups = d["measurements"] if "measurements" in d else [d]
            for g in groups:
                events = [{k: v for k, v in e.items() if k != "bands"}
                          for e in g.get("events") or []]
                label = os.path.basename(str(g.get("file", "")))
                parts.append(f"<p>{_e(label)}: {len(events)} event(s)"
                             f"{'; ' + _e(g['error']) if g.get('error') else ''}</p>")
                if events:
                    parts.append(_records(events))
        elif inc.kind == "rating":
            overall = d["overall"]
            parts.append(_records(overall if isinstance(overall, list) else [overall]))
            if d.get("days"):
                parts.append(_records(d["days"]))
            parts.append(_warnings(d.get("warnings") or []))
        else:  # exposure
            parts.append(_key_table([("LEX,8h dB(A)", d.get("LEX_8h_dBA")),
                                     ("total duration h", d.get("total_duration_h")),
                                     ("highest LCpeak dB(C)", d.get("LCpeak_max_dBC")),
                                     ("values exceeded", ", ".join(d.get("exceeded") or [])
                                      or "none")]))
            parts.append(_records(d.get("tasks") or []))
            if d.get("eu_2003_10_ec"):
                parts.append(_records(d["eu_2003_10_ec"]))
            if d.get("doses"):
                parts.append(_records(d["doses"]))
            parts.append(_warnings(list(d.get("notes") or [])))
        if d.get("caution"):
            parts.append(f'<p class="caution">{_e(d["caution"])}</p>')
    return "\n".join(parts)


def _band_table(result: Mapping[str, Any]) -> str:
    bands = result["overall"].get("bands")
    if not bands:
        return ""
    keys = [k for k in bands[0] if k not in ("nominal_hz", "exact_hz", "label")]
    rows = [[b["label"], b["exact_hz"], *[b.get(k) for k in keys]] for b in bands]
    return ("<h3>Bands, whole recording</h3>"
            + _table(["band Hz", "exact Hz", *keys], rows, 1))


def _tone_section(result: Mapping[str, Any]) -> str:
    settings = result.get("settings") or {}
    if settings.get("bands") != 3 or settings.get("band_weighting") != "Z":
        return ""
    from .assess.tonality import screen_third_octaves
    from .results import BandLevels

    key = "LZeq" + _suffix(result)
    bands = [BandLevels(b["nominal_hz"], b["exact_hz"], b["label"], {key: b[key]})
             for b in result["overall"]["bands"]]
    tones = screen_third_octaves(bands, key=key)
    found = [t.to_dict() for t in tones] if tones else []
    text = ("no band exceeds both neighbours by the required difference" if not found else
            ", ".join(f"{t['nominal_hz']:g} Hz (+{t['margin_db']:.1f} dB over the required "
                      f"{t['required_db']:g} dB)" for t in found))
    return ("<h3>Tone screen</h3><p>One-third-octave bands above both neighbours by 15/8/5 dB "
            "(low/middle/high bands; ISO 1996-2 Annex K; differences from memory, "
            f"unconfirmed), whole recording: {_e(text)}.</p>")


def _calibration_section(result: Mapping[str, Any]) -> str:
    cal = result.get("calibration")
    if not cal:
        return ('<h3>Calibration</h3><p class="warn">Uncalibrated: levels are in dB re full '
                "scale, not sound pressure levels.</p>")
    post = cal.get("post") or {}
    pairs = [("source", os.path.basename(str(cal.get("source_file") or cal.get("source", "-")))),
             ("full-scale level dB re 20 µPa", cal.get("full_scale_level_db")),
             ("reference level dB", cal.get("reference_level_db")),
             ("tone frequency Hz", cal.get("frequency_hz")),
             ("stability dB", cal.get("stability_db")),
             ("signal-to-noise dB", cal.get("snr_db")),
             ("span s", "-" if not cal.get("span_s") else
              "{:.1f} to {:.1f}".format(*cal["span_s"])),
             ("post tone", os.path.basename(str(post.get("source_file", "-"))) if post
              else "none"),
             ("drift dB (post - pre)", cal.get("drift_db"))]
    return "<h3>Calibration</h3>" + _key_table(pairs, 3) + _warnings(cal.get("warnings") or [])


def _interval_table(result: Mapping[str, Any]) -> str:
    intervals = result["intervals"]
    if len(intervals) < 2:
        return ""
    suffix = _suffix(result)
    keys = [k + suffix for k in ("LAeq", "LAFmax", "LAFmin", "LAF10", "LAF90", "LCpeak")
            if k + suffix in intervals[0]]
    shown = intervals[:MAX_INTERVAL_ROWS]
    rows = [[iv.get("start_time", "-"), iv["start_s"], iv["duration_s"],
             *[iv.get(k) for k in keys], int(iv.get("full_scale_samples", 0))] for iv in shown]
    note = ("" if len(intervals) <= MAX_INTERVAL_ROWS else
            f'<p class="meta">First {MAX_INTERVAL_ROWS} of {len(intervals)} intervals; all of '
            "them are in the interval tables (intervals.csv / .parquet, or levels -o).</p>")
    return (f"<h3>Intervals ({len(intervals)})</h3>" + note
            + _table(["clock", "start s", "duration s", *keys, "samples at full scale"], rows,
                     1, [bool(iv.get("overload")) for iv in shown]))


def _measurement_section(m: Measurement, included: Sequence[Included],
                         figure_kinds: Sequence[str]) -> str:
    from .plots import available_kinds, make_figure

    r = m.result
    suffix = _suffix(r)
    overall = r["overall"]
    metrics = [(k, v) for k, v in overall.items()
               if k.startswith("L") and k.endswith(suffix) and isinstance(v, (int, float))
               and (suffix or not k.endswith("_dBFS"))]
    parts = [f'<section class="measurement"><h2>{_e(m.name)}</h2>',
             f'<p class="meta">{_e(r.get("file", ""))}; channel {_e(r.get("channel", 1))}; '
             f'{_fmt(float(r.get("duration_s", math.nan)), 1)} s at '
             f'{_e(r.get("sample_rate", "-"))} Hz; levels in {_e(_unit(r))}'
             f'{"; start " + _e(r["intervals"][0]["start_time"]) if r["intervals"] and r["intervals"][0].get("start_time") else ""}'  # noqa: E501
             "</p>"]
    if overall.get("overload"):
        parts.append(f'<p class="warn">{int(overall.get("full_scale_samples", 0))} sample(s) at '
                     "or beyond full scale: possible overload; levels of the flagged intervals "
                     "may be too low.</p>")
    parts.append(_warnings(r.get("warnings") or []))
    parts.append("<h3>Whole recording</h3>")
    half = (len(metrics) + 1) // 2
    pairs = [[a[0], a[1], *(b if b else ("", None))]
             for a, b in zip(metrics[:half], [*metrics[half:], None], strict=False)]
    parts.append(_table(["metric", "dB", "metric", "dB"], pairs, 1))
    events = _events_for(m, included)
    kinds = [k for k in available_kinds(r) if k in figure_kinds]
    for kind in kinds:
        fig = make_figure(kind, r, events=events or None)
        parts.append(_figure_html(kind, fig))
    parts.append(_tone_section(r))
    parts.append(_band_table(r))
    parts.append(_calibration_section(r))
    parts.append(_interval_table(r))
    parts.append("</section>")
    return "\n".join(p for p in parts if p)


def _provenance(source: ReportSource) -> str:
    parts = ["<h2>Provenance</h2>"]
    rows = []
    for m in source.measurements:
        r = m.result
        prov = r.get("provenance") or {}
        rec = r.get("recording") or {}
        parts_info = rec.get("parts")
        files = parts_info if parts_info else [{"path": rec.get("path", r.get("file")),
                                                "sha256": prov.get("sha256")}]
        for f in files:
            rows.append([os.path.basename(str(f.get("path"))), str(f.get("sha256", "-")),
                         (m.entry or {}).get("size", "-"), str(prov.get("tool_version", "-"))])
    parts.append(_table(["recording", "SHA-256", "bytes", "tool version"], rows, 2))
    cal_rows = []
    for m in source.measurements:
        cal = m.result.get("calibration")
        if cal:
            cal_rows.append([m.name, os.path.basename(str(cal.get("source_file", "-"))),
                             str(cal.get("source_sha256", "-")),
                             str((m.entry or {}).get("calibration_id", "-"))])
    if cal_rows:
        parts += ["<h3>Calibrations</h3>",
                  _table(["recording", "tone file", "SHA-256", "calibration id"], cal_rows, 4)]
    settings = source.settings or (source.measurements[0].result.get("settings")
                                   if source.measurements else None)
    if settings:
        parts += [f"<h3>Analysis settings (hash {_e(settings_hash(dict(settings)))})</h3>",
                  f"<pre>{_e(json.dumps(json_safe(settings), indent=1, sort_keys=True))}"
                  "</pre>"]
    return "\n".join(parts)


def build_report(
    source: ReportSource,
    included: Sequence[Included] = (),
    *,
    title: str | None = None,
    figure_kinds: Sequence[str] | None = None,
) -> str:
    """The report as one HTML document (text).

    Parameters
    ----------
    source : ReportSource
        From :func:`load_source` or :func:`source_from_result`.
    included : sequence of Included
        Assessment outputs to include (:func:`load_includes`); events are also drawn on the
        time history of their measurement.
    title : str, optional
        Report title (default: from the source's name).
    figure_kinds : sequence of str, optional
        Figures to include (default: every kind of :data:`bandmeter.plots.FIGURE_KINDS` the
        data allows).
    """
    from .plots import FIGURE_KINDS

    kinds = FIGURE_KINDS if figure_kinds is None else tuple(figure_kinds)
    bad = [k for k in kinds if k not in FIGURE_KINDS]
    if bad:
        raise SettingsError(f"unknown figure kind(s) {bad}; choose from {list(FIGURE_KINDS)}")
    name = os.path.basename(os.path.normpath(source.path)) or "results"
    heading = title or f"Sound level report: {name}"
    head = [
        "<!DOCTYPE html>", '<html lang="en"><head><meta charset="utf-8">',
        f"<title>{_e(heading)}</title>",
        '<meta name="generator" content="bandmeter">',
        f"<style>{_STYLE}</style></head><body>",
        f"<h1>{_e(heading)}</h1>",
        f'<p class="meta">Source: {_e(source.path)} ({_e(source.kind)}); made '
        f"{_e(now_iso())} by bandmeter {_e(__version__)}.</p>",
        f'<p class="caution"><strong>Caution.</strong> {_e(CAUTION)}</p>',
    ]
    body = [_summary(source), _included_section(included)]
    body += [_measurement_section(m, included, kinds) for m in source.measurements]
    body.append(_provenance(source))
    return "\n".join([*head, *(b for b in body if b), "</body></html>", ""])


def write_report(path: str | os.PathLike[str], text: str, force: bool = False) -> None:
    """Write the report atomically; an existing file is kept unless ``force``."""
    write_text(path, text, force=force)


def report_path(
    source_path: str | os.PathLike[str],
    output: str | os.PathLike[str],
    include: Sequence[str | os.PathLike[str]] = (),
    *,
    force: bool = False,
    title: str | None = None,
    figure_kinds: Sequence[str] | None = None,
) -> str:
    """The ``bandmeter report`` command: read, build, write; returns the path written."""
    check_writable(output, force)
    source = load_source(source_path)
    text = build_report(source, load_includes(include), title=title, figure_kinds=figure_kinds)
    write_report(output, text, force=force)
    return os.fspath(output)
