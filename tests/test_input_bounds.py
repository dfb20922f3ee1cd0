"""Hostile input stays cheap: a few bytes cannot make bandwatch allocate gigabytes or work for
minutes, and running out of memory is a failure of the run, not a fault of the reader."""
from __future__ import annotations

import os
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import pytest

from hostile_inputs import BOMB

from processing.errors import SpectrumFileError
from processing.readers import jcamp, parse_bytes

ROOT = Path(__file__).resolve().parents[1]

GIGABYTE_KB = 1024 * 1024


def measured_process(path: Path, *extra: str) -> tuple[int, str, str, float, int]:
    """`bandwatch process` on one file: exit code, stdout, stderr, seconds, peak resident KB."""
    started = time.monotonic()
    child = subprocess.Popen([sys.executable, "-m", "tui", "process", str(path), *extra],
                             stdout=subprocess.PIPE, stderr=subprocess.PIPE, cwd=ROOT,
                             env=dict(os.environ, PYTHONPATH=str(ROOT)))
    out = child.stdout.read().decode(errors="replace")  # type: ignore[union-attr]
    err = child.stderr.read().decode(errors="replace")  # type: ignore[union-attr]
    # wait4 reaps this child and gives its own peak (not that of the test's other children)
    _, status, usage = os.wait4(child.pid, 0)
    child.returncode = os.waitstatus_to_exitcode(status)
    return child.returncode, out, err, time.monotonic() - started, int(usage.ru_maxrss)


def test_declared_points_beyond_what_the_bytes_hold_are_refused_before_allocating(tmp_path: Path) -> None:
    path = tmp_path / "bomb.jdx"
    path.write_bytes(BOMB)
    assert len(BOMB) == 180
    code, out, err, seconds, peak_kb = measured_process(path)
    assert code == 1
    assert seconds < 10 and peak_kb < GIGABYTE_KB
    assert err.count("\n") == 1 and "Traceback" not in err
    assert "NPOINTS=99999999 is more than 14 bytes of data can hold" in err


def test_a_dup_count_without_npoints_is_bounded_too() -> None:
    bomb = BOMB.replace(b"##NPOINTS=99999999\n", b"")
    with pytest.raises(SpectrumFileError, match="DUP count"):
        parse_bytes(bomb, "bomb.jdx")


def test_a_flat_spectrum_of_a_million_points_in_a_few_bytes_is_still_read() -> None:
    """Below 2**20 points any size is fine: a noise-free flat export is legitimate."""
    flat = BOMB.replace(b"##NPOINTS=99999999\n", b"##NPOINTS=1048576\n").replace(b"@s9999999", b"@S048576")
    spectrum = parse_bytes(flat, "flat.jdx")
    assert spectrum.points == 1048576
    assert np.all(spectrum.absorbance == 0.0)


def test_out_of_memory_in_a_reader_is_not_turned_into_a_reader_fault(monkeypatch: pytest.MonkeyPatch) -> None:
    def exhausted(section: bytes, max_points: int) -> None:
        raise MemoryError()

    monkeypatch.setattr(jcamp, "decode_xydata", exhausted)
    with pytest.raises(MemoryError):
        jcamp.parse(BOMB.replace(b"99999999", b"1000"), "any.jdx")


def _shifted_real_spectrum(tmp_path: Path, shift_cm1: float) -> Path:
    """The measured HCl export (tests/data/realdata) with its x axis moved by `shift_cm1`."""
    rows = []
    for line in (ROOT / "tests" / "data" / "realdata" / "hcl_teaching_lab.csv").read_text().splitlines():
        parts = line.split(",")
        if len(parts) == 2 and parts[0].strip()[:1].isdigit():
            rows.append(f"{float(parts[0]) + shift_cm1:.4f},{parts[1].strip()}")
    path = tmp_path / f"shifted{shift_cm1:+.0f}.csv"
    path.write_text("wavenumber,absorbance\n" + "\n".join(rows) + "\n")
    return path


def test_wavenumbers_at_or_below_zero_are_left_out_not_a_traceback(tmp_path: Path) -> None:
    """Shifted by -2800 cm-1 the axis runs -150..300: its lines once reached the temperature
    fit with negative positions (math.log of a negative number, a 23-line traceback)."""
    from processing.pipeline import process_file

    result = process_file(_shifted_real_spectrum(tmp_path, -2800.0))
    assert result.status == "processed"
    assert result.spectrum is not None and result.spectrum.first_cm1 > 0
    assert any("at or below 0 cm-1 left out" in note for note in result.spectrum.notes)
    code, _, err, _, _ = measured_process(_shifted_real_spectrum(tmp_path, -2800.0))
    assert code == 0 and err == ""


def test_a_spectrum_entirely_below_zero_is_one_clean_line(tmp_path: Path) -> None:
    code, _, err, _, _ = measured_process(_shifted_real_spectrum(tmp_path, -3200.0))
    assert code == 1
    assert err.count("\n") == 1 and "no usable wavenumbers" in err and "Traceback" not in err


def _even_comb_csv(path: Path, points: int, spacing_cm1: float, seed: int = 1) -> Path:
    """`points` samples 0.125 cm-1 apart holding Gaussian lines every `spacing_cm1` (strong,
    slowly varying heights, noise 0.002): thousands of evenly spaced lines, the worst case for
    a search for chains of evenly spaced lines."""
    rng = np.random.default_rng(seed)
    x = 1000.0 + 0.125 * np.arange(points)
    centres = np.arange(x[0] + 1.0, x[-1] - 1.0, spacing_cm1)
    centres = centres + rng.normal(0.0, 0.003, centres.size)
    y = rng.normal(0.0, 0.002, points)
    for centre, height in zip(centres, 0.5 + 0.3 * np.sin(centres / 37.0)):
        lo, hi = np.searchsorted(x, [centre - 1.0, centre + 1.0])
        y[lo:hi] += height * np.exp(-0.5 * ((x[lo:hi] - centre) / 0.15) ** 2)
    np.savetxt(path, np.column_stack([x, y]), fmt=("%.4f", "%.5f"), delimiter=",", header="wavenumber,absorbance", comments="")
    return path


def _even_peak_table(path: Path, lines: int) -> Path:
    rng = np.random.default_rng(2)
    x = 500.0 + 0.85 * np.arange(lines) + rng.normal(0.0, 0.02, lines)
    rows = "\n".join(f"{a:.4f}, {b:.4f}" for a, b in zip(x, rng.uniform(0.01, 1.0, lines)))
    path.write_text(
        "##TITLE=peaks\n##JCAMP-DX=5.01\n##DATA TYPE=INFRARED PEAK TABLE\n##XUNITS=1/CM\n"
        f"##YUNITS=ABSORBANCE\n##NPOINTS={lines}\n##PEAK TABLE=(XY..XY)\n{rows}\n##END=\n"
    )
    return path


# The pattern search once walked every chain from every seed with a full scan per step: 15 s
# for the 78,000-point comb below (5,735 lines), 29 s for the 10,000-line table, 71-102 s for
# files found by fuzzing. Bounded now (binary search, pairs walked once, a step budget), both
# take about a second; 10 s is a wide margin on a shared 2-core machine, not a speed target
# (speed is measured by tests/benchmarks/).
@pytest.mark.parametrize("kind", ["spectrum of 78,000 points", "table of 10,000 lines"])
def test_many_evenly_spaced_lines_do_not_make_the_pattern_search_slow(tmp_path: Path, kind: str) -> None:
    if kind.startswith("spectrum"):
        path = _even_comb_csv(tmp_path / "comb.csv", 78_000, 1.7)
    else:
        path = _even_peak_table(tmp_path / "table.jdx", 10_000)
    code, out, err, seconds, _ = measured_process(path, "--json")
    assert code == 0 and err == ""
    assert seconds < 10


@pytest.mark.parametrize(
    ("seed", "yfactor", "outcome"),
    [
        # absorbance ~1e294: refused (it once overflowed the noise estimate's squares)
        ("0905_hcl_cell.jdx", "1e300", "refused"),
        # every transmittance negative: all points saturated, no line-free point for the noise
        # (its mean of an empty slice once warned)
        ("1040_hcl_saturated.jdx", "-1", "processed"),
    ],
)
def test_absurd_y_factors_give_no_numpy_warning(tmp_path: Path, seed: str, yfactor: str, outcome: str) -> None:
    """Both were found by fuzzing: processed or refused, but RuntimeWarnings reached stderr."""
    import warnings

    from processing.pipeline import process_file

    lines = (ROOT / "sample_runs" / seed).read_text().splitlines()
    assert any(line.startswith("##YFACTOR=") for line in lines)
    path = tmp_path / seed
    path.write_text("\n".join(f"##YFACTOR={yfactor}" if line.startswith("##YFACTOR=") else line for line in lines) + "\n")
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        result = process_file(path)
    assert ("processed" if result.status == "processed" else "refused") == outcome
    if outcome == "refused":
        assert "not a physical absorbance" in (result.error or "")
