"""Tables of results: rows as dictionaries, and atomic CSV writing.

Wide rows hold one row per interval (plus a first row for the whole recording, ``interval =
"all"``) with one column per metric and, when bands were analysed, one column per band and
band metric, named ``<metric>_<band label>`` (e.g. ``LZeq_1k``, ``LZeq_31.5``). Tidy rows hold
one row per interval x band, for pandas and databases.
"""

from __future__ import annotations

import csv
import io
import math
import os
from collections.abc import Iterable, Sequence
from typing import Any

from .outputs import write_text
from .results import IntervalResult, LevelResult

_ROW_KEYS = ("interval", "start_s", "start_time", "duration_s", "partial", "overload",
             "full_scale_samples")


def _base(result: LevelResult, iv: IntervalResult) -> dict[str, Any]:
    return {
        "file": result.file,
        "channel": result.channel,
        "interval": "all" if iv.index < 0 else iv.index,
        "start_s": iv.start_s,
        "start_time": iv.start_time or "",
        "duration_s": iv.duration_s,
        "partial": iv.partial,
        "overload": iv.overload,
        "full_scale_samples": iv.full_scale_samples,
    }


def wide_rows(result: LevelResult, include_overall: bool = True) -> list[dict[str, Any]]:
    """One row per interval (whole recording first), metrics and band levels as columns."""
    rows = []
    items = ([result.overall] if include_overall else []) + list(result.intervals)
    for iv in items:
        row = _base(result, iv)
        row.update(iv.metrics)
        for band in iv.bands or []:
            for key, value in band.levels.items():
                row[f"{key}_{band.label}"] = value
        rows.append(row)
    return rows


def tidy_band_rows(result: LevelResult, include_overall: bool = True) -> list[dict[str, Any]]:
    """One row per interval x band with ``nominal_hz``, ``exact_hz``, ``band`` and levels."""
    rows = []
    items = ([result.overall] if include_overall else []) + list(result.intervals)
    for iv in items:
        for band in iv.bands or []:
            row = _base(result, iv)
            row.update({"band": band.label, "nominal_hz": band.nominal_hz,
                        "exact_hz": band.exact_hz})
            row.update(band.levels)
            rows.append(row)
    return rows


def _cell(value: Any) -> Any:
    if isinstance(value, float):
        if math.isnan(value):
            return ""
        if math.isinf(value):
            return "-inf" if value < 0 else "inf"
        return repr(round(value, 6))
    if isinstance(value, bool):
        return "true" if value else "false"
    return value


def csv_text(rows: Sequence[dict[str, Any]], columns: Sequence[str] | None = None) -> str:
    """Rows as CSV text (header from the union of keys in first-seen order)."""
    if columns is None:
        seen: dict[str, None] = {}
        for row in rows:
            for key in row:
                seen.setdefault(key, None)
        columns = list(seen)
    buffer = io.StringIO()
    writer = csv.DictWriter(buffer, fieldnames=list(columns), lineterminator="\n",
                            extrasaction="ignore")
    writer.writeheader()
    for row in rows:
        writer.writerow({k: _cell(row.get(k, "")) for k in columns})
    return buffer.getvalue()


def write_csv(
    path: str | os.PathLike[str], rows: Iterable[dict[str, Any]], force: bool = False,
    columns: Sequence[str] | None = None,
) -> None:
    """Write rows to a CSV file atomically; refuses an existing file without ``force``."""
    write_text(path, csv_text(list(rows), columns), force=force)
