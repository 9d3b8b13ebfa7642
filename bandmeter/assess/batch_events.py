"""Noise events over a batch output folder: every recording the batch analysed, again.

Events need the step-by-step level history, which a batch does not store (a 24-hour
recording at 100 ms is 864 000 steps). :func:`batch_events` therefore re-reads each
measurement listed as ``ok`` in the folder's manifest with the calibration, channel and
start time recorded in its result, and detects the events in one streaming pass per
measurement. A recording whose bytes changed since the batch (SHA-256 in the manifest) is
reported as failed rather than analysed with a calibration meant for other bytes.
"""

from __future__ import annotations

import json
import os
from dataclasses import dataclass
from datetime import datetime

from ..calibration import Calibration
from ..engine import AnalysisSettings, analyse_recordings
from ..errors import BandmeterError, OutputError
from ..manifest import Manifest
from ..provenance import file_sha256
from .events import EventCriteria, EventResult, detect_events


@dataclass
class MeasurementEvents:
    """Events of one batch measurement (``error`` set when it could not be read)."""

    id: str
    file: str
    result: EventResult | None
    error: str | None = None


def _measurement(out_dir: str, entry: dict, criteria: EventCriteria, settings: AnalysisSettings
                 ) -> MeasurementEvents:
    paths = [f["path"] for f in entry.get("files") or [{"path": entry["path"]}]]
    try:
        for f in entry.get("files") or []:
            if file_sha256(f["path"]) != f["sha256"]:
                raise OutputError(f"{f['path']}: changed since the batch (SHA-256 differs); "
                                  "rerun the batch first")
        with open(os.path.join(out_dir, entry["result_file"]), encoding="utf-8") as handle:
            data = json.load(handle)
        cal = data.get("calibration")
        calibration = None if cal is None else Calibration.from_dict(cal, entry["result_file"])
        start = entry.get("start_time")
        result = analyse_recordings(
            paths, calibration, settings, channel=data["channel"],
            start_time=datetime.fromisoformat(start) if start else None,
            allow_uncalibrated=calibration is None)
    except (BandmeterError, OSError, ValueError, KeyError) as exc:
        return MeasurementEvents(entry["id"], paths[0], None, str(exc))
    return MeasurementEvents(entry["id"], paths[0], detect_events(result.history, criteria))


def batch_events(out_dir: str, criteria: EventCriteria | None = None, step_s: float = 0.1,
                 bands: int | None = None) -> list[MeasurementEvents]:
    """Events of every measurement of a batch output folder (see the module docstring)."""
    manifest = Manifest.load(out_dir)
    if not manifest.entries:
        raise OutputError(f"{out_dir}: no batch manifest with entries here")
    criteria = criteria or EventCriteria()
    settings = AnalysisSettings(history_s=step_s, bands=bands)
    return [_measurement(out_dir, entry, criteria, settings)
            for entry in manifest.entries.values() if entry.get("status") == "ok"]
