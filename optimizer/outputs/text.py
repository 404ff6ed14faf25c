"""Plain-text tables for the terminal (no colour codes; readable at 100 columns)."""

from __future__ import annotations

from collections.abc import Sequence

__all__ = ["table"]


def table(headers: Sequence[str], rows: Sequence[Sequence[object]], align: str | None = None) -> str:
    """Format rows under headers; ``align`` is one letter per column, ``l`` or ``r``."""
    cells = [[str(h) for h in headers]] + [["" if c is None else str(c) for c in row] for row in rows]
    n = len(headers)
    align = align or "l" * n
    widths = [max(len(r[i]) for r in cells) for i in range(n)]
    out = []
    for k, r in enumerate(cells):
        parts = [r[i].rjust(widths[i]) if align[i] == "r" else r[i].ljust(widths[i]) for i in range(n)]
        out.append("  ".join(parts).rstrip())
        if k == 0:
            out.append("  ".join("-" * w for w in widths))
    return "\n".join(out)
