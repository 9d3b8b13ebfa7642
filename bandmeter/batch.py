"""Batch analysis: folders of recordings into per-file results, tidy tables and a manifest.

:func:`run_batch` plans one job per measurement (a recording, or consecutive recordings of
one recorder joined with ``join``), runs the jobs in this process, on local worker processes
or on Dask (:mod:`bandmeter.executors`), and records each finished measurement at once:
``results/<id>.json`` (the full result, as ``levels --json``), then its entry in
``manifest.json`` (:mod:`bandmeter.manifest`), both written atomically. The combined tables
(:mod:`bandmeter.batch_tables`) are rebuilt from the per-measurement results at the end,
also after an interruption, so a killed run loses nothing it finished and a rerun analyses
only what is new or changed.
"""

from __future__ import annotations

import contextlib
import os
import signal
from collections.abc import Callable, Sequence
from dataclasses import dataclass, field
from typing import Any

from .audio import RecordingInfo, read_info
from .batchjob import Job, Outcome
from .calibration import Calibration
from .calmap import CalibrationMap, calibration_id
from .engine import AnalysisSettings
from .errors import BandmeterError, OutputError, SettingsError
from .inputs import expand_inputs
from .manifest import MANIFEST_NAME, Manifest, measurement_id, settings_hash
from .outputs import json_text, write_text
from .progress import Progress

RESULTS_DIR = "results"


@dataclass
class BatchOptions:
    """How a batch runs (the analysis itself is in ``settings``).

    Attributes
    ----------
    settings : AnalysisSettings
        What to compute for every measurement.
    channel : int
        Channel, 1-based.
    calibration : Calibration or None
        One calibration for every recording.
    calibration_map : str or None
        A calibration map CSV (:mod:`bandmeter.calmap`) instead.
    allow_uncalibrated : bool
        Levels in dB re full scale when no calibration is given.
    workers : int
        Local worker processes (1: in this process).
    dask : str or None
        "local" or a scheduler address: run on Dask distributed instead.
    start : str or None
        ISO 8601 start of the first sample (one measurement only).
    name_pattern : str or None
        strftime pattern that finds the start time in file names.
    timezone : str or None
        Zone of start times without one (broadcast-WAV times, names).
    align : bool
        Clock-aligned intervals (needs start times).
    join : bool
        Join consecutive gapless recordings into one measurement.
    force : bool
        Analyse everything again and replace earlier outputs in the folder.
    """

    settings: AnalysisSettings = field(default_factory=AnalysisSettings)
    channel: int = 1
    calibration: Calibration | None = None
    calibration_map: str | None = None
    allow_uncalibrated: bool = False
    workers: int = 1
    dask: str | None = None
    start: str | None = None
    name_pattern: str | None = None
    timezone: str | None = None
    align: bool = False
    join: bool = False
    force: bool = False

    def identity(self) -> dict[str, Any]:
        """What changes the results (hashed into the manifest's ``settings_hash``)."""
        return {**self.settings.to_dict(), "channel": self.channel,
                "dbfs": self.allow_uncalibrated, "align": self.align, "join": self.join}


@dataclass
class BatchReport:
    """What a batch run did."""

    out_dir: str
    total: int
    analysed: int = 0
    reused: int = 0
    failed: list[tuple[str, str]] = field(default_factory=list)
    interrupted: bool = False
    tables: dict[str, str] = field(default_factory=dict)
    audio_s: float = 0.0

    @property
    def ok(self) -> bool:
        return not self.failed and not self.interrupted

    def line(self) -> str:
        """One-line summary."""
        done = self.analysed + self.reused + len(self.failed)
        text = (f"{done} of {self.total} measurement(s): {self.analysed} analysed, "
                f"{self.reused} unchanged, {len(self.failed)} failed")
        if self.interrupted:
            text += "; interrupted: run the same command again to continue"
        return text


class _Interrupted(KeyboardInterrupt):
    """SIGTERM, handled like Ctrl-C."""


def _raise_interrupt(signum: int, frame: Any) -> None:
    raise _Interrupted()


# -- planning -------------------------------------------------------------------------------


@dataclass
class _File:
    path: str
    info: RecordingInfo | None
    error: str | None
    start: Any = None  # clock.StartTime


def _read_files(paths: Sequence[str], options: BatchOptions) -> list[_File]:
    from .clock import parse_timezone, resolve_start

    tz = parse_timezone(options.timezone) if options.timezone else None
    if options.start is not None and len(paths) > 1 and not options.join:
        raise SettingsError("--start gives the start of one recording; for several use "
                            "broadcast-WAV times, --start-from-name, or --join")
    files = []
    for i, path in enumerate(paths):
        try:
            info = read_info(path)
        except BandmeterError as exc:
            files.append(_File(path, None, str(exc)))
            continue
        try:
            start = resolve_start(
                path, name_pattern=options.name_pattern,
                option=options.start if i == 0 else None, tz=tz,
                prefer=("option", "bext", "name"))
        except BandmeterError as exc:
            files.append(_File(path, info, str(exc)))
            continue
        files.append(_File(path, info, None, start))
    return files


def _groups(files: list[_File], join: bool) -> list[list[_File]]:
    """Measurements: each file alone, or gapless runs of files joined."""
    if not join:
        return [[f] for f in files]
    from .clock import contiguous_runs

    timed = [f for f in files if f.error is None and f.start is not None]
    untimed = [[f] for f in files if f not in timed]
    items = [(f.start.when, f.info.duration_s, float(f.info.sample_rate)) for f in timed]
    runs = [[timed[i] for i in run] for run in contiguous_runs(items)] if timed else []
    return sorted(runs + untimed, key=lambda g: files.index(g[0]))


def _calibration_for(path: str, options: BatchOptions, cal_map: CalibrationMap | None
                     ) -> tuple[Calibration | None, str | None]:
    if cal_map is not None:
        rule = cal_map.rule_for(path)
        cal = cal_map.calibration_for(path, options.channel)
        source = f"map line {rule.line if rule else '?'}: {cal.source_file}"
        return cal, source
    if options.calibration is not None:
        return options.calibration, options.calibration.source_file
    if options.allow_uncalibrated:
        return None, "none (dB re full scale)"
    raise SettingsError(f"{path}: no calibration given; pass --cal, --cal-tone with "
                        "--cal-level, --full-scale-level or --cal-map (or --dbfs)")


def _job(group: list[_File], options: BatchOptions, cal_map: CalibrationMap | None,
         manifest: Manifest, out_dir: str) -> Job:
    first = group[0]
    paths = [f.path for f in group]
    job = Job(id=measurement_id(first.path), paths=paths, settings=options.settings,
              channel=options.channel, allow_uncalibrated=options.allow_uncalibrated,
              settings_hash=manifest.settings_hash)
    errors = [f.error for f in group if f.error]
    if errors:
        job.error = errors[0]
        return job
    job.audio_s = sum(f.info.duration_s for f in group)
    try:
        job.calibration, job.calibration_source = _calibration_for(first.path, options, cal_map)
    except BandmeterError as exc:
        job.error = str(exc)
        return job
    job.calibration_id = None if job.calibration is None else calibration_id(job.calibration)
    if first.start is not None:
        job.start, job.start_source = first.start.when, first.start.source
        job.warnings.extend(first.start.warnings)
    if options.align:
        if job.start is None:
            job.error = f"{first.path}: --align needs a start time (none found)"
            return job
        if options.settings.interval_s is None:
            job.error = "--align needs --interval"
            return job
        from .clock import aligned_first_boundary

        try:
            job.first_boundary = aligned_first_boundary(
                job.start, options.settings.interval_s, first.info.sample_rate)
        except BandmeterError as exc:
            job.error = str(exc)
            return job
    if not options.force:
        start = None if job.start is None else job.start.isoformat()
        job.previous = manifest.candidate(job.id, paths, job.calibration_id, start, out_dir)
    return job


def plan_jobs(paths: Sequence[str], out_dir: str, options: BatchOptions,
              manifest: Manifest) -> list[Job]:
    """One job per measurement of the recordings ``paths`` (see :func:`run_batch`)."""
    cal_map = CalibrationMap(options.calibration_map) if options.calibration_map else None
    groups = _groups(_read_files(paths, options), options.join)
    return [_job(g, options, cal_map, manifest, out_dir) for g in groups]


# -- running --------------------------------------------------------------------------------


def _clear_stale_parts(out_dir: str) -> None:
    """Remove temporary files of a run that was killed while writing (never final names)."""
    for folder in (out_dir, os.path.join(out_dir, RESULTS_DIR)):
        for name in os.listdir(folder):
            if name.startswith(".") and name.endswith(".part"):
                with contextlib.suppress(OSError):
                    os.unlink(os.path.join(folder, name))


#: Files a batch writes into its output folder besides ``results/`` and the manifest.
TABLE_NAMES = ("summary.csv", "intervals.csv", "intervals.parquet", "bands.csv",
               "bands.parquet")


def _prepare_out_dir(out_dir: str, options: BatchOptions) -> Manifest:
    if not options.force and not os.path.exists(os.path.join(out_dir, MANIFEST_NAME)):
        foreign = [n for n in TABLE_NAMES if os.path.exists(os.path.join(out_dir, n))]
        if foreign:  # not a folder of ours: never replace someone's summary.csv silently
            raise OutputError(f"{out_dir}: holds {', '.join(foreign)} but no bandmeter batch "
                              "manifest; use another --out folder, or --force to replace them")
    try:
        os.makedirs(os.path.join(out_dir, RESULTS_DIR), exist_ok=True)
    except OSError as exc:
        raise OutputError(f"{out_dir}: cannot create the output folder ({exc.strerror})") \
            from None
    _clear_stale_parts(out_dir)
    manifest = Manifest.load(out_dir)
    wanted = settings_hash(options.identity())
    if manifest.entries and manifest.settings_hash != wanted and not options.force:
        raise OutputError(f"{out_dir}: holds results of other analysis settings; use another "
                          "--out folder, or --force to analyse everything again")
    manifest.settings, manifest.settings_hash = options.identity(), wanted
    return manifest


def _record(outcome: Outcome, manifest: Manifest, out_dir: str) -> None:
    """Write one finished measurement: result file first, then the manifest."""
    entry = outcome.entry
    if outcome.result is not None:
        name = f"{RESULTS_DIR}/{entry['id']}.json"
        write_text(os.path.join(out_dir, name), json_text(outcome.result, indent=1) + "\n",
                   force=True)
        entry["result_file"] = name
    manifest.entries[entry["id"]] = entry
    manifest.save()


def run_batch(
    inputs: Sequence[str],
    out_dir: str,
    options: BatchOptions,
    progress: bool | None = None,
    on_outcome: Callable[[Outcome], None] | None = None,
) -> BatchReport:
    """Analyse every recording named by ``inputs`` into ``out_dir``.

    Parameters
    ----------
    inputs : sequence of str
        Files, folders (recursive) and glob patterns (:func:`bandmeter.inputs.expand_inputs`).
    out_dir : str
        Output folder (created); see :mod:`bandmeter.batch_tables` for the files in it.
    options : BatchOptions
        Analysis, calibration, clock and execution options.
    progress : bool or None
        Progress line on stderr; None: only on a terminal.
    on_outcome : callable, optional
        Called with each finished :class:`~bandmeter.batchjob.Outcome` (after it is saved).

    Returns
    -------
    BatchReport
        Counts, failures (id, error) and the tables written. Failures of single recordings
        do not raise; bad options and an unusable output folder do.
    """
    from .batch_tables import write_tables
    from .executors import run_jobs

    if (options.calibration is None and options.calibration_map is None
            and not options.allow_uncalibrated):
        raise SettingsError("no calibration given; pass --cal, --cal-tone with --cal-level, "
                            "--full-scale-level or --cal-map (or --dbfs for levels re full "
                            "scale)")
    if options.calibration is not None and options.calibration_map is not None:
        raise SettingsError("give one calibration for all or a calibration map, not both")
    paths = expand_inputs(inputs, exclude=[out_dir])  # before creating anything
    manifest = _prepare_out_dir(out_dir, options)
    jobs = plan_jobs(paths, out_dir, options, manifest)
    report = BatchReport(out_dir, len(jobs))
    bar = Progress(len(jobs), sum(j.audio_s for j in jobs), enabled=progress)
    reused: set[str] = set()
    previous_handler = None
    try:
        previous_handler = signal.signal(signal.SIGTERM, _raise_interrupt)
    except ValueError:  # not the main thread: no handler, Ctrl-C still works
        pass
    try:
        for outcome in run_jobs(jobs, options.workers, options.dask):
            _record(outcome, manifest, out_dir)
            if outcome.reused:
                report.reused += 1
                reused.add(outcome.entry["id"])
            elif outcome.ok:
                report.analysed += 1
                report.audio_s += outcome.entry.get("audio_s") or 0.0
            else:
                report.failed.append((outcome.entry["path"], outcome.entry["error"]))
            bar.update(outcome.entry.get("audio_s") or 0.0, outcome.reused, outcome.ok)
            if on_outcome is not None:
                on_outcome(outcome)
    except KeyboardInterrupt:
        report.interrupted = True
    finally:
        bar.close()
        if previous_handler is not None:
            signal.signal(signal.SIGTERM, previous_handler)
    ids = [job.id for job in jobs]
    entries = [manifest.entries[i] for i in ids if i in manifest.entries]
    # saved once more whatever happened: an interrupt may have landed during a save, after
    # the entry (its result file already written) went in, and before the first result the
    # manifest still marks the folder as ours; the tables below list the same entries
    manifest.save()
    report.tables = write_tables(out_dir, entries, reused)
    return report

