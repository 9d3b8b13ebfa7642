"""Open recordings and read one channel in blocks.

Recordings are read through libsndfile (python-soundfile): WAV (PCM 8/16/24/32-bit, float
32/64), WAV larger than 4 GB as RF64 or Sony Wave64, FLAC, AIFF and CAF. Samples come out as
float64 on the full-scale scale (a full-scale PCM code is +-1.0), one channel at a time, in
blocks without gaps or overlaps, so a 24-hour recording never sits in memory.

Lossy or companded encodings (MP3, Ogg, A-law, mu-law, ADPCM) are refused: they cannot carry a
calibrated level.
"""

from __future__ import annotations

import os
from collections.abc import Iterator
from dataclasses import asdict, dataclass
from pathlib import Path
from types import TracebackType

import numpy as np
import soundfile as sf

from .errors import AudioError, SettingsError

#: Containers bandmeter reads (libsndfile major format names).
SUPPORTED_FORMATS = ("WAV", "WAVEX", "RF64", "W64", "FLAC", "AIFF", "CAF")

#: Sample encodings bandmeter reads, with their bit depth.
BIT_DEPTH = {
    "PCM_S8": 8,
    "PCM_U8": 8,
    "PCM_16": 16,
    "PCM_24": 24,
    "PCM_32": 32,
    "FLOAT": 32,
    "DOUBLE": 64,
}

#: Default block length in frames (about 1.4 s at 48 kHz).
DEFAULT_BLOCK_FRAMES = 65536


@dataclass(frozen=True)
class RecordingInfo:
    """What a recording's header says.

    Attributes
    ----------
    path : str
        Path of the file as given.
    format : str
        Container, e.g. ``"WAV"``, ``"RF64"``, ``"FLAC"``.
    subtype : str
        Sample encoding, e.g. ``"PCM_24"``, ``"FLOAT"``.
    bit_depth : int
        Bits per sample of the encoding.
    sample_rate : int
        Sampling rate in Hz.
    channels : int
        Number of channels in the file.
    frames : int
        Number of sample frames (samples per channel) present in the file.
    declared_frames : int or None
        Frames the WAV/RF64 header's data chunk declares (None for other containers or when
        it cannot be read). More than ``frames`` means the file is truncated (a recorder
        that lost power, a copy that stopped).
    """

    path: str
    format: str
    subtype: str
    bit_depth: int
    sample_rate: int
    channels: int
    frames: int
    declared_frames: int | None = None

    @property
    def truncated(self) -> bool:
        """True when the header declares more audio than the file holds."""
        return self.declared_frames is not None and self.declared_frames > self.frames

    def truncation_warning(self) -> str | None:
        """One line for the reports when the file is truncated, else None."""
        if not self.truncated:
            return None
        assert self.declared_frames is not None
        return (f"{self.path}: truncated: the header declares "
                f"{self.declared_frames / self.sample_rate:.3f} s but the file holds "
                f"{self.duration_s:.3f} s; only the {self.duration_s:.3f} s present are "
                "analysed")

    @property
    def duration_s(self) -> float:
        """Duration in seconds."""
        return self.frames / self.sample_rate

    @property
    def is_float(self) -> bool:
        """True for floating-point encodings (values may exceed full scale)."""
        return self.subtype in ("FLOAT", "DOUBLE")

    @property
    def full_scale_threshold(self) -> float:
        """Magnitude at or above which a sample counts as at full scale (possible overload).

        For PCM the largest positive code is ``(2**(n-1) - 1) / 2**(n-1)`` on the +-1 scale
        and the most negative is -1.0; a sample whose magnitude reaches the largest positive
        code counts. Float files have full scale at 1.0.
        """
        if self.is_float:
            return 1.0
        half = 2.0 ** (self.bit_depth - 1)
        return (half - 1.0) / half

    def to_dict(self) -> dict[str, object]:
        """The header as a JSON-ready dictionary, with ``duration_s`` added."""
        out: dict[str, object] = asdict(self)
        out["duration_s"] = self.duration_s
        return out


def _describe_libsndfile_error(path: str, exc: Exception) -> str:
    reason = str(exc).strip().rstrip(".")
    # libsndfile messages look like "Error opening 'x': Format not recognised."
    if ": " in reason:
        reason = reason.rsplit(": ", 1)[-1]
    return f"{path}: not a readable audio file ({reason}); expected WAV, RF64, W64 or FLAC"


def check_readable_file(path: str) -> None:
    """Raise a one-line :class:`AudioError` unless ``path`` is a file this process can read."""
    if not os.path.exists(path):
        raise AudioError(f"{path}: no such file")
    if os.path.isdir(path):
        raise AudioError(f"{path}: is a folder, expected an audio file")
    denied = (f"{path}: permission denied (cannot read the file); check its permissions, "
              "or copy it to a folder you can read")
    if not os.access(path, os.R_OK):
        raise AudioError(denied)
    # os.access says yes to root even where the open then fails (root-squashed network
    # shares, mandatory access control): try the open itself, or libsndfile reports an
    # empty "system error" that reads like a damaged file
    try:
        with open(path, "rb"):
            pass
    except PermissionError:
        raise AudioError(denied) from None
    except OSError as exc:
        raise AudioError(f"{path}: cannot read the file ({exc.strerror or exc})") from None


def _check_path(path: str) -> None:
    check_readable_file(path)
    if os.path.getsize(path) == 0:
        raise AudioError(f"{path}: file is empty (0 bytes)")


def _open_soundfile(path: str) -> sf.SoundFile:
    _check_path(path)
    try:
        handle = sf.SoundFile(path, "r")
    except (sf.LibsndfileError, RuntimeError, TypeError) as exc:
        raise AudioError(_describe_libsndfile_error(path, exc)) from exc
    if handle.format not in SUPPORTED_FORMATS:
        handle.close()
        raise AudioError(
            f"{path}: unsupported container {handle.format!r}; "
            f"use one of {', '.join(SUPPORTED_FORMATS)}"
        )
    if handle.subtype not in BIT_DEPTH:
        subtype = handle.subtype
        handle.close()
        raise AudioError(
            f"{path}: unsupported sample encoding {subtype!r} (lossy or companded encodings "
            f"cannot carry a calibrated level); use PCM 16/24/32-bit or float"
        )
    return handle


def _declared_frames(path: str, container: str) -> int | None:
    """Frames declared by a WAV/RF64 data chunk (via wavinfo), or None."""
    if container not in ("WAV", "WAVEX", "RF64"):
        return None
    try:
        from wavinfo import WavInfoReader

        info = WavInfoReader(path)
        block_align = int(info.fmt.block_align)
        count = int(info.data.byte_count)
    except Exception:  # noqa: BLE001 - a header wavinfo cannot read: no declared length
        return None
    if block_align <= 0 or count <= 0:
        return None
    return count // block_align


def read_info(path: str | os.PathLike[str]) -> RecordingInfo:
    """Read a recording's header.

    Parameters
    ----------
    path : str or path-like
        Recording file.

    Returns
    -------
    RecordingInfo

    Raises
    ------
    AudioError
        Missing file, folder, unreadable, empty, not audio, unsupported encoding.
    """
    spath = os.fspath(path)
    with _open_soundfile(spath) as handle:
        return RecordingInfo(
            path=spath,
            format=handle.format,
            subtype=handle.subtype,
            bit_depth=BIT_DEPTH[handle.subtype],
            sample_rate=int(handle.samplerate),
            channels=int(handle.channels),
            frames=int(handle.frames),
            declared_frames=_declared_frames(spath, handle.format),
        )


class Recording:
    """One channel of a recording, read in blocks.

    Parameters
    ----------
    path : str or path-like
        Recording file.
    channel : int, optional
        Channel to read, 1-based (default 1).

    Raises
    ------
    AudioError
        File problems (see :func:`read_info`), a file with no samples, or a channel that the
        file does not have.

    Examples
    --------
    >>> with Recording("site_a_night.wav", channel=1) as rec:  # doctest: +SKIP
    ...     for block in rec.blocks(48000):
    ...         ...
    """

    def __init__(self, path: str | os.PathLike[str], channel: int = 1) -> None:
        self.path = os.fspath(path)
        if isinstance(channel, bool) or not isinstance(channel, (int, np.integer)):
            raise TypeError(f"channel must be an int, got {channel!r}")
        self._handle = _open_soundfile(self.path)
        try:
            self.info = RecordingInfo(
                path=self.path,
                format=self._handle.format,
                subtype=self._handle.subtype,
                bit_depth=BIT_DEPTH[self._handle.subtype],
                sample_rate=int(self._handle.samplerate),
                channels=int(self._handle.channels),
                frames=int(self._handle.frames),
                declared_frames=_declared_frames(self.path, self._handle.format),
            )
            if not 1 <= channel <= self.info.channels:
                raise AudioError(
                    f"{self.path}: channel {int(channel)} out of range; the file has "
                    f"{self.info.channels} channel(s), numbered from 1"
                )
            if self.info.frames == 0:
                raise AudioError(f"{self.path}: the recording contains no audio samples")
        except BaseException:
            self._handle.close()
            raise
        self.channel = int(channel)

    @property
    def sample_rate(self) -> int:
        """Sampling rate in Hz."""
        return self.info.sample_rate

    @property
    def frames(self) -> int:
        """Number of samples in the channel."""
        return self.info.frames

    def __enter__(self) -> Recording:
        return self

    def __exit__(
        self,
        exc_type: type[BaseException] | None,
        exc: BaseException | None,
        tb: TracebackType | None,
    ) -> None:
        self.close()

    def close(self) -> None:
        """Close the file."""
        self._handle.close()

    def blocks(
        self, block_frames: int = DEFAULT_BLOCK_FRAMES, start: int = 0, stop: int | None = None
    ) -> Iterator[np.ndarray]:
        """Iterate over the channel in consecutive blocks.

        Parameters
        ----------
        block_frames : int, optional
            Samples per block; the last block may be shorter.
        start, stop : int, optional
            Sample range ``[start, stop)``; ``stop=None`` means to the end. Negative values
            count from the end, as in Python slicing.

        Yields
        ------
        numpy.ndarray
            float64 samples on the +-1.0 full-scale scale, one dimension.

        Raises
        ------
        AudioError
            When the file is shorter than its header claims or cannot be read.
        """
        if isinstance(block_frames, bool) or int(block_frames) != block_frames or block_frames < 1:
            raise SettingsError(f"block_frames must be a positive integer, got {block_frames!r}")
        first, last, _ = slice(start, stop).indices(self.frames)
        position = first
        try:
            self._handle.seek(first)
        except (sf.LibsndfileError, RuntimeError) as exc:
            raise AudioError(f"{self.path}: cannot seek to sample {first} ({exc})") from exc
        while position < last:
            want = min(int(block_frames), last - position)
            try:
                data = self._handle.read(want, dtype="float64", always_2d=True)
            except (sf.LibsndfileError, RuntimeError) as exc:
                raise AudioError(f"{self.path}: read failed at sample {position} ({exc})") from exc
            got = data.shape[0]
            if got == 0:
                raise AudioError(
                    f"{self.path}: file ends at sample {position} of {self.frames} "
                    f"({position / self.sample_rate:.3f} s of "
                    f"{self.frames / self.sample_rate:.3f} s); the file is truncated"
                )
            block = np.ascontiguousarray(data[:, self.channel - 1])
            if self.info.is_float and not np.isfinite(block).all():
                bad = int(np.flatnonzero(~np.isfinite(block))[0]) + position
                raise AudioError(
                    f"{self.path}: sample {bad} ({bad / self.sample_rate:.3f} s) is NaN or "
                    "infinite; the float file is corrupt there (no level can be computed): "
                    "repair or cut the file"
                )
            position += got
            yield block

    def read(self, start: int = 0, stop: int | None = None) -> np.ndarray:
        """Read a sample range of the channel into memory (for short files and spans)."""
        parts = list(self.blocks(DEFAULT_BLOCK_FRAMES * 8, start, stop))
        if not parts:
            return np.empty(0, dtype=np.float64)
        return np.concatenate(parts)


def open_recording(path: str | os.PathLike[str], channel: int = 1) -> Recording:
    """Open one channel of a recording; see :class:`Recording`."""
    return Recording(path, channel)


def count_full_scale(block: np.ndarray, threshold: float) -> int:
    """Count samples at or beyond full scale.

    Parameters
    ----------
    block : numpy.ndarray
        Samples on the +-1.0 scale.
    threshold : float
        Magnitude counted as full scale, see :attr:`RecordingInfo.full_scale_threshold`.

    Returns
    -------
    int
        Number of samples with ``|x| >= threshold`` (NaN is not counted).
    """
    return int(np.count_nonzero(np.abs(block) >= threshold))


def channel_path_label(path: str | os.PathLike[str], channel: int) -> str:
    """Short label ``name.wav#ch2`` for messages and tables (``name.wav`` for channel 1)."""
    name = Path(path).name
    return name if channel == 1 else f"{name}#ch{channel}"
