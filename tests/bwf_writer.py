"""A broadcast-WAV (EBU Tech 3285) writer for tests: PCM by soundfile plus a bext chunk."""

from __future__ import annotations

import io
import struct

import numpy as np
import soundfile as sf

FS = 48000


def _bext_payload(
    date: str,
    time: str,
    time_reference: int,
    description: str = "invented test survey, point Q7",
    version: int = 1,
) -> bytes:
    """A ``bext`` chunk body, EBU Tech 3285 (version 1/2) layout, little-endian."""
    coding_history = b"A=PCM,F=48000,W=24,M=mono,T=bandmeter-test\r\n"
    return (
        description.encode("latin_1").ljust(256, b"\0")  # Description, 256 bytes
        + b"Fieldbox FB-2".ljust(32, b"\0")  # Originator, 32 (invented recorder)
        + b"FB2SN0001".ljust(32, b"\0")  # OriginatorReference, 32
        + date.encode("ascii").ljust(10, b"\0")[:10]  # OriginationDate, 10 (yyyy-mm-dd)
        + time.encode("ascii").ljust(8, b"\0")[:8]  # OriginationTime, 8 (hh:mm:ss)
        + struct.pack("<II", time_reference & 0xFFFFFFFF, time_reference >> 32)  # TimeRef L/H
        + struct.pack("<H", version)  # Version, uint16
        + bytes(64)  # UMID, 64
        + bytes(10)  # LoudnessValue..MaxShortTermLoudness, 5 x int16
        + bytes(180)  # Reserved, 180
        + coding_history  # CodingHistory, variable
    )


def write_bwf(
    path,
    x: np.ndarray,
    fs: int = FS,
    *,
    date: str = "2026-05-14",
    time: str = "22:00:00",
    time_reference: int = 0,
    description: str = "invented test survey, point Q7",
) -> None:
    """Write a broadcast-WAV file: soundfile PCM, then a bext chunk right after ``fmt ``."""
    buf = io.BytesIO()
    sf.write(buf, x, fs, format="WAV", subtype="PCM_24")
    raw = buf.getvalue()
    assert raw[:4] == b"RIFF" and raw[8:12] == b"WAVE"
    pos = 12
    while True:  # walk the RIFF chunks to the end of "fmt "
        ident = raw[pos : pos + 4]
        size = struct.unpack("<I", raw[pos + 4 : pos + 8])[0]
        pos += 8 + size + (size & 1)
        if ident == b"fmt ":
            break
    body = _bext_payload(date, time, time_reference, description)
    chunk = b"bext" + struct.pack("<I", len(body)) + body + b"\0" * (len(body) & 1)
    out = raw[:pos] + chunk + raw[pos:]
    out = out[:4] + struct.pack("<I", len(out) - 8) + out[8:]  # RIFF size
    with open(path, "wb") as handle:
        handle.write(out)
