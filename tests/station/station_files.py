"""Small files for the station tests: delimited spectra written with plain Python."""
from __future__ import annotations

import math
import os
import sys
from pathlib import Path

HERE = Path(__file__).resolve().parent
if str(HERE) not in sys.path:  # the hooks module, for in-process and worker imports
    sys.path.insert(0, str(HERE))


def spectrum_csv(points: int = 400, centre_cm1: float = 2906.0, first_cm1: float = 2850.0,
                 last_cm1: float = 2950.0) -> str:
    """A small delimited-text spectrum: flat baseline and one Gaussian absorption line."""
    rows = ["wavenumber,absorbance"]
    step = (last_cm1 - first_cm1) / (points - 1)
    for index in range(points):
        x = first_cm1 + index * step
        y = 0.01 + 0.3 * math.exp(-(((x - centre_cm1) / 0.3) ** 2))
        rows.append(f"{x:.5f},{y:.6f}")
    return "\n".join(rows) + "\n"


def write_file(path: Path, text: str, mtime: float | None = None) -> Path:
    path.write_text(text, encoding="utf-8")
    if mtime is not None:
        os.utime(path, (mtime, mtime))
    return path
