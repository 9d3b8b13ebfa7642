"""Damaged and doubtful recordings: truncation, non-finite samples, DC offset."""

from __future__ import annotations

import json
import math

import numpy as np
import pytest
import soundfile as sf
from click.testing import CliRunner

from bandmeter.audio import read_info
from bandmeter.cli import cli
from bandmeter.engine import dc_offset_warning
from bandmeter.signals import sine

FS = 48000


def run(*args):
    return CliRunner().invoke(cli, [str(a) for a in args])


def test_truncated_wav_is_analysed_with_a_warning(tmp_path):
    full = tmp_path / "full.wav"
    sf.write(full, sine(FS, 1000.0, 4.0, 0.1), FS, subtype="PCM_24")
    data = full.read_bytes()
    cut = tmp_path / "cut.wav"
    cut.write_bytes(data[: 44 + 3 * FS * 2])  # header + 2 s of 24-bit mono samples
    info = read_info(cut)
    assert info.truncated and info.declared_frames == 4 * FS and info.frames == 2 * FS
    assert not read_info(full).truncated
    result = run("levels", cut, "--full-scale-level", "120", "--json")
    assert result.exit_code == 0
    warnings = json.loads(result.stdout)["warnings"]
    assert any("truncated" in w and "4.000 s" in w and "2.000 s" in w for w in warnings)
    assert "truncated" in result.stderr
    shown = run("info", cut)
    assert "YES" in shown.stdout and "truncated" in shown.stderr


@pytest.mark.parametrize("bad", [np.nan, np.inf, -np.inf])
def test_non_finite_samples_are_refused_with_their_position(tmp_path, bad):
    x = sine(FS, 1000.0, 2.0, 0.1)
    x[60000] = bad
    path = tmp_path / "bad.wav"
    sf.write(path, x, FS, subtype="FLOAT")
    result = run("levels", path, "--full-scale-level", "120")
    assert result.exit_code == 1
    assert "sample 60000 (1.250 s) is NaN or infinite" in result.stderr
    assert "Traceback" not in result.output


def test_dc_offset_warning():
    # energy arithmetic: a DC part d on a sine of amplitude a (ms a^2/2) raises the Z level
    # by 10 lg(1 + d^2 / (a^2/2)); d = a/10 -> 0.0432 dB (quiet), d = a/2 -> 0.51 dB (warned)
    n = FS
    x = sine(FS, 1000.0, 1.0, 0.1)
    assert dc_offset_warning(float(np.sum(x + 0.01)), float(np.sum((x + 0.01) ** 2)), n) is None
    y = x + 0.05
    text = dc_offset_warning(float(np.sum(y)), float(np.sum(y * y)), n)
    expected = 10 * math.log10(1 + 0.05**2 / (0.1**2 / 2))
    assert text is not None and f"{expected:.2f} dB" in text
    assert "constant" in dc_offset_warning(5.0, 5.0, 5)
