"""Plain-text rendering for the terminal: aligned tables and level formatting."""

from __future__ import annotations

import math
from collections.abc import Sequence


def fmt_db(value: float | None, decimals: int = 1) -> str:
    """A level for a table: fixed decimals, ``-inf`` for silence, ``-`` for missing."""
    if value is None or (isinstance(value, float) and math.isnan(value)):
        return "-"
    if math.isinf(value):
        return "-inf" if value < 0 else "+inf"
    return f"{value:.{decimals}f}"


def table(headers: Sequence[str], rows: Sequence[Sequence[object]], indent: str = "") -> str:
    """Render rows as a left-aligned first column and right-aligned other columns."""
    cells = [[str(h) for h in headers]] + [[str(c) for c in row] for row in rows]
    widths = [max(len(r[i]) for r in cells) for i in range(len(headers))]
    lines = []
    for k, row in enumerate(cells):
        rest = [c.rjust(w) for c, w in zip(row[1:], widths[1:], strict=True)]
        parts = [row[0].ljust(widths[0]), *rest]
        lines.append(indent + "  ".join(parts).rstrip())
        if k == 0:
            lines.append(indent + "  ".join("-" * w for w in widths))
    return "\n".join(lines)


def key_values(pairs: Sequence[tuple[str, object]], indent: str = "  ") -> str:
    """Render ``name: value`` lines with the names aligned."""
    if not pairs:
        return ""
    width = max(len(k) for k, _ in pairs)
    return "\n".join(f"{indent}{k.ljust(width)}  {v}" for k, v in pairs)
