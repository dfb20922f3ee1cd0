"""Figures for the lab notebook: `bandwatch report RUN --figure out.svg|png` and `e` in the
interface write the spectrum with its assignment markers, the residuals of each band and the
trend of its band origin. The files are opened again and checked: the image size, and that the
run's own labels (its file, its verdict, its assignments) are in it."""
from __future__ import annotations

import os
import struct
import sys
import xml.etree.ElementTree as ElementTree
import zlib
from pathlib import Path

import pytest

from processing.station import ledger
from tui.cli import main

SAMPLES = Path(__file__).resolve().parents[1] / "sample_runs"
# The figure is 11 x 8.5 inches (US letter, landscape), drawn at 150 dots per inch for PNG;
# SVG sizes are in points, 72 to the inch (W3C SVG 1.1, CSS units).
PNG_SIZE = (11 * 150, int(8.5 * 150))
SVG_SIZE_PT = (11 * 72, 8.5 * 72)


@pytest.fixture()
def recorded(tmp_path: Path, monkeypatch: pytest.MonkeyPatch, capsys: pytest.CaptureFixture[str]) -> tuple[Path, Path]:
    """Two HCl runs in a ledger: the HCl cell, then the cell after a service (WARN)."""
    monkeypatch.setenv("BANDWATCH_CONFIG", str(tmp_path / "none.toml"))
    export, data = tmp_path / "export", tmp_path / "data"
    export.mkdir()
    for index, name in enumerate(("0905_hcl_cell.jdx", "1500_hcl_after_service.jdx")):
        (export / name).write_bytes((SAMPLES / name).read_bytes())
        os.utime(export / name, (1_000_000 + index, 1_000_000 + index))
    main(["watch", str(export), "--data", str(data), "--once", "--plain", "--settle", "0.05", "--workers", "1"])
    capsys.readouterr()
    return export, data


def png_chunks(data: bytes) -> list[tuple[bytes, bytes]]:
    """(type, body) of every chunk of a PNG file (ISO/IEC 15948: an 8-byte signature, then
    length, type, body and CRC per chunk), each CRC checked."""
    assert data[:8] == b"\x89PNG\r\n\x1a\n"
    chunks, at = [], 8
    while at < len(data):
        (length,) = struct.unpack(">I", data[at:at + 4])
        kind, body = data[at + 4:at + 8], data[at + 8:at + 8 + length]
        (crc,) = struct.unpack(">I", data[at + 8 + length:at + 12 + length])
        assert zlib.crc32(kind + body) == crc
        chunks.append((kind, body))
        at += 12 + length
    return chunks


def run_labels(data: Path, run_id: int) -> tuple[str, list[str]]:
    conn = ledger.open_ledger(data)
    try:
        run = ledger.get_run(conn, run_id)
    finally:
        conn.close()
    assert run is not None and run.result is not None
    from processing.result_text import assignment_label

    return run.name, [assignment_label(line.assigned) for line in run.result.lines if line.assigned is not None]


def test_png_figure_has_the_size_and_the_runs_labels(recorded: tuple[Path, Path], tmp_path: Path,
                                                     capsys: pytest.CaptureFixture[str]) -> None:
    _, data = recorded
    target = tmp_path / "notebook" / "run2.png"
    target.parent.mkdir()
    assert main(["report", "2", "--figure", str(target), "--data", str(data)]) == 0
    assert f"figure written: {target}" in capsys.readouterr().out
    chunks = png_chunks(target.read_bytes())
    kind, header = chunks[0]
    assert kind == b"IHDR" and struct.unpack(">II", header[:8]) == PNG_SIZE
    texts = dict(body.split(b"\0", 1) for kind, body in chunks if kind == b"tEXt")
    name, labels = run_labels(data, 2)
    title = texts[b"Title"].decode("latin-1")
    assert name in title and "verdict WARN: calibration +0.24 cm-1" in title
    described = texts[b"Description"].decode("latin-1")
    assert labels and all(label in described for label in labels)
    assert "H35Cl 1-0 R(3)" in labels and "H37Cl 1-0 P(2)" in labels  # both isotopologues' lines
    assert (data / "reports").is_dir() and list((data / "reports").rglob("report.txt"))  # and the report


def test_svg_figure_has_the_size_and_its_labels_as_text(recorded: tuple[Path, Path], tmp_path: Path) -> None:
    _, data = recorded
    target = tmp_path / "run2.svg"
    assert main(["report", "2", "--figure", str(target), "--data", str(data)]) == 0
    root = ElementTree.parse(target).getroot()
    assert (float(root.get("width", "0").rstrip("pt")), float(root.get("height", "0").rstrip("pt"))) == SVG_SIZE_PT
    texts = [element.text or "" for element in root.iter() if element.tag.endswith("text")]
    drawn = "\n".join(texts)
    name, labels = run_labels(data, 2)
    assert name in drawn
    # every assigned line is marked with its branch and J'' (the isotopologue in the legend)
    for label in labels:
        branch_j = label.split()[-1]
        assert branch_j in texts
    assert "H35Cl" in texts and "H37Cl" in texts
    assert any(text.startswith("H35Cl 1-0 (rms") for text in texts)  # the residuals of each band
    assert any("H35Cl 1-0 origin" in text for text in texts)  # and the trend of its origin


def test_a_figure_is_never_written_into_the_export_folder(recorded: tuple[Path, Path], capsys: pytest.CaptureFixture[str]) -> None:
    export, data = recorded
    before = sorted(p.name for p in export.iterdir())
    assert main(["report", "2", "--figure", str(export / "run2.svg"), "--data", str(data)]) == 1
    assert "never writes there" in capsys.readouterr().err
    assert sorted(p.name for p in export.iterdir()) == before
    assert main(["report", "2", "--figure", str(data / "run2.pdf"), "--data", str(data)]) == 1
    assert ".svg or .png" in capsys.readouterr().err


def test_without_matplotlib_the_report_is_written_and_the_figure_says_how_to_get_it(
    recorded: tuple[Path, Path], tmp_path: Path, monkeypatch: pytest.MonkeyPatch, capsys: pytest.CaptureFixture[str]
) -> None:
    _, data = recorded
    for module in ("matplotlib", "matplotlib.figure", "matplotlib.backends.backend_agg"):
        monkeypatch.setitem(sys.modules, module, None)  # as if the extra were not installed
    target = tmp_path / "run2.png"
    assert main(["report", "2", "--figure", str(target), "--data", str(data)]) == 1
    out, err = capsys.readouterr()
    assert "report written:" in out and not target.exists()
    assert err.count("\n") == 1 and "pip install 'bandwatch[figures]'" in err


def test_the_station_does_not_import_matplotlib() -> None:
    """The figures extra is optional: watching, processing and recording never import it."""
    import subprocess

    code = ("import sys; import processing.station.station, processing.pipeline, processing.station.reports, "
            "tui.app; assert 'matplotlib' not in sys.modules, 'matplotlib imported'")
    done = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, timeout=120)
    assert done.returncode == 0, done.stderr
