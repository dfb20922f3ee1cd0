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

from processing.errors import SpectrumFileError
from processing.readers import jcamp, parse_bytes

ROOT = Path(__file__).resolve().parents[1]

# 180 bytes: NPOINTS 99,999,999 and one DIF/DUP line whose DUP count (s9999999) repeats the
# first value 99,999,999 times. Unbounded, it took 39 s and 7.97 GB to be refused.
BOMB = (
    b"##TITLE=bomb\n##JCAMP-DX=4.24\n##DATA TYPE=INFRARED SPECTRUM\n##XUNITS=1/CM\n"
    b"##YUNITS=ABSORBANCE\n##FIRSTX=4000\n##LASTX=400\n##NPOINTS=99999999\n"
    b"##XYDATA=(X++(Y..Y))\n4000@s9999999\n##END=\n"
)
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
