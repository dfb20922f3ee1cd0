"""One place writes an assignment label such as "H35Cl 1-0 R(3)" (`result_text.assignment_label`):
the process tables, the reports and every pane use it."""
from __future__ import annotations

import ast
from pathlib import Path

from processing.result_text import assignment_label
from processing.results import Assignment

ROOT = Path(__file__).resolve().parents[1]


def _label_builders() -> list[str]:
    """f-strings that put something in brackets right after a formatted value, as in
    "{branch}({J})" (the trade notation for a line): where a label is built."""
    found = []
    for path in sorted(list(ROOT.glob("processing/**/*.py")) + list(ROOT.glob("tui/**/*.py"))):
        for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"))):
            if not isinstance(node, ast.JoinedStr):
                continue
            parts = node.values
            for first, middle, last in zip(parts, parts[1:], parts[2:]):
                if (isinstance(first, ast.FormattedValue) and isinstance(middle, ast.Constant) and str(middle.value).endswith("(")
                        and isinstance(last, ast.FormattedValue) and "J" in ast.unparse(last.value)):
                    found.append(f"{path.relative_to(ROOT)}:{node.lineno}")
    return found


def test_one_place_builds_an_assignment_label() -> None:
    builders = _label_builders()
    assert len(builders) == 1 and builders[0].startswith("processing/result_text.py"), builders


def test_the_label_is_the_trade_notation() -> None:
    # P(J'') and R(J'') with the lower level's J (common practice)
    r3 = Assignment("H35Cl", 1, 0, "R", 3, 4, 2963.29, 0.0002, 1.0)
    assert assignment_label(r3) == "H35Cl 1-0 R(3)"
    assert assignment_label(None) == "-" and assignment_label(None, "unassigned") == "unassigned"
