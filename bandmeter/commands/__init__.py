"""Click commands of the ``bandmeter`` CLI, one module per command (thin wrappers)."""

from . import (  # noqa: F401
    batch,
    calibrate,
    combine,
    demo,
    events,
    exposure,
    info,
    levels,
    plot,
    rating,
    report,
    verify,
)
