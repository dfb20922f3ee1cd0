"""What crosses between modules is typed: no domain object (a library, an analysis, a result,
a run, an event, settings, a ledger connection, ...) is annotated `Any` in a signature or a
field anywhere in processing/ or tui/. `Any` is left only where plain data from outside is
read and checked (JSON, TOML), and `dict[str, Any]` only for JSON-shaped plain data."""
from __future__ import annotations

import ast
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
# parameters that hold plain data being parsed or written (JSON, TOML, cell text)
PLAIN_DATA_NAMES = {"data", "value", "item", "table", "reader", "dtype"}
# names that always mean a domain object
DOMAIN_NAMES = {
    "library", "analysis", "lines", "assignment", "intensities", "baseline", "fit", "result", "run", "runs", "record",
    "event", "spectrum", "isotopologue", "iso", "constants", "settings", "config", "conn", "station", "band", "bands",
    "check", "checks", "line", "comparison", "estimate", "outcome", "job", "request", "points", "contour", "contours",
    "dunham", "terms", "function", "decisions", "thresholds", "policy", "app", "replay",
}
JSON_SHAPED = ("dict[str, Any]", "Mapping[str, Any]", "Mapping[str, Mapping[str, Any]]")


def _annotations() -> list[tuple[str, str, str]]:
    """(where, name, annotation) of every parameter, return and class field that mentions Any."""
    found = []
    for path in sorted(list(ROOT.glob("processing/**/*.py")) + list(ROOT.glob("tui/**/*.py"))):
        tree = ast.parse(path.read_text(encoding="utf-8"))
        where = str(path.relative_to(ROOT))
        for node in ast.walk(tree):
            if isinstance(node, (ast.FunctionDef, ast.AsyncFunctionDef)):
                arguments = [(a.arg, a) for a in node.args.posonlyargs + node.args.args + node.args.kwonlyargs]
                arguments += [("*" + a.arg, a) for a in (node.args.vararg, node.args.kwarg) if a is not None]
                for name, argument in arguments:
                    if argument.annotation is not None and "Any" in ast.unparse(argument.annotation):
                        found.append((f"{where}:{node.lineno} {node.name}", name, ast.unparse(argument.annotation)))
                if node.returns is not None and "Any" in ast.unparse(node.returns):
                    found.append((f"{where}:{node.lineno} {node.name}", "return", ast.unparse(node.returns)))
            if isinstance(node, ast.ClassDef):
                for item in node.body:
                    if isinstance(item, ast.AnnAssign) and "Any" in ast.unparse(item.annotation):
                        found.append((f"{where}:{item.lineno} {node.name}", ast.unparse(item.target), ast.unparse(item.annotation)))
    return found


def test_no_domain_object_is_typed_any() -> None:
    wrong = [f"{where}: {name}: {annotation}" for where, name, annotation in _annotations()
             if name in DOMAIN_NAMES and not any(shape in annotation for shape in JSON_SHAPED)]
    assert wrong == []


def test_any_only_for_plain_data_being_read_or_json_shaped() -> None:
    wrong = []
    for where, name, annotation in _annotations():
        bare = annotation.replace(" | None", "") in ("Any", "list[Any]", "tuple[Any, ...]")
        if name == "return":
            continue  # a reader's checked value or JSON: its parameters are what this checks
        if bare and name not in PLAIN_DATA_NAMES and not name.startswith("*"):  # **options passed on
            wrong.append(f"{where}: {name}: {annotation}")
        if not bare and not any(shape in annotation for shape in JSON_SHAPED) and "Callable[..., Any]" not in annotation:
            wrong.append(f"{where}: {name}: {annotation}")
    assert wrong == []


def test_the_check_sees_what_it_looks_for() -> None:
    # the walk finds annotations of every kind it checks (so an empty list above means something)
    found = _annotations()
    assert any(name == "data" for _, name, _ in found)  # results codec input
    assert any(name == "return" for _, name, _ in found)
