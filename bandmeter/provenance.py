"""Provenance: content hashes and tool identity stamped on every result."""

from __future__ import annotations

import hashlib
import os
import platform
from datetime import datetime, timezone

from . import __version__

_HASH_CHUNK = 1 << 20


def file_sha256(path: str | os.PathLike[str]) -> str:
    """SHA-256 of a file's bytes, as 64 lowercase hex digits (read in 1 MiB chunks)."""
    digest = hashlib.sha256()
    with open(path, "rb") as handle:
        while chunk := handle.read(_HASH_CHUNK):
            digest.update(chunk)
    return digest.hexdigest()


def now_iso() -> str:
    """Current UTC time as ISO 8601 with seconds, e.g. ``2026-12-02T18:51:06+00:00``."""
    return datetime.now(timezone.utc).replace(microsecond=0).isoformat()


def tool_stamp() -> dict[str, str]:
    """Name and version of the tool, of the Python that ran it, and which paths computed
    the results (:func:`bandmeter.compiled.describe`: the compiled kernels or the NumPy
    paths, which agree to 1e-9 dB; see :mod:`bandmeter.compiled`)."""
    from .compiled import describe

    return {
        "tool": "bandmeter",
        "tool_version": __version__,
        "python": platform.python_version(),
        "kernels": describe(),
    }
