"""Click commands of the ``bandmeter`` CLI, one module per command (thin wrappers)."""

from . import batch, calibrate, demo, events, info, levels  # noqa: F401
