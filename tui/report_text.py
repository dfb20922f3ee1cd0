"""Plain-text rendering of a RunResult for `bandwatch process` (aligned tables, no colour)."""
from __future__ import annotations

from processing.pipeline import RunResult


def _table(headers: list[str], rows: list[list[str]], right: set[int] | None = None) -> str:
    right = right or set()
    widths = [len(h) for h in headers]
    for row in rows:
        widths = [max(w, len(cell)) for w, cell in zip(widths, row)]

    def fmt(cells: list[str]) -> str:
        return "  ".join(
            cell.rjust(w) if i in right else cell.ljust(w) for i, (cell, w) in enumerate(zip(cells, widths))
        ).rstrip()

    lines = [fmt(headers), fmt(["-" * w for w in widths])]
    lines += [fmt(row) for row in rows]
    return "\n".join(lines)


def render_result(result: RunResult) -> str:
    out = [f"== {result.file}"]
    if result.status != "processed" or result.spectrum is None:
        out.append(f"   {result.status}: {result.error}")
        return "\n".join(out)
    s = result.spectrum
    spacing = f"{s.spacing_cm1:.4f}" if s.spacing_cm1 is not None else "-"
    resolution = f"{s.resolution_cm1:g}" if s.resolution_cm1 is not None else "not stated"
    out.append(
        _table(
            ["kind", "points", "first cm-1", "last cm-1", "spacing cm-1", "y read as", "resolution cm-1", "format"],
            [[s.kind, str(s.points), f"{s.first_cm1:.4f}", f"{s.last_cm1:.4f}", spacing, s.y_units, resolution, s.format]],
            right={1, 2, 3, 4},
        )
    )
    for note in s.notes:
        out.append(f"   note: {note}")
    return "\n".join(out)
