"""Output safety through the command line: no silent overwrite, unwritable folders, full disks.

Root may write anywhere, so unwritable folders and full disks are simulated: the atomic writer
(:mod:`bandmeter.outputs`) gets a temporary file whose disk fills part-way (``ENOSPC`` after a
given number of bytes), or the folder check, the temporary file or the final rename fail with
``EACCES``. Every case must end with the earlier file intact, nothing under the final name that
was not there, no temporary file left, a one-line message and a non-zero exit.
"""

from __future__ import annotations

import csv
import errno
import json
import os

import numpy as np
import pytest
import soundfile as sf
from click.testing import CliRunner

from bandmeter import outputs
from bandmeter.cli import cli
from bandmeter.manifest import measurement_id
from bandmeter.signals import fade, pink_noise, sine

FS = 16000


def run(*args):
    return CliRunner().invoke(cli, [str(a) for a in args])


def assert_one_line_error(result, *fragments):
    assert result.exit_code == 1, result.output
    assert "Traceback" not in result.output and result.exception is not None
    assert isinstance(result.exception, SystemExit)  # a message, not a crash
    lines = result.stderr.strip().splitlines()
    assert len(lines) == 1, result.stderr
    for fragment in fragments:
        assert fragment in lines[0], (fragment, lines[0])


def leftovers(folder):
    """Temporary files of the atomic writer anywhere below ``folder``."""
    return [os.path.join(r, n) for r, _, names in os.walk(folder) for n in names
            if n.endswith(".part")]


@pytest.fixture()
def site(tmp_path):
    path = tmp_path / "site.wav"
    sf.write(path, sine(FS, 1000.0, 2.0, 0.01), FS, subtype="PCM_24")
    return path


class _FillingFile:
    """A file on a disk with ``room`` bytes left: the write that overflows stores what fits,
    then raises ENOSPC (as write(2) does once the disk is full)."""

    def __init__(self, handle, room: int) -> None:
        self._handle = handle
        self._room = room

    def write(self, data):
        size = len(data) if isinstance(data, str) else memoryview(data).nbytes
        if size > self._room:
            part = data[: self._room] if isinstance(data, str) else bytes(data)[: self._room]
            self._handle.write(part)
            self._handle.flush()
            self._room = 0
            raise OSError(errno.ENOSPC, os.strerror(errno.ENOSPC))
        self._room -= size
        return self._handle.write(data)

    def __getattr__(self, name):
        return getattr(self._handle, name)

    def __enter__(self):
        return self

    def __exit__(self, *exc):
        self._handle.close()


def fill_disk(monkeypatch, final_name: str, room: int = 10,
              used: list[str] | None = None) -> list[str]:
    """Make the atomic writer's temporary file for ``final_name`` (a base name) hit ENOSPC
    after ``room`` bytes; returns ``used``, the list that collects the temporary names (to
    check they are gone)."""
    real_mkstemp, real_fdopen = outputs.tempfile.mkstemp, outputs.os.fdopen
    doomed: dict[int, str] = {}
    used = [] if used is None else used

    def mkstemp(*args, **kwargs):
        fd, tmp = real_mkstemp(*args, **kwargs)
        if os.path.basename(tmp).startswith(f".{final_name}."):
            doomed[fd] = tmp
            used.append(tmp)
        return fd, tmp

    def fdopen(fd, *args, **kwargs):
        handle = real_fdopen(fd, *args, **kwargs)
        return _FillingFile(handle, room) if doomed.pop(fd, None) else handle

    monkeypatch.setattr(outputs.tempfile, "mkstemp", mkstemp)
    monkeypatch.setattr(outputs.os, "fdopen", fdopen)
    return used


# -- existing outputs ---------------------------------------------------------------------------


def test_batch_refuses_a_folder_of_someone_elses_tables(tmp_path, site):
    # levels -o and calibrate --save are covered in test_cli; a batch --out folder is resumed
    # when it is ours (manifest), refused when it holds other settings or foreign tables
    out = tmp_path / "out"
    out.mkdir()
    (out / "summary.csv").write_text("my own notes\n")
    result = run("batch", site, "--dbfs", "--out", out, "--workers", "1")
    assert_one_line_error(result, str(out), "summary.csv", "no bandmeter batch manifest",
                          "--force")
    assert (out / "summary.csv").read_text() == "my own notes\n"
    assert sorted(os.listdir(out)) == ["summary.csv"]
    forced = run("batch", site, "--dbfs", "--out", out, "--workers", "1", "--force")
    assert forced.exit_code == 0, forced.stderr
    assert (out / "summary.csv").read_text() != "my own notes\n"
    again = run("batch", site, "--dbfs", "--out", out, "--workers", "1")  # ours now: resume
    assert again.exit_code == 0 and "1 unchanged" in again.stdout
    other = run("batch", site, "--dbfs", "--interval", "1s", "--out", out, "--workers", "1")
    assert_one_line_error(other, "other analysis settings", "--force")


def test_batch_interrupted_before_any_result_can_be_rerun(tmp_path, site, monkeypatch):
    # Ctrl-C while the first measurement is being recorded: the tables are still written,
    # and so must the manifest be, or the rerun would take the folder for a foreign one
    import bandmeter.batch as batch

    def interrupted(*args):
        raise KeyboardInterrupt

    out = tmp_path / "out"
    monkeypatch.setattr(batch, "_record", interrupted)
    report = batch.run_batch([str(site)], str(out), batch.BatchOptions(allow_uncalibrated=True))
    assert report.interrupted and (out / "summary.csv").exists()
    monkeypatch.undo()
    rerun = batch.run_batch([str(site)], str(out), batch.BatchOptions(allow_uncalibrated=True))
    assert rerun.ok and rerun.analysed == 1


# -- unwritable folders -------------------------------------------------------------------------


def test_unwritable_folder_is_refused_before_the_analysis(tmp_path, site, monkeypatch):
    folder = tmp_path / "locked"
    folder.mkdir()
    real_access = outputs.os.access

    def access(path, mode, *args, **kwargs):
        if os.path.abspath(path) == str(folder) and mode & os.W_OK:
            return False  # as for a user without write permission there
        return real_access(path, mode, *args, **kwargs)

    monkeypatch.setattr(outputs.os, "access", access)
    analysed = []
    import bandmeter.commands.levels as levels_cmd

    real = levels_cmd.analyse_file
    monkeypatch.setattr(levels_cmd, "analyse_file",
                        lambda *a, **k: analysed.append(1) or real(*a, **k))
    result = run("levels", site, "--dbfs", "-o", folder / "levels.csv")
    assert_one_line_error(result, str(folder / "levels.csv"), "is not writable",
                          "choose an output folder")
    assert analysed == [] and os.listdir(folder) == []


@pytest.mark.parametrize("command", ["levels", "verify"])
@pytest.mark.parametrize("step", ["mkstemp", "replace"])
def test_permission_denied_while_writing(tmp_path, site, monkeypatch, step, command):
    out = tmp_path / f"{command}.csv"
    out.write_text("earlier result\n")
    denied = PermissionError(errno.EACCES, os.strerror(errno.EACCES))
    if step == "mkstemp":
        def fail(*args, **kwargs):
            raise denied
        monkeypatch.setattr(outputs.tempfile, "mkstemp", fail)
    else:
        def fail(src, dst, *args, **kwargs):
            raise denied
        monkeypatch.setattr(outputs.os, "replace", fail)
    if command == "levels":
        result = run("levels", site, "--dbfs", "-o", out, "--force")
    else:
        result = run("verify", "--group", "decay", "-o", out, "--force")
    assert_one_line_error(result, str(out), "Permission denied", "choose an output folder",
                          "no earlier file was changed")
    assert out.read_text() == "earlier result\n"
    assert sorted(os.listdir(tmp_path)) == sorted([out.name, "site.wav"])


def test_batch_output_folder_cannot_be_created(tmp_path, site, monkeypatch):
    import bandmeter.batch as batch

    def makedirs(path, *args, **kwargs):
        raise PermissionError(errno.EACCES, os.strerror(errno.EACCES), path)

    monkeypatch.setattr(batch.os, "makedirs", makedirs)
    result = run("batch", site, "--dbfs", "--out", tmp_path / "new", "--workers", "1")
    assert_one_line_error(result, str(tmp_path / "new"), "cannot create the output folder",
                          "Permission denied")


# -- full disk ----------------------------------------------------------------------------------


@pytest.mark.parametrize("command", ["levels", "calibrate", "verify"])
def test_disk_full_keeps_the_earlier_file(tmp_path, site, monkeypatch, command):
    if command == "levels":
        out = tmp_path / "levels.csv"
        args = ["levels", site, "--dbfs", "--interval", "0.5s", "-o", out, "--force"]
    elif command == "verify":
        out = tmp_path / "verify.csv"
        args = ["verify", "--group", "decay", "-o", out, "--force"]
    else:
        tone = tmp_path / "cal.wav"
        x = sine(FS, 1000.0, 4.0, 0.05) * fade(4 * FS, FS, 0.3, 0.3)
        sf.write(tone, x, FS, subtype="PCM_24")
        out = tmp_path / "day1.cal.json"
        args = ["calibrate", tone, "--level", "94", "--save", out, "--force"]
    first = run(*args)
    assert first.exit_code == 0, first.stderr
    before = out.read_bytes()
    names_before = sorted(os.listdir(tmp_path))
    used = fill_disk(monkeypatch, out.name, room=25)
    result = run(*args)
    assert_one_line_error(result, str(out), "no space left on device", "free some space")
    assert used, "the simulated disk was never written to"
    assert out.read_bytes() == before  # the earlier file, unchanged
    assert sorted(os.listdir(tmp_path)) == names_before  # no partial or temporary file
    assert not any(os.path.exists(t) for t in used)


def _survey(root):
    paths = []
    for i, seconds in enumerate((1.5, 1.0, 2.0)):
        x = pink_noise(int(seconds * FS), FS, seed=10 + i) * 0.02
        path = root / f"mp5_{i}.wav"
        sf.write(path, x, FS, subtype="PCM_24")
        paths.append(path)
    return paths


def _manifest(out):
    with open(out / "manifest.json", encoding="utf-8") as handle:
        return json.load(handle)


@pytest.mark.parametrize("target", ["result", "manifest", "summary"])
def test_disk_full_during_a_batch_then_resume(tmp_path, monkeypatch, target):
    root = tmp_path / "survey"
    root.mkdir()
    paths = _survey(root)
    out = tmp_path / "out"
    second = measurement_id(str(paths[1]))
    args = ["batch", root, "--full-scale-level", "110", "--interval", "0.5s", "--out", out,
            "--workers", "1"]
    if target == "manifest":
        # the disk fills when the manifest is rewritten after the second result; the first
        # rewrite (after the first result) still fits
        import bandmeter.manifest as manifest_mod

        saves = []
        real_save = manifest_mod.Manifest.save

        def save(self):
            saves.append(1)
            if len(saves) == 2:
                fill_disk(monkeypatch, "manifest.json", room=100, used=used)
            real_save(self)

        used: list[str] = []
        monkeypatch.setattr(manifest_mod.Manifest, "save", save)
    else:
        name = f"{second}.json" if target == "result" else "summary.csv"
        used = fill_disk(monkeypatch, name, room=100)
    result = run(*args)
    assert_one_line_error(result, "no space left on device")
    assert used
    assert not leftovers(out)
    entries = _manifest(out)["entries"]  # parses: never half-written
    done = {e["path"] for e in entries.values() if e["status"] == "ok"}
    expected = {str(p) for p in paths} if target == "summary" else {str(paths[0])}
    assert done == expected
    for entry in entries.values():
        with open(out / entry["result_file"], encoding="utf-8") as handle:
            json.load(handle)  # every listed result is complete
    assert not (out / "summary.csv").exists()  # the tables of an unfinished run: none yet
    monkeypatch.undo()  # space freed
    rerun = run(*args)
    assert rerun.exit_code == 0, rerun.stderr
    assert f"{len(expected)} unchanged" in rerun.stdout
    assert f"{3 - len(expected)} analysed" in rerun.stdout
    with open(out / "summary.csv", newline="") as handle:
        rows = list(csv.DictReader(handle))
    assert sorted(r["file"] for r in rows) == sorted(str(p) for p in paths)
    assert all(r["status"] == "ok" for r in rows)
    assert not leftovers(out)
    assert np.isfinite([float(r["LAeq"]) for r in rows]).all()
