"""Generate the small recordings in fixtures/ whose exact content is known.

Run from the project root: ``python scripts/make_fixtures.py``. The files are committed; the
tests read them and compare with the values stated here (they also regenerate nothing).

Every fixture is a 1 kHz sine of known amplitude (dBFS = 20 lg(amplitude), a full-scale sine
being 0 dBFS), 0.5 s long, starting at a zero crossing:

| file | container / encoding | rate | channels | content |
|---|---|---|---|---|
| tone_pcm16.wav | WAV PCM_16 | 48000 | 1 | -20 dBFS |
| tone_pcm24.wav | WAV PCM_24 | 48000 | 1 | -20 dBFS |
| tone_float.wav | WAV FLOAT | 44100 | 1 | -20 dBFS |
| tone_pcm24.flac | FLAC PCM_24 | 48000 | 1 | -20 dBFS |
| stereo_rf64.wav | RF64 PCM_24 | 48000 | 2 | ch1 -20 dBFS, ch2 -30 dBFS |
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import soundfile as sf

FIXTURES = Path(__file__).resolve().parent.parent / "fixtures"


def tone(fs: int, dbfs: float, seconds: float = 0.5) -> np.ndarray:
    n = int(fs * seconds)
    return 10 ** (dbfs / 20) * np.sin(2 * np.pi * 1000.0 * np.arange(n) / fs)


def main() -> None:
    FIXTURES.mkdir(exist_ok=True)
    sf.write(FIXTURES / "tone_pcm16.wav", tone(48000, -20), 48000, subtype="PCM_16")
    sf.write(FIXTURES / "tone_pcm24.wav", tone(48000, -20), 48000, subtype="PCM_24")
    sf.write(FIXTURES / "tone_float.wav", tone(44100, -20), 44100, subtype="FLOAT")
    sf.write(FIXTURES / "tone_pcm24.flac", tone(48000, -20), 48000, subtype="PCM_24")
    stereo = np.column_stack([tone(48000, -20), tone(48000, -30)])
    sf.write(FIXTURES / "stereo_rf64.wav", stereo, 48000, format="RF64", subtype="PCM_24")
    for path in sorted(FIXTURES.iterdir()):
        print(f"{path.name}: {path.stat().st_size} bytes")


if __name__ == "__main__":
    main()
