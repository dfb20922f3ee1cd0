"""An archive of many distinct spectrum files, made fast: a few simulated spectra, each copied
with one digit of one absorbance value changed, so every file has its own sha256 (and its own,
slightly different, result) at the cost of a string edit."""
from __future__ import annotations

import functools
import sys
import tempfile
from pathlib import Path

HERE = Path(__file__).resolve().parent
if str(HERE) not in sys.path:  # for worker processes and subprocess tests
    sys.path.insert(0, str(HERE))

TEMPLATE_SEEDS = (1, 2, 3)


@functools.lru_cache(maxsize=None)
def template_lines(seed: int, resolution_cm1: float = 4.0) -> tuple[str, ...]:
    """A small simulated HCl 1-0 spectrum as CSV lines: at 4 cm-1 resolution 401 points, the
    band's R and P branches (analysed in ~10 ms)."""
    from processing.instrument import Instrument
    from processing.simulate import SampleGas, SimulationSettings, simulate, write_spectrum

    settings = SimulationSettings(
        gases=(SampleGas(("HCl",), 0.01),),
        instrument=Instrument(resolution_cm1=resolution_cm1, first_cm1=2650.0, last_cm1=3050.0, snr=1000.0, seed=seed),
    )
    with tempfile.TemporaryDirectory() as folder:
        path = Path(folder) / "template.csv"
        write_spectrum(str(path), simulate(settings), "csv", decimals=4)
        return tuple(path.read_text(encoding="utf-8").splitlines())


def varied_text(index: int, resolution_cm1: float = 4.0) -> str:
    """File number `index`: a template with the last digit of one y value changed (unique
    for index < 3 x the template's rows)."""
    lines = list(template_lines(TEMPLATE_SEEDS[index % len(TEMPLATE_SEEDS)], resolution_cm1))
    header = 1 if not lines[0][:1].isdigit() else 0
    row = header + (index // len(TEMPLATE_SEEDS)) % (len(lines) - header)
    x_text, _, y_text = lines[row].rpartition(",")
    last = int(y_text[-1])
    lines[row] = f"{x_text},{y_text[:-1]}{(last + 1) % 10}"
    return "\n".join(lines) + "\n"


def verdict_counts(paths: list[Path]) -> dict[str, int]:
    """How many of the files `process_file` gives each verdict (what a reprocess must record)."""
    from collections import Counter

    from processing.pipeline import process_file

    return dict(Counter(process_file(path).verdict for path in paths))


def write_archive(folder: Path, count: int, prefix: str = "run", resolution_cm1: float = 4.0) -> list[Path]:
    """`count` distinct files in `folder` (made if needed), named prefix-00000.csv ..."""
    folder.mkdir(parents=True, exist_ok=True)
    paths = []
    for index in range(count):
        path = folder / f"{prefix}-{index:05d}.csv"
        path.write_text(varied_text(index, resolution_cm1), encoding="utf-8")
        paths.append(path)
    return paths
