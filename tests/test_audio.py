"""Recording input (bandmeter.audio): formats, blocks, metadata, errors."""

from __future__ import annotations

import numpy as np
import pytest
import soundfile as sf

from bandmeter.audio import Recording, count_full_scale, read_info
from bandmeter.errors import AudioError, SettingsError

FS = 48000


def _sine(n: int = FS, amplitude: float = 0.5, f: float = 1000.0) -> np.ndarray:
    return amplitude * np.sin(2 * np.pi * f * np.arange(n) / FS)


@pytest.mark.parametrize(
    ("fmt", "subtype", "bits", "ext"),
    [
        ("WAV", "PCM_16", 16, "wav"),
        ("WAV", "PCM_24", 24, "wav"),
        ("WAV", "PCM_32", 32, "wav"),
        ("WAV", "FLOAT", 32, "wav"),
        ("WAV", "DOUBLE", 64, "wav"),
        ("RF64", "PCM_24", 24, "wav"),
        ("W64", "FLOAT", 32, "w64"),
        ("FLAC", "PCM_16", 16, "flac"),
        ("FLAC", "PCM_24", 24, "flac"),
    ],
)
def test_formats_read_back_on_full_scale(tmp_path, fmt, subtype, bits, ext):
    x = _sine()
    path = tmp_path / f"tone.{ext}"
    sf.write(path, x, FS, format=fmt, subtype=subtype)
    info = read_info(path)
    assert (info.format, info.subtype, info.bit_depth) == (fmt, subtype, bits)
    assert (info.sample_rate, info.channels, info.frames) == (FS, 1, FS)
    assert info.duration_s == pytest.approx(1.0)
    with Recording(path) as rec:
        y = rec.read()
    assert y.dtype == np.float64
    # quantisation step of n-bit PCM on the +-1 scale is 2^-(n-1) (common practice, no source)
    step = 2.0 ** -(bits - 1) if subtype.startswith("PCM") else 1e-7
    np.testing.assert_allclose(y, x, atol=step)


def test_blocks_have_no_gaps_or_overlaps(tmp_path):
    rng = np.random.default_rng(3)
    x = rng.uniform(-0.9, 0.9, 10_007)
    path = tmp_path / "noise.wav"
    sf.write(path, x, FS, subtype="DOUBLE")
    with Recording(path) as rec:
        for size in (1, 7, 1000, 10_007, 50_000):
            blocks = list(rec.blocks(size))
            assert all(len(b) == size for b in blocks[:-1])
            np.testing.assert_array_equal(np.concatenate(blocks), x)
        np.testing.assert_array_equal(np.concatenate(list(rec.blocks(333, 100, 2000))),
                                      x[100:2000])
        np.testing.assert_array_equal(rec.read(-10), x[-10:])
        with pytest.raises(SettingsError):
            list(rec.blocks(0))


def test_channel_selection_is_one_based(tmp_path):
    left, right = _sine(amplitude=0.25), _sine(amplitude=0.5)
    path = tmp_path / "stereo.wav"
    sf.write(path, np.column_stack([left, right]), FS, subtype="FLOAT")
    with Recording(path, channel=2) as rec:
        np.testing.assert_allclose(rec.read(), right, atol=1e-7)
    with Recording(path, channel=1) as rec:
        np.testing.assert_allclose(rec.read(), left, atol=1e-7)
    with pytest.raises(AudioError, match=r"channel 3 out of range; the file has 2 channel"):
        Recording(path, channel=3)
    with pytest.raises(AudioError, match="channel 0 out of range"):
        Recording(path, channel=0)


def test_full_scale_count(tmp_path):
    # PCM: the largest positive 16-bit code is 32767/32768 on the +-1 scale, the most
    # negative -1.0 (two's complement, common practice, no source)
    x = np.zeros(100)
    x[10] = 1.0  # clipped to 32767 when written as PCM_16
    x[20] = -1.0
    x[30] = 0.999
    path = tmp_path / "clip.wav"
    sf.write(path, x, FS, subtype="PCM_16")
    info = read_info(path)
    assert info.full_scale_threshold == pytest.approx(32767 / 32768)
    with Recording(path) as rec:
        assert count_full_scale(rec.read(), info.full_scale_threshold) == 2


def test_float_files_can_exceed_full_scale(tmp_path):
    x = np.array([0.5, 1.0, 1.5, -2.0, 0.0])
    path = tmp_path / "hot.wav"
    sf.write(path, x, FS, subtype="FLOAT")
    info = read_info(path)
    assert info.full_scale_threshold == 1.0
    with Recording(path) as rec:
        y = rec.read()
    np.testing.assert_allclose(y, x)
    assert count_full_scale(y, 1.0) == 3


def test_errors_are_one_line_and_name_the_file(tmp_path):
    cases = {}
    cases["missing"] = (tmp_path / "nope.wav", "no such file")
    cases["folder"] = (tmp_path, "is a folder")
    empty = tmp_path / "empty.wav"
    empty.write_bytes(b"")
    cases["empty"] = (empty, r"file is empty \(0 bytes\)")
    text = tmp_path / "notes.wav"
    text.write_text("field notes, not audio\n" * 20)
    cases["text"] = (text, "not a readable audio file")
    zero = tmp_path / "zero.wav"
    sf.write(zero, np.zeros(0), FS)
    cases["zero"] = (zero, "contains no audio samples")
    lossy = tmp_path / "tone.ogg"
    sf.write(lossy, _sine(), FS)
    cases["lossy"] = (lossy, "unsupported container 'OGG'")
    alaw = tmp_path / "alaw.wav"
    sf.write(alaw, _sine(), FS, subtype="ALAW")
    cases["alaw"] = (alaw, "unsupported sample encoding 'ALAW'")
    for name, (path, pattern) in cases.items():
        with pytest.raises(AudioError, match=pattern) as err:
            Recording(path)
        message = str(err.value)
        assert "\n" not in message, name
        assert str(path) in message, name


def test_channel_type_error(tmp_path):
    path = tmp_path / "t.wav"
    sf.write(path, _sine(100), FS)
    with pytest.raises(TypeError):
        Recording(path, channel="1")


FIXTURES = __import__("pathlib").Path(__file__).resolve().parent.parent / "fixtures"


@pytest.mark.parametrize(
    ("name", "fs", "channel", "dbfs"),
    [
        ("tone_pcm16.wav", 48000, 1, -20.0),
        ("tone_pcm24.wav", 48000, 1, -20.0),
        ("tone_float.wav", 44100, 1, -20.0),
        ("tone_pcm24.flac", 48000, 1, -20.0),
        ("stereo_rf64.wav", 48000, 1, -20.0),
        ("stereo_rf64.wav", 48000, 2, -30.0),
    ],
)
def test_committed_fixtures_read_their_known_level(name, fs, channel, dbfs):
    # scripts/make_fixtures.py: 0.5 s of 1 kHz (500 whole cycles) at the stated dBFS;
    # rms of a sine = amplitude / sqrt(2) (physics), full-scale sine = 0 dBFS
    with Recording(FIXTURES / name, channel=channel) as rec:
        assert rec.sample_rate == fs
        x = rec.read()
    level = 20 * np.log10(np.sqrt(2 * np.mean(x * x)))
    assert level == pytest.approx(dbfs, abs=0.001)
