"""bandmeter: calibrated sound level, band and assessment analysis of field recordings."""

from __future__ import annotations

__version__ = "0.1.0"

__all__ = ["__version__"]
