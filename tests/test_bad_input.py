"""Bad input through `read_any`: one SpectrumFileError naming the file (and line), nothing else."""
from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest

from processing.errors import SpectrumFileError
from processing.readers import read_any


def refused(path: Path, **kwargs: int) -> SpectrumFileError:
    with pytest.raises(SpectrumFileError) as caught:
        read_any(path, **kwargs)
    error = caught.value
    assert str(path) in str(error)
    assert error.path == str(path)
    assert "Traceback" not in str(error) and "\n" not in str(error)
    return error


def test_empty_file(tmp_path: Path) -> None:
    path = tmp_path / "empty.csv"
    path.write_bytes(b"")
    assert "empty" in refused(path).problem


def test_whitespace_only_file(tmp_path: Path) -> None:
    path = tmp_path / "blank.txt"
    path.write_bytes(b"  \r\n\t\n\n   ")
    assert "empty" in refused(path).problem


def test_binary_junk_with_nul_bytes(tmp_path: Path) -> None:
    path = tmp_path / "junk.csv"
    junk = np.random.default_rng(11).integers(0, 256, 5000, dtype=np.uint8).tobytes()
    path.write_bytes(b"\x00" + junk)
    assert "binary" in refused(path).problem


def test_high_bytes_without_control_characters(tmp_path: Path) -> None:
    # Not caught as binary (no NULs or control bytes), so the .csv reader gets it and refuses.
    path = tmp_path / "latin.csv"
    path.write_bytes(np.random.default_rng(5).integers(128, 256, 3000, dtype=np.uint8).tobytes())
    assert "no rows of numbers" in refused(path).problem


def test_file_over_the_size_limit(tmp_path: Path) -> None:
    path = tmp_path / "big.csv"
    path.write_bytes(b"cm-1,A\n" + b"".join(b"%d,0.1\n" % i for i in range(1000, 1200)))
    error = refused(path, max_bytes=500)
    assert "limit" in error.problem
    assert read_any(path).points == 200  # the same file is fine under the default limit


def test_missing_file(tmp_path: Path) -> None:
    assert "no such file" in refused(tmp_path / "never-written.csv").problem


def test_a_directory(tmp_path: Path) -> None:
    folder = tmp_path / "looks-like-a-file.csv"
    folder.mkdir()
    assert "directory" in refused(folder).problem


@pytest.mark.parametrize(
    "rows, line, words",
    [
        ("2000.0,0.1\n2000.5,nan\n2001.0,0.3\n", 3, "not a finite number"),
        ("2000.0,0.1\n2000.5,0.2\n2001.0,-inf\n", 4, "not a finite number"),
        ("2000.0,0.1\n2000.5,0.2\n2000.25,0.3\n", 4, "not monotonic"),
        ("2000.0,0.1\n2000.5,0.2\n2000.5,0.3\n2001.0,0.3\n", 4, "duplicated x"),
        ("2000.0,0.1\n", 2, "at least 2 points"),
        ("2000.0,0.1\n2000.5,0.2\n2001.0,0.3,7\n2001.5,0.3\n", 4, "3 values, expected 2"),
        ("2000.0,0.1\n2000.5,0.2 A\n2001.0,0.3\n", 3, "is not a number"),
    ],
)
def test_delimited_bad_rows_name_the_line(tmp_path: Path, rows: str, line: int, words: str) -> None:
    path = tmp_path / "bad rows.csv"
    path.write_text("cm-1,A\n" + rows, encoding="utf-8")
    error = refused(path)
    assert error.line == line
    assert str(error).startswith(f"{path}:{line}: ")
    assert words in error.problem


def test_a_bad_row_deep_in_a_long_file_still_names_its_line(tmp_path: Path) -> None:
    # The fast vectorised pass must hand over to the line-by-line one for the right line.
    x = 1000.0 + 0.001 * np.arange(200_000)
    rows = [f"{value!r},0.1\n" for value in x.tolist()]
    rows[123_456] = f"{float(x[123_455])!r},0.1\n"  # duplicate of the previous x
    path = tmp_path / "long.csv"
    path.write_text("cm-1,A\n" + "".join(rows), encoding="utf-8")
    error = refused(path)
    assert error.line == 123_456 + 2  # header is line 1, row 0 is line 2
    assert "duplicated x" in error.problem
