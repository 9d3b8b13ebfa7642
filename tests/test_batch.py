"""Batch analysis: outputs, resume, failure isolation, executors, calibration maps, clocks."""

from __future__ import annotations

import csv
import json
import os
import shutil

import numpy as np
import pytest
import soundfile as sf
from click.testing import CliRunner

from bandmeter.batch import BatchOptions, run_batch
from bandmeter.calibration import from_full_scale_level
from bandmeter.cli import cli
from bandmeter.engine import AnalysisSettings, analyse_file
from bandmeter.signals import pink_noise, sine

FS = 16000
L_FS = 110.0  # full-scale level of the invented chain, dB


def _write(path, seconds, level_dbfs, seed, fs=FS):
    x = pink_noise(int(seconds * fs), fs, seed=seed)
    x *= 10 ** (level_dbfs / 20) / np.sqrt(np.mean(x**2))
    x += sine(fs, 500.0, seconds, 0.01)
    os.makedirs(os.path.dirname(path), exist_ok=True)
    sf.write(path, x, fs, subtype="PCM_24")
    return x


@pytest.fixture()
def survey(tmp_path):
    """An invented two-day survey: three good recordings and a corrupt one."""
    root = tmp_path / "survey"
    _write(str(root / "day1" / "mp1_a.wav"), 2.5, -30, 1)
    _write(str(root / "day1" / "mp1_b.wav"), 2.0, -35, 2)
    _write(str(root / "day2" / "mp1_c.flac"), 1.5, -25, 3)
    (root / "day2" / "notes.txt").write_text("field notes, not audio")
    return root


def _options(**kw):
    base = dict(settings=AnalysisSettings(interval_s=0.5), calibration=from_full_scale_level(L_FS))
    base.update(kw)
    return BatchOptions(**base)


def _read_csv(path):
    with open(path, newline="") as handle:
        return list(csv.DictReader(handle))


def test_outputs_and_their_contents(tmp_path, survey):
    out = str(tmp_path / "out")
    report = run_batch([str(survey)], out, _options())
    assert report.ok and report.analysed == 3 and report.total == 3
    summary = _read_csv(os.path.join(out, "summary.csv"))
    assert [os.path.basename(r["file"]) for r in summary] == ["mp1_a.wav", "mp1_b.wav",
                                                               "mp1_c.flac"]
    # the batch reports what `levels` reports for the same file (same engine, same options)
    single = analyse_file(str(survey / "day1" / "mp1_a.wav"), from_full_scale_level(L_FS),
                          AnalysisSettings(interval_s=0.5))
    assert float(summary[0]["LAeq"]) == pytest.approx(single.overall.metrics["LAeq"], abs=1e-6)
    rows = _read_csv(os.path.join(out, "intervals.csv"))
    assert len(rows) == 5 + 4 + 3  # 2.5 s, 2.0 s and 1.5 s in 0.5 s intervals
    assert [float(r["LAeq"]) for r in rows[:5]] == pytest.approx(
        [iv.metrics["LAeq"] for iv in single.intervals], abs=1e-6)
    manifest = json.load(open(os.path.join(out, "manifest.json")))
    entry = next(iter(manifest["entries"].values()))
    for key in ("path", "size", "mtime", "sha256", "calibration_id", "settings_hash",
                "tool_version", "status", "error"):
        assert key in entry
    # SHA-256 of the bytes (hashlib as the reference)
    import hashlib

    assert entry["sha256"] == hashlib.sha256(open(entry["path"], "rb").read()).hexdigest()
    assert len(os.listdir(os.path.join(out, "results"))) == 3


def test_parquet_matches_csv(tmp_path, survey):
    import pyarrow.parquet as pq

    out = str(tmp_path / "out")
    run_batch([str(survey)], out, _options(settings=AnalysisSettings(interval_s=1.0, bands=1)))
    for name in ("intervals", "bands"):
        table = pq.read_table(os.path.join(out, f"{name}.parquet")).to_pylist()
        rows = _read_csv(os.path.join(out, f"{name}.csv"))
        assert len(table) == len(rows) > 0
        for a, b in zip(table, rows, strict=True):
            assert a["id"] == b["id"]
            key = "LAeq" if name == "intervals" else "LZeq"
            assert a[key] == pytest.approx(float(b[key]), abs=1e-6)  # CSV keeps 6 decimals
    bands = _read_csv(os.path.join(out, "bands.csv"))
    assert {"band", "nominal_hz", "exact_hz", "LZeq", "interval"} <= set(bands[0])


def test_resume_skips_unchanged_and_redoes_changed(tmp_path, survey):
    out = str(tmp_path / "out")
    assert run_batch([str(survey)], out, _options()).analysed == 3
    again = run_batch([str(survey)], out, _options())
    assert (again.analysed, again.reused) == (0, 3)
    _write(str(survey / "day1" / "mp1_b.wav"), 2.0, -20, 9)  # re-recorded: new bytes
    _write(str(survey / "day2" / "mp1_d.wav"), 1.0, -30, 4)  # a new recording
    third = run_batch([str(survey)], out, _options())
    assert (third.analysed, third.reused) == (2, 2)
    summary = _read_csv(os.path.join(out, "summary.csv"))
    assert len(summary) == 4
    # other settings into the same folder are refused without --force
    from bandmeter.errors import OutputError

    with pytest.raises(OutputError, match="other analysis settings"):
        run_batch([str(survey)], out, _options(settings=AnalysisSettings(interval_s=1.0)))
    forced = run_batch([str(survey)], out, _options(settings=AnalysisSettings(interval_s=1.0),
                                                    force=True))
    assert forced.analysed == 4


def test_interrupted_run_keeps_what_finished(tmp_path, survey):
    out = str(tmp_path / "out")
    seen = []

    def stop_after_first(outcome):
        seen.append(outcome)
        raise KeyboardInterrupt  # as Ctrl-C after the first measurement

    report = run_batch([str(survey)], out, _options(), on_outcome=stop_after_first)
    assert report.interrupted and report.analysed == 1
    assert len(_read_csv(os.path.join(out, "summary.csv"))) == 1
    rest = run_batch([str(survey)], out, _options())
    assert (rest.analysed, rest.reused) == (2, 1)


def test_interrupt_during_manifest_save_keeps_tables_and_manifest_in_step(
    tmp_path, survey, monkeypatch
):
    # A signal that lands while the manifest is saved, after the second measurement's result
    # file is written and its entry recorded (the saved manifest still lists the first
    # only): the tables and the manifest must still list the same measurements (common
    # practice, no source: an index agrees with the data it indexes).
    from bandmeter.manifest import Manifest

    out = str(tmp_path / "out")
    real_save = Manifest.save
    calls = []

    def interrupted_save(self):
        calls.append(1)
        if len(calls) == 2:
            raise KeyboardInterrupt  # as SIGTERM during the second measurement's save
        real_save(self)

    monkeypatch.setattr(Manifest, "save", interrupted_save)
    report = run_batch([str(survey)], out, _options())
    assert report.interrupted
    summary = _read_csv(os.path.join(out, "summary.csv"))
    manifest = json.load(open(os.path.join(out, "manifest.json")))
    assert len(summary) == len(manifest["entries"]) == 2
    monkeypatch.setattr(Manifest, "save", real_save)
    rest = run_batch([str(survey)], out, _options())
    assert (rest.analysed, rest.reused) == (1, 2)


def test_a_bad_recording_is_isolated(tmp_path, survey):
    (survey / "day2" / "broken.wav").write_bytes(b"RIFF\x00\x00\x00\x00WAVEjunk")
    out = str(tmp_path / "out")
    result = CliRunner().invoke(cli, ["batch", str(survey), "--full-scale-level", str(L_FS),
                                      "--interval", "0.5s", "--out", out, "--workers", "1"])
    assert result.exit_code == 1
    assert "3 analysed" in result.stdout and "1 failed" in result.stdout
    assert "broken.wav" in result.stderr and "Traceback" not in result.output
    summary = {os.path.basename(r["file"]): r for r in _read_csv(os.path.join(out, "summary.csv"))}
    assert summary["broken.wav"]["status"] == "failed" and summary["broken.wav"]["error"]
    assert summary["mp1_a.wav"]["status"] == "ok"
    manifest = json.load(open(os.path.join(out, "manifest.json")))
    assert {e["status"] for e in manifest["entries"].values()} == {"ok", "failed"}


def _tables(out):
    return (_read_csv(os.path.join(out, "intervals.csv")),
            [{k: r[k] for k in ("file", "LAeq", "LAFmax", "LCpeak", "LAF90")}
             for r in _read_csv(os.path.join(out, "summary.csv"))])


def test_workers_and_dask_match_serial(tmp_path, survey):
    serial = str(tmp_path / "serial")
    run_batch([str(survey)], serial, _options(workers=1))
    procs = str(tmp_path / "procs")
    assert run_batch([str(survey)], procs, _options(workers=2)).analysed == 3
    dask = str(tmp_path / "dask")
    assert run_batch([str(survey)], dask, _options(workers=2, dask="local")).analysed == 3
    assert _tables(procs) == _tables(serial)
    assert _tables(dask) == _tables(serial)


def test_calibration_map(tmp_path, survey):
    # day 1 measured with a 110 dB chain, day 2 with a 120 dB chain (invented)
    cal1 = from_full_scale_level(110.0)
    cal1.save(str(survey / "day1.cal.json"))
    tone = sine(FS, 1000.0, 4.0, 10 ** (-26 / 20))  # 94 dB calibrator at -26 dBFS -> 120 dB
    sf.write(str(survey / "cal_day2.wav"), tone, FS, subtype="PCM_24")
    cal_map = survey / "cals.csv"
    cal_map.write_text("recording,calibration,tone,level,span\n"
                       "day1/*.wav,day1.cal.json,,,\n"
                       "day2/*.flac,,cal_day2.wav,94,\n")
    _write(str(survey / "day3" / "mp1_e.wav"), 1.0, -30, 5)  # no rule for day 3
    out = str(tmp_path / "out")
    report = run_batch([str(survey / "day1"), str(survey / "day2"), str(survey / "day3")],
                       out, _options(calibration=None, calibration_map=str(cal_map)))
    assert report.analysed == 3 and len(report.failed) == 1
    assert "no rule of the calibration map" in report.failed[0][1]
    rows = {os.path.basename(r["file"]): r for r in _read_csv(os.path.join(out, "summary.csv"))}
    assert float(rows["mp1_a.wav"]["full_scale_level_db"]) == pytest.approx(110.0)
    # 94 - (-26) = 120 dB (full-scale-level convention, README)
    assert float(rows["mp1_c.flac"]["full_scale_level_db"]) == pytest.approx(120.0, abs=0.02)
    assert rows["mp1_a.wav"]["calibration_id"] != rows["mp1_c.flac"]["calibration_id"]


def test_stale_temporary_files_are_cleared(tmp_path, survey):
    out = tmp_path / "out"
    run_batch([str(survey)], str(out), _options())
    stale = out / "results" / ".x.json.abc.part"
    stale.write_text("half")
    run_batch([str(survey)], str(out), _options())
    assert not stale.exists()


def test_output_folder_inside_an_input_is_not_read(tmp_path, survey):
    out = survey / "results"
    report = run_batch([str(survey)], str(out), _options())
    assert report.total == 3
    shutil.rmtree(out)


def test_killed_process_loses_nothing_finished(tmp_path):
    # SIGKILL (no chance to clean up) while a batch of ten recordings runs: every result the
    # manifest lists is complete, no final file is half-written, a rerun does only the rest
    import signal
    import subprocess
    import sys
    import time

    root = tmp_path / "many"
    for i in range(10):
        _write(str(root / f"mp4_{i:02d}.wav"), 6.0, -30, 20 + i)
    out = tmp_path / "out"
    cmd = [sys.executable, "-c", "from bandmeter.cli import main; main()", "batch", str(root),
           "--full-scale-level", str(L_FS), "--bands", "third", "--out", str(out),
           "--workers", "1"]
    proc = subprocess.Popen(cmd, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
    deadline = time.monotonic() + 120
    results = out / "results"
    while time.monotonic() < deadline and proc.poll() is None:
        if (out / "manifest.json").exists():  # the first measurement is recorded
            break
        time.sleep(0.02)
    proc.send_signal(signal.SIGKILL)
    proc.wait()
    manifest = json.load(open(out / "manifest.json"))  # parses: never half-written
    done = [e for e in manifest["entries"].values() if e["status"] == "ok"]
    assert 1 <= len(done) < 10
    for entry in done:
        json.load(open(out / entry["result_file"]))  # complete
    report = run_batch([str(root)], str(out), _options(
        settings=AnalysisSettings(bands=3)))
    assert report.ok and report.reused == len(done) and report.analysed == 10 - len(done)
    assert not [n for n in os.listdir(results) if n.endswith(".part")]


def test_start_times_from_names_align_and_join(tmp_path):
    # an invented recorder splits one 6 s recording into three files named by their start
    # time; --join must give the intervals of the unsplit recording (one streaming pass)
    fs = FS
    whole = _write(str(tmp_path / "whole" / "MP3_20260514_215959.wav"), 6.0, -30, 7, fs)
    parts = tmp_path / "parts"
    parts.mkdir()
    names = ["MP3_20260514_215959.wav", "MP3_20260514_220001.wav", "MP3_20260514_220003.wav"]
    cuts = [0, 2 * fs, 4 * fs, whole.size]  # 2 s, 2 s, 2 s: starts 21:59:59, 22:00:01, :03
    for name, a, b in zip(names, cuts[:-1], cuts[1:], strict=True):
        sf.write(str(parts / name), whole[a:b], fs, subtype="PCM_24")
    settings = AnalysisSettings(interval_s=1.0)
    opts = dict(settings=settings, name_pattern="MP3_%Y%m%d_%H%M%S", timezone="+01:00")
    joined = str(tmp_path / "joined")
    report = run_batch([str(parts)], joined, _options(join=True, **opts))
    assert report.ok and report.total == 1  # three files, one measurement
    ref = str(tmp_path / "ref")
    run_batch([str(tmp_path / "whole")], ref, _options(**opts))
    a = _read_csv(os.path.join(joined, "intervals.csv"))
    b = _read_csv(os.path.join(ref, "intervals.csv"))
    assert len(a) == len(b) == 6
    for ra, rb in zip(a, b, strict=True):
        assert ra["start_time"] == rb["start_time"]
        for key in ("LAeq", "LAFmax", "LAFmin", "LCpeak", "LAF90"):
            assert float(ra[key]) == pytest.approx(float(rb[key]), abs=1e-6), key
    assert a[1]["start_time"] == "2026-05-14T22:00:00+01:00"  # calendar arithmetic
    summary = _read_csv(os.path.join(joined, "summary.csv"))
    assert summary[0]["files"] == "3" and summary[0]["start_source"] == "name"

    # clock alignment: with a start at 21:59:59.25 (--start) and 1 s intervals the first
    # interval is the partial 0.75 s up to 22:00:00
    aligned = str(tmp_path / "aligned")
    run_batch([str(tmp_path / "whole")], aligned, _options(
        settings=settings, start="2026-05-14T21:59:59.250000+01:00", align=True))
    rows = _read_csv(os.path.join(aligned, "intervals.csv"))
    assert float(rows[0]["duration_s"]) == pytest.approx(0.75)
    assert rows[0]["partial"] == "true"
    assert rows[1]["start_time"] == "2026-05-14T22:00:00+01:00"
    assert len(rows) == 7  # 0.75 s + five whole seconds + 0.25 s


def test_a_gap_breaks_the_join(tmp_path):
    folder = tmp_path / "gappy"
    _write(str(folder / "MP5_20260514_220000.wav"), 2.0, -30, 1)
    _write(str(folder / "MP5_20260514_220005.wav"), 2.0, -30, 2)  # 3 s gap
    report = run_batch([str(folder)], str(tmp_path / "out"), _options(
        join=True, name_pattern="MP5_%Y%m%d_%H%M%S", timezone="UTC"))
    assert report.total == 2


@pytest.fixture()
def restored_environ():
    """This process's environment put back after the test: the nanny of a cluster the test
    starts itself writes its workers' environment into it (which would then win over the
    engine's amount in later local clusters)."""
    from bandmeter.executors import _restore_environ

    saved = dict(os.environ)
    yield
    _restore_environ(saved)


def test_existing_dask_scheduler_by_address(tmp_path, survey, restored_environ):
    # an already running cluster (here started by the test) reached by its tcp:// address
    from distributed import LocalCluster

    with LocalCluster(n_workers=1, threads_per_worker=1, processes=True,
                      dashboard_address=None) as cluster:
        out = str(tmp_path / "remote")
        report = run_batch([str(survey)], out, _options(dask=cluster.scheduler_address))
    assert report.ok and report.analysed == 3
    serial = str(tmp_path / "serial")
    run_batch([str(survey)], serial, _options())
    assert _tables(out) == _tables(serial)


def test_batch_option_errors_are_one_line(tmp_path, survey):
    out = tmp_path / "out"
    cases = [
        ([str(survey)], "no calibration given"),
        ([str(tmp_path / "missing"), "--dbfs"], "no such file or folder"),
        ([str(tmp_path / "*.nothing"), "--dbfs"], "matches no audio file"),
        ([str(survey), "--dbfs", "--align", "--interval", "1s"], None),  # per-file failure
        ([str(survey), "--full-scale-level", "110", "--cal-map", str(tmp_path / "x.csv")],
         "not both"),
    ]
    for args, message in cases:
        result = CliRunner().invoke(cli, ["batch", *args, "--out", str(out), "--workers", "1"])
        assert result.exit_code == 1, (args, result.output)
        assert "Traceback" not in result.output
        if message is None:
            assert "--align needs a start time" in result.stderr
        else:
            assert message in result.stderr, (args, result.stderr)
            assert not out.exists() or message == "not both"


def test_start_time_from_broadcast_wav(tmp_path):
    from bwf_writer import write_bwf

    folder = tmp_path / "bwf"
    folder.mkdir()
    x = 0.01 * pink_noise(int(1.5 * FS), FS, seed=3)
    # TimeReference = samples since midnight (EBU Tech 3285): 22:00:00 + 8000 / 16 kHz
    write_bwf(str(folder / "q7_001.wav"), x, FS, date="2026-05-14", time="22:00:00",
              time_reference=22 * 3600 * FS + 8000)
    out = str(tmp_path / "out")
    report = run_batch([str(folder)], out, _options(timezone="+01:00"))
    assert report.ok
    row = _read_csv(os.path.join(out, "summary.csv"))[0]
    assert row["start_source"] == "bext"
    assert row["start_time"] == "2026-05-14T22:00:00.500000+01:00"  # calendar arithmetic
    rows = _read_csv(os.path.join(out, "intervals.csv"))
    assert rows[1]["start_time"] == "2026-05-14T22:00:01+01:00"


def test_sigterm_stops_cleanly_with_tables(tmp_path):
    import signal
    import subprocess
    import sys
    import time

    root = tmp_path / "many"
    # enough audio that the batch is still running when the signal comes, soon after the
    # first result (with the compiled kernels, 8 files of 6 s could all finish first)
    for i in range(16):
        _write(str(root / f"mp6_{i:02d}.wav"), 12.0, -30, 40 + i)
    out = tmp_path / "out"
    cmd = [sys.executable, "-c", "from bandmeter.cli import main; main()", "batch", str(root),
           "--full-scale-level", str(L_FS), "--bands", "third", "--out", str(out),
           "--workers", "1"]
    proc = subprocess.Popen(cmd, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
    deadline = time.monotonic() + 120
    while time.monotonic() < deadline and proc.poll() is None:
        if (out / "manifest.json").exists():
            break
        time.sleep(0.02)
    proc.send_signal(signal.SIGTERM)
    stdout, _ = proc.communicate(timeout=120)
    if proc.returncode == 0:  # the batch beat the signal: nothing to check
        pytest.skip("batch finished before SIGTERM")
    assert proc.returncode == 130
    assert "interrupted" in stdout
    summary = _read_csv(out / "summary.csv")  # tables rebuilt from what finished
    manifest = json.load(open(out / "manifest.json"))
    assert len(summary) == len(manifest["entries"]) >= 1


def test_progress_line():
    import io

    from bandmeter.progress import Progress

    stream = io.StringIO()
    bar = Progress(4, 4 * 3600.0, stream=stream, enabled=True)
    bar.update(3600.0, reused=True, ok=True)
    bar.update(3600.0, reused=False, ok=False)
    text = bar.line()
    assert text.startswith("2/4 files, 1 failed, 2.00 h of 4.00 h audio")
    assert "ETA" in text and "\r" in stream.getvalue()
    quiet = io.StringIO()
    Progress(1, 1.0, stream=quiet).update(1.0, False, True)  # StringIO is not a terminal
    assert quiet.getvalue() == ""


def test_events_over_a_batch_folder(tmp_path):
    # two recordings with one loud 1 kHz stretch each (A weighting 0 dB at 1 kHz, IEC 61672-1)
    folder = tmp_path / "ev"
    folder.mkdir()
    t = np.arange(int(12 * FS)) / FS
    for name, at in (("mp7_a.wav", 3.0), ("mp7_b.wav", 6.0)):
        amp = np.where((t >= at) & (t < at + 2), 0.1, 0.001)
        sf.write(str(folder / name), amp * np.sin(2 * np.pi * 1000 * t), FS, subtype="FLOAT")
    out = tmp_path / "out"
    assert run_batch([str(folder)], str(out), _options()).ok
    result = CliRunner().invoke(cli, ["events", str(out), "--threshold", "80", "--json"])
    assert result.exit_code == 0, result.output
    found = json.loads(result.stdout)["measurements"]
    starts = sorted((os.path.basename(m["file"]), m["events"][0]["start_s"]) for m in found)
    assert [s for _, s in starts] == pytest.approx([3.0, 6.0], abs=0.1)  # one step
    sf.write(str(folder / "mp7_b.wav"), np.zeros(FS), FS)  # changed after the batch
    again = CliRunner().invoke(cli, ["events", str(out)])
    assert again.exit_code == 1 and "changed since the batch" in again.stderr
    refused = CliRunner().invoke(cli, ["events", str(out), "--full-scale-level", "100"])
    assert refused.exit_code == 1 and "batch folder" in refused.stderr


def test_dask_local_batch_leaves_the_callers_environment_alone(monkeypatch):
    # Dask's nanny writes the workers' environment into the starting process's own
    # (distributed's Nanny, before every spawn); run_dask puts it back afterwards
    from bandmeter.executors import DASK_WORKER_ENVIRON, run_dask

    for key in DASK_WORKER_ENVIRON:
        monkeypatch.delenv(key, raising=False)
    monkeypatch.setenv("BANDMETER_TEST_MARKER", "kept")
    before = dict(os.environ)
    assert list(run_dask([], "local", 1)) == []
    assert dict(os.environ) == before


def test_dask_local_workers_keep_freed_memory(monkeypatch, restored_environ):
    # Dask's nanny gives its workers MALLOC_TRIM_THRESHOLD_=65536 (its default
    # configuration); --dask local gives them the engine's amount instead, read here from
    # a worker process's own environment
    import dask
    from distributed import Client, LocalCluster

    from bandmeter.engine import MALLOC_KEEP_BYTES
    from bandmeter.executors import DASK_WORKER_ENVIRON, _dask_worker_config

    for key in DASK_WORKER_ENVIRON:  # a value in this process's environment would win
        monkeypatch.delenv(key, raising=False)
    with dask.config.set(_dask_worker_config()):
        cluster = LocalCluster(n_workers=1, threads_per_worker=1, processes=True,
                               dashboard_address=None)
    try:
        with Client(cluster) as client:
            env = client.submit(lambda: dict(os.environ), pure=False).result()
    finally:
        cluster.close()
    assert env["MALLOC_TRIM_THRESHOLD_"] == str(MALLOC_KEEP_BYTES)
    assert env["MALLOC_MMAP_THRESHOLD_"] == str(MALLOC_KEEP_BYTES)
