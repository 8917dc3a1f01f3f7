"""Plain aligned text tables for the terminal (no dependency, so the CLI stays fast)."""

from __future__ import annotations

__all__ = ["format_table"]


def _cell(v):
    if isinstance(v, float):
        return f"{v:.4g}"
    return str(v)


def format_table(rows):
    """Rows (dicts, possibly with different keys) as an aligned table; numbers right-aligned."""
    if not rows:
        return "(no rows)"
    cols = list(dict.fromkeys(k for r in rows for k in r))
    cells = [[_cell(r.get(c, "")) for c in cols] for r in rows]
    widths = [max(len(c), *(len(row[i]) for row in cells)) for i, c in enumerate(cols)]
    numeric = [all(isinstance(r.get(c), (int, float)) for r in rows if c in r) for c in cols]
    def line(values):
        return "  ".join(v.rjust(w) if num else v.ljust(w) for v, w, num in zip(values, widths, numeric)).rstrip()
    return "\n".join([line(cols), line(["-" * w for w in widths]), *(line(r) for r in cells)])
