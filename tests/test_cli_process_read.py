"""`bandwatch process` reading stage, run as a user would: a subprocess, JSON lines and tables."""
from __future__ import annotations

import hashlib
import json
import re
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest

REPO = Path(__file__).resolve().parents[1]
POINTS = 801


def run_process(*args: str) -> subprocess.CompletedProcess[str]:
    return subprocess.run(
        [sys.executable, "-m", "tui", "process", *args],
        capture_output=True,
        text=True,
        cwd=REPO,
        timeout=120,
    )


@pytest.fixture()
def good_csv(tmp_path: Path) -> Path:
    """A featureless absorbance trace, 2600..3000 cm-1 every 0.5 cm-1, written descending."""
    x = 3000.0 - 0.5 * np.arange(POINTS)
    y = 0.02 + np.random.default_rng(4).normal(0.0, 0.001, POINTS)
    path = tmp_path / "good run.csv"
    rows = "".join(f"{a!r},{b!r}\n" for a, b in zip(x.tolist(), y.tolist()))
    path.write_text("Wavenumber (cm-1),Absorbance\n" + rows, encoding="utf-8")
    return path


@pytest.fixture()
def corrupt_csv(tmp_path: Path) -> Path:
    path = tmp_path / "corrupt.csv"
    path.write_bytes(b"cm-1,A\n2600.0,0.1\n2600.5,0.1\n2601.0,0.1\x00\x9c\xff junk\n2601.5,0.1\n")
    return path


def json_lines(stdout: str) -> list[dict[str, object]]:
    lines = stdout.splitlines()
    assert lines, "no output"
    return [json.loads(line) for line in lines]


def test_all_readable_exit_zero_with_one_json_object_per_file(good_csv: Path) -> None:
    result = run_process(str(good_csv), "--json")
    assert result.returncode == 0, result.stderr
    (record,) = json_lines(result.stdout)
    assert record["schema"] == 1
    assert record["file"] == str(good_csv)
    assert record["sha256"] == hashlib.sha256(good_csv.read_bytes()).hexdigest()
    assert record["status"] == "processed"
    assert record["error"] is None
    spectrum = record["spectrum"]
    assert isinstance(spectrum, dict)
    assert spectrum["points"] == POINTS
    # Written descending 3000 -> 2600; inside bandwatch x is ascending cm-1.
    assert spectrum["first_cm1"] == 2600.0
    assert spectrum["last_cm1"] == 3000.0
    assert spectrum["y_units"] == "absorbance"
    assert spectrum["resolution_cm1"] is None  # a CSV states no resolution
    assert "Traceback" not in result.stderr


def test_one_unreadable_file_gives_exit_one_and_a_one_line_message(
    good_csv: Path, corrupt_csv: Path
) -> None:
    result = run_process(str(good_csv), str(corrupt_csv), "--json")
    assert result.returncode == 1
    good, bad = json_lines(result.stdout)
    assert good["status"] == "processed" and good["file"] == str(good_csv)
    assert bad["schema"] == 1
    assert bad["file"] == str(corrupt_csv)
    assert bad["status"] == "unreadable"
    assert bad["spectrum"] is None
    assert bad["sha256"] == hashlib.sha256(corrupt_csv.read_bytes()).hexdigest()
    assert isinstance(bad["error"], str) and str(corrupt_csv) in bad["error"]
    stderr_lines = result.stderr.strip().splitlines()
    assert len(stderr_lines) == 1
    assert str(corrupt_csv) in stderr_lines[0]
    assert "Traceback" not in result.stderr


def test_missing_file_is_unreadable_not_a_crash(tmp_path: Path) -> None:
    missing = tmp_path / "not-there.csv"
    result = run_process(str(missing), "--json")
    assert result.returncode == 1
    (record,) = json_lines(result.stdout)
    assert record["status"] == "unreadable"
    assert record["sha256"] is None  # no bytes, no hash
    assert "no such file" in str(record["error"])
    assert "Traceback" not in result.stderr


def test_human_output_is_an_aligned_table_with_the_point_count(good_csv: Path) -> None:
    result = run_process(str(good_csv))
    assert result.returncode == 0, result.stderr
    lines = result.stdout.splitlines()
    header_at = next(i for i, line in enumerate(lines) if "points" in line.split())
    header, rule, row = lines[header_at : header_at + 3]
    spans = [(m.start(), m.end()) for m in re.finditer(r"-+", rule)]
    assert len(spans) >= 4 and set(rule.replace(" ", "")) == {"-"}
    # Aligned: every heading and cell sits inside its column's dashes, and the gaps between
    # columns are blank on every line.
    for line in (header, row):
        padded = line.ljust(len(rule))
        for (start, end), (next_start, _) in zip(spans, spans[1:] + [(len(rule), 0)]):
            assert padded[start:end].strip(), (line, start, end)
            assert not padded[end:next_start].strip(), (line, end, next_start)
    points_span = next(span for span in spans if header[span[0] : span[1]].strip() == "points")
    assert row[points_span[0] : points_span[1]].strip() == str(POINTS)


def test_human_output_names_an_unreadable_file(corrupt_csv: Path) -> None:
    result = run_process(str(corrupt_csv))
    assert result.returncode == 1
    assert "unreadable" in result.stdout
    assert str(corrupt_csv) in result.stdout
    assert result.stderr.count("\n") == 1 and str(corrupt_csv) in result.stderr
    assert "Traceback" not in result.stderr


def test_a_readable_but_tiny_spectrum_is_not_a_traceback(tmp_path: Path) -> None:
    path = tmp_path / "tiny.csv"
    path.write_text("cm-1,A\n2000,0.1\n2000.5,0.2\n2001,0.15\n", encoding="utf-8")
    result = run_process(str(path), "--json")
    assert "Traceback" not in result.stderr
    (record,) = json_lines(result.stdout)
    assert record["spectrum"] is not None and record["spectrum"]["points"] == 3  # type: ignore[index]
