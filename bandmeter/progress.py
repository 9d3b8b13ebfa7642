"""A one-line progress display for long batches (terminal only; silent otherwise)."""

from __future__ import annotations

import sys
import time
from typing import TextIO


def _clock(seconds: float) -> str:
    seconds = max(0, int(round(seconds)))
    return f"{seconds // 3600}:{seconds % 3600 // 60:02d}:{seconds % 60:02d}"


class Progress:
    """Files done / total, audio hours processed, rate (audio hours per hour) and ETA.

    Parameters
    ----------
    total_files : int
        Measurements in the batch.
    total_audio_s : float
        Audio to analyse, s (measurements that are reused count as done at once).
    stream : file, optional
        Where to draw (default stderr).
    enabled : bool or None
        Draw or not; None (default) draws only when ``stream`` is a terminal, so CI logs and
        pipes stay clean.
    """

    def __init__(self, total_files: int, total_audio_s: float, stream: TextIO | None = None,
                 enabled: bool | None = None) -> None:
        self.stream = stream or sys.stderr
        self.enabled = self.stream.isatty() if enabled is None else enabled
        self.total_files, self.total_audio_s = total_files, total_audio_s
        self.files = 0
        self.failed = 0
        self.audio_s = 0.0  # analysed now (not reused)
        self.skipped_audio_s = 0.0
        self.started = time.monotonic()

    def update(self, audio_s: float, reused: bool, ok: bool) -> None:
        """Count one finished measurement and redraw."""
        self.files += 1
        self.failed += 0 if ok else 1
        if reused:
            self.skipped_audio_s += audio_s
        else:
            self.audio_s += audio_s
        self.draw()

    def line(self) -> str:
        """The progress text."""
        elapsed = max(time.monotonic() - self.started, 1e-9)
        rate = self.audio_s / elapsed  # audio seconds per second = audio hours per hour
        left = max(self.total_audio_s - self.audio_s - self.skipped_audio_s, 0.0)
        eta = _clock(left / rate) if rate > 0 else "--:--:--"
        failed = f", {self.failed} failed" if self.failed else ""
        return (f"{self.files}/{self.total_files} files{failed}, "
                f"{(self.audio_s + self.skipped_audio_s) / 3600:.2f} h of "
                f"{self.total_audio_s / 3600:.2f} h audio, {rate:.0f} h/h, ETA {eta}")

    def draw(self) -> None:
        if self.enabled:
            self.stream.write("\r" + self.line().ljust(78))
            self.stream.flush()

    def close(self) -> None:
        if self.enabled:
            self.stream.write("\n")
            self.stream.flush()
