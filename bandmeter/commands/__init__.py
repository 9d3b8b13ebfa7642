"""Click commands of the ``bandmeter`` CLI, one module per command (thin wrappers)."""

from . import calibrate, info, levels  # noqa: F401
