"""Text from file names and file headers never reaches a terminal raw: no escape sequences
(clear screen, window title, colours) and no forged lines in `--plain`, `ledger list`,
`ledger show`, `process` tables or the one-line errors."""
from __future__ import annotations

import json
import os
import re
from pathlib import Path

import pytest

from processing.safe_text import safe_text
from tui.cli import main

ESC = "\x1b"
# A name as an adversary on the share would choose it: clear the screen, set the window title,
# and a newline followed by a forged station line.
HOSTILE_NAME = f"x{ESC}[2J{ESC}]0;owned\x07\n2026-12-05T10:00:00 processed run 999 v1 fake.csv verdict=pass species=H35Cl.csv"
PLAIN_LINE = re.compile(r"^\d{4}-\d\d-\d\dT\d\d:\d\d:\d\d[+-]\d\d:\d\d \S")  # local time and offset
SPECTRUM_CSV = "wavenumber,absorbance\n" + "".join(f"{2850 + i * 0.25:.2f},{0.01 + 0.3 * (i == 200):.4f}\n" for i in range(400))


@pytest.fixture()
def isolated(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> Path:
    monkeypatch.setenv("BANDWATCH_CONFIG", str(tmp_path / "no-config.toml"))
    monkeypatch.setenv("XDG_DATA_HOME", str(tmp_path / "xdg"))
    return tmp_path


def test_safe_text_escapes_controls_separators_direction_marks_and_undecodable_bytes() -> None:
    assert safe_text("plain name.csv") == "plain name.csv"
    assert safe_text("µm–Å ½") == "µm–Å ½"  # printable non-ASCII stays
    assert safe_text(f"a{ESC}[31mb") == "a\\x1b[31mb"
    assert safe_text("a\nb\rc\td") == "a\\nb\\rc\\td"
    assert safe_text("\x9b31m") == "\\x9b31m"  # the C1 control sequence introducer
    assert safe_text("evil\u202etxt.csv") == "evil\\u202etxt.csv"  # right-to-left override
    assert safe_text("a\u2028b") == "a\\u2028b"
    assert safe_text(os.fsdecode(b"bad\xffname")) == "bad\\xffname"


def test_watch_plain_and_ledger_list_and_show_print_no_escape_byte_and_no_forged_line(
    isolated: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    export, data = isolated / "export", isolated / "data"
    export.mkdir()
    (export / HOSTILE_NAME).write_text(SPECTRUM_CSV)
    code = main(["watch", str(export), "--data", str(data), "--once", "--plain", "--settle", "0.05", "--workers", "1"])
    out = capsys.readouterr().out
    assert code in (0, 3)  # 3: the run's verdict is FAIL (a one-line spectrum), not station trouble
    assert ESC not in out and "\x07" not in out
    lines = out.splitlines()
    assert all(PLAIN_LINE.match(line) for line in lines)
    assert not any(" processed run 999 " in line.split(" ", 1)[1][:30] for line in lines)
    assert any("processed run 1 v1 x\\x1b[2J\\x1b]0;owned\\x07\\n2026" in line for line in lines)

    assert main(["ledger", "list", "--data", str(data)]) == 0
    listing = capsys.readouterr().out
    assert ESC not in listing and len(listing.splitlines()) == 3  # header, rule, the one run
    assert main(["ledger", "show", "1", "--data", str(data)]) == 0
    shown = capsys.readouterr().out
    assert ESC not in shown and "\x07" not in shown
    assert main(["ledger", "list", "--json", "--data", str(data)]) == 0
    [row] = [json.loads(line) for line in capsys.readouterr().out.splitlines()]
    assert Path(row["path"]).name == HOSTILE_NAME  # scripts still get the exact name


@pytest.mark.parametrize(
    ("header", "value"),
    [
        ("XUNITS", f"{ESC}[2JHZ"),
        ("YUNITS", f"{ESC}]0;owned{ESC}\\"),
        ("XYDATA", f"(X++(R..R)){ESC}[31m"),
        ("PEAK TABLE", f"(XYZ){ESC}[5m"),
    ],
)
def test_header_values_echoed_in_the_error_line_are_escaped(
    tmp_path: Path, capsys: pytest.CaptureFixture[str], header: str, value: str
) -> None:
    fields = {"XUNITS": "1/CM", "YUNITS": "ABSORBANCE", "XYDATA": "(X++(Y..Y))"}
    data_label = "PEAK TABLE" if header == "PEAK TABLE" else "XYDATA"
    fields[header] = value
    body = "2900, 0.1\n2901, 0.2\n" if data_label == "PEAK TABLE" else "2900 1 2 3\n"
    text = (
        "##TITLE=t\n##JCAMP-DX=5.01\n##DATA TYPE=INFRARED SPECTRUM\n"
        f"##XUNITS={fields['XUNITS']}\n##YUNITS={fields['YUNITS']}\n##FIRSTX=2900\n##LASTX=2902\n##NPOINTS=3\n"
        f"##{data_label}={value if header == data_label else fields.get(data_label, '(XY..XY)')}\n{body}##END=\n"
    )
    path = tmp_path / "hostile.jdx"
    path.write_text(text)
    code = main(["process", str(path)])
    captured = capsys.readouterr()
    assert code == 1
    assert ESC not in captured.err and ESC not in captured.out
    assert captured.err.count("\n") == 1 and "\\x1b" in captured.err


def test_process_tables_and_error_line_escape_a_hostile_file_name(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    good = tmp_path / HOSTILE_NAME
    good.write_text(SPECTRUM_CSV)
    bad = tmp_path / f"bad{ESC}[2J.csv"
    bad.write_text("nothing to read here\n")
    assert main(["process", str(good), str(bad)]) == 1
    captured = capsys.readouterr()
    assert ESC not in captured.out and ESC not in captured.err
    assert f"== {tmp_path}/x\\x1b[2J" in captured.out
    assert captured.err.count("\n") == 1 and "bad\\x1b[2J.csv" in captured.err
