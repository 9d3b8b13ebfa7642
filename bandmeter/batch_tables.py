"""The combined tables of a batch, rebuilt from the per-measurement results.

Files written in the batch output folder (all atomically):

``summary.csv``
    One row per measurement: id, file, number of files joined, status and error, duration,
    sample rate, channel, start time and its source, calibration id, source and full-scale
    level, the overload flag and the samples at full scale, warnings, and the
    whole-recording metrics.
``intervals.csv``, ``intervals.parquet``
    One row per measurement x interval with the broadband metrics (tidy: for pandas,
    databases, spreadsheets).
``bands.csv``, ``bands.parquet``
    With a band analysis: one row per measurement x interval x band (``band``,
    ``nominal_hz``, ``exact_hz`` and the band levels), and one row per measurement x band for
    the whole recording (``interval`` empty).

Every row of an interval (or of the whole recording) carries ``overload`` (true when samples
reached full scale: the levels there may be too low) and ``full_scale_samples``.
"""

from __future__ import annotations

import json
import os
from collections.abc import Iterable, Sequence
from typing import Any

from .outputs import atomic_open, write_text
from .tables import csv_text

_INTERVAL_KEYS = ("index", "start_s", "start_time", "duration_s", "partial", "overload",
                  "full_scale_samples")
_SUMMARY_FIELDS = ("id", "file", "files", "status", "error", "reused", "duration_s",
                   "sample_rate", "channel", "start_time", "start_source", "calibration_id",
                   "calibration_source", "full_scale_level_db", "overload",
                   "full_scale_samples", "warnings")


def _load(out_dir: str, entry: dict[str, Any]) -> dict[str, Any] | None:
    name = entry.get("result_file")
    if entry.get("status") != "ok" or not name:
        return None
    with open(os.path.join(out_dir, name), encoding="utf-8") as handle:
        return json.load(handle)


def _metric_items(row: dict[str, Any]) -> dict[str, Any]:
    return {k: v for k, v in row.items()
            if k not in _INTERVAL_KEYS and k not in ("bands", "index")}


def summary_row(entry: dict[str, Any], data: dict[str, Any] | None, reused: bool) -> dict:
    """One summary row from a manifest entry and its result data (None when failed)."""
    row: dict[str, Any] = {
        "id": entry["id"],
        "file": entry["path"],
        "files": len(entry.get("files") or [entry["path"]]),
        "status": entry["status"],
        "error": entry.get("error") or "",
        "reused": reused,
        "start_time": entry.get("start_time") or "",
        "start_source": entry.get("start_source") or "",
        "calibration_id": entry.get("calibration_id") or "",
        "calibration_source": entry.get("calibration_source") or "",
    }
    if data is not None:
        cal = data.get("calibration") or {}
        row.update({
            "duration_s": data["duration_s"],
            "sample_rate": data["sample_rate"],
            "channel": data["channel"],
            "full_scale_level_db": cal.get("full_scale_level_db"),
            "overload": data["overall"]["overload"],
            "full_scale_samples": data["overall"]["full_scale_samples"],
            "warnings": " | ".join(data.get("warnings") or []),
        })
        row.update(_metric_items(data["overall"]))
    return row


def interval_rows(entry_id: str, data: dict[str, Any]) -> Iterable[dict[str, Any]]:
    """Tidy interval rows of one measurement."""
    for iv in data["intervals"]:
        row = {"id": entry_id, "file": data["file"], "channel": data["channel"],
               "interval": iv["index"]}
        row.update({k: iv.get(k) for k in _INTERVAL_KEYS if k != "index"})
        row.update(_metric_items(iv))
        yield row


def band_rows(entry_id: str, data: dict[str, Any]) -> Iterable[dict[str, Any]]:
    """Tidy band rows of one measurement: the whole recording, then each interval."""
    for iv in [data["overall"], *data["intervals"]]:
        for band in iv.get("bands") or []:
            row = {"id": entry_id, "file": data["file"], "channel": data["channel"],
                   "interval": None if iv["index"] < 0 else iv["index"],
                   "start_s": iv["start_s"], "start_time": iv.get("start_time"),
                   "duration_s": iv["duration_s"], "partial": iv["partial"],
                   "overload": iv["overload"], "full_scale_samples": iv["full_scale_samples"],
                   "band": band["label"],
                   "nominal_hz": band["nominal_hz"], "exact_hz": band["exact_hz"]}
            row.update({k: v for k, v in band.items()
                        if k not in ("label", "nominal_hz", "exact_hz")})
            yield row


def _columns(rows: Sequence[dict[str, Any]], first: Sequence[str] = ()) -> list[str]:
    seen: dict[str, None] = {k: None for k in first}
    for row in rows:
        for key in row:
            seen.setdefault(key, None)
    return list(seen)


def write_parquet(path: str, rows: Sequence[dict[str, Any]], columns: Sequence[str]) -> None:
    """Write rows to a Parquet file atomically (pyarrow); missing values are nulls."""
    import pyarrow as pa
    import pyarrow.parquet as pq

    data = {c: [_null(r.get(c)) for r in rows] for c in columns}
    table = pa.table(data) if rows else pa.table({c: pa.array([], pa.null()) for c in columns})
    with atomic_open(path, "wb", force=True) as handle:
        pq.write_table(table, handle)


def _null(value: Any) -> Any:
    if isinstance(value, float) and (value != value or abs(value) == float("inf")):
        return None
    return value


def write_tables(out_dir: str, entries: Sequence[dict[str, Any]],
                 reused: set[str]) -> dict[str, str]:
    """Rebuild every combined table from the entries' result files; return the paths."""
    summary, intervals, bands = [], [], []
    for entry in entries:
        data = _load(out_dir, entry)
        summary.append(summary_row(entry, data, entry["id"] in reused))
        if data is not None:
            intervals.extend(interval_rows(entry["id"], data))
            bands.extend(band_rows(entry["id"], data))
    written = {}
    path = os.path.join(out_dir, "summary.csv")
    write_text(path, csv_text(summary, _columns(summary, _SUMMARY_FIELDS)), force=True)
    written["summary"] = path
    for name, rows in (("intervals", intervals), ("bands", bands)):
        if name == "bands" and not rows:
            continue
        columns = _columns(rows)
        csv_path = os.path.join(out_dir, f"{name}.csv")
        write_text(csv_path, csv_text(rows, columns), force=True)
        parquet_path = os.path.join(out_dir, f"{name}.parquet")
        write_parquet(parquet_path, rows, columns)
        written[name] = csv_path
        written[f"{name}_parquet"] = parquet_path
    return written
