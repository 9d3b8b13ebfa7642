"""One unit of batch work: a measurement (one file, or joined files) and its analysis.

:func:`analyse_job` is the function every executor runs (in-process, in a local worker
process, or on a Dask worker): it hashes the files, keeps the earlier result when the bytes
are unchanged, otherwise analyses, and never raises for a bad recording: failures come back
as an :class:`Outcome` with ``status = "failed"`` and a one-line error.
"""

from __future__ import annotations

import os
import time
from dataclasses import dataclass, field
from datetime import datetime
from typing import Any

from .errors import BandmeterError
from .manifest import same_content
from .provenance import file_sha256, now_iso


@dataclass
class Job:
    """Everything a worker needs to analyse one measurement (picklable).

    Attributes
    ----------
    id : str
        Measurement id (manifest key).
    paths : list of str
        The file, or the consecutive files joined into one measurement.
    settings : AnalysisSettings
        What to compute.
    channel : int
        Channel, 1-based.
    calibration : Calibration or None
        The chain calibration for these files (None with ``allow_uncalibrated``).
    calibration_id, calibration_source : str or None
        Identity and origin of the calibration, for the manifest and the summary.
    error : str or None
        A failure known before the analysis (no calibration, unreadable header...).
    allow_uncalibrated : bool
        Levels in dB re full scale.
    start : datetime or None
        Clock time of the first sample.
    start_source : str or None
        Where ``start`` came from ("bext", "name", "option").
    first_boundary : int
        First interval boundary, samples (clock alignment).
    settings_hash : str
        Hash of the batch's settings (manifest).
    previous : dict or None
        The manifest entry of an earlier run that may be kept if the bytes are unchanged.
    audio_s : float
        Duration of the measurement, s (for progress).
    """

    id: str
    paths: list[str]
    settings: Any
    channel: int = 1
    calibration: Any = None
    calibration_id: str | None = None
    calibration_source: str | None = None
    error: str | None = None
    allow_uncalibrated: bool = False
    start: datetime | None = None
    start_source: str | None = None
    first_boundary: int = 0
    settings_hash: str = ""
    previous: dict[str, Any] | None = None
    audio_s: float = 0.0
    warnings: list[str] = field(default_factory=list)


@dataclass
class Outcome:
    """What a worker returns: the manifest entry and, when analysed, the result data."""

    entry: dict[str, Any]
    result: dict[str, Any] | None = None
    reused: bool = False

    @property
    def ok(self) -> bool:
        return self.entry["status"] == "ok"


def _file_facts(path: str) -> dict[str, Any]:
    stat = os.stat(path)
    return {"path": path, "size": stat.st_size, "mtime": stat.st_mtime,
            "sha256": file_sha256(path)}


def _entry(job: Job, files: list[dict[str, Any]], status: str, error: str | None) -> dict:
    from . import __version__

    first = files[0] if files else {"path": job.paths[0]}
    return {
        "id": job.id,
        "path": job.paths[0],
        "size": sum(f.get("size", 0) for f in files) if files else None,
        "mtime": first.get("mtime"),
        "sha256": first.get("sha256"),
        "files": files,
        "calibration_id": job.calibration_id,
        "calibration_source": job.calibration_source,
        "settings_hash": job.settings_hash,
        "tool_version": __version__,
        "status": status,
        "error": error,
        "result_file": None,
        "start_time": None if job.start is None else job.start.isoformat(),
        "start_source": job.start_source,
        "audio_s": job.audio_s,
        "finished": now_iso(),
    }


def failed_outcome(job: Job, error: str) -> Outcome:
    """The outcome of a job that could not run (e.g. its worker process died)."""
    return Outcome(_entry(job, [], "failed", error))


def analyse_job(job: Job) -> Outcome:
    """Analyse one measurement; failures are returned, not raised (see the module doc)."""
    from .engine import analyse_recordings

    files: list[dict[str, Any]] = []
    try:
        files = [_file_facts(p) for p in job.paths]
    except OSError as exc:
        return Outcome(_entry(job, files, "failed", f"{exc.filename}: {exc.strerror}"))
    if job.error is not None:
        return Outcome(_entry(job, files, "failed", job.error))
    if job.previous is not None and same_content(job.previous, files):
        return Outcome(dict(job.previous), reused=True)
    started = time.perf_counter()
    try:
        result = analyse_recordings(
            job.paths, job.calibration, job.settings, channel=job.channel,
            start_time=job.start, allow_uncalibrated=job.allow_uncalibrated,
            first_boundary=job.first_boundary, known_sha256=[f["sha256"] for f in files],
        )
    except BandmeterError as exc:
        return Outcome(_entry(job, files, "failed", str(exc)))
    except MemoryError:
        return Outcome(_entry(job, files, "failed", "out of memory"))
    entry = _entry(job, files, "ok", None)
    entry["analysis_s"] = round(time.perf_counter() - started, 3)
    data = result.to_dict()
    data["batch"] = {
        "id": job.id,
        "files": files,
        "calibration_id": job.calibration_id,
        "calibration_source": job.calibration_source,
        "start_source": job.start_source,
        "warnings": list(job.warnings),
    }
    data["warnings"] = list(job.warnings) + data["warnings"]
    entry["warnings"] = data["warnings"]
    return Outcome(entry, data)
