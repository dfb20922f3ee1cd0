"""Everything bandwatch writes as JSON is strict JSON (RFC 8259): no NaN, no Infinity; a value
that was not finite is null and listed under `non_finite` with what it was."""
from __future__ import annotations

import json
import math
from pathlib import Path

import numpy as np
import pytest

from processing import strict_json
from tui.cli import main


def strict_loads(text: str) -> object:
    def refuse(token: str) -> object:
        raise ValueError(f"not JSON: {token}")

    return json.loads(text, parse_constant=refuse)


def noiseless_csv(path: Path) -> Path:
    """A spectrum without noise (as an exact synthetic export): its noise sigma is 0, so a
    signal-to-noise ratio is infinite; once printed as `Infinity` and graded a pass."""
    x = np.linspace(2850.0, 2950.0, 400)
    y = 0.01 + 0.3 * np.exp(-(((x - 2906.0) / 0.3) ** 2))
    path.write_text("wavenumber,absorbance\n" + "".join(f"{a:.5f},{b:.6f}\n" for a, b in zip(x, y)))
    return path


def test_to_plain_replaces_non_finite_values_and_says_where() -> None:
    replaced: list[dict[str, str]] = []
    plain = strict_json.to_plain({"a": [1.0, math.inf, {"b": math.nan}], "c": np.float64(-np.inf), "d": np.arange(2)}, replaced)
    assert plain == {"a": [1.0, None, {"b": None}], "c": None, "d": [0, 1]}
    assert replaced == [{"at": "a[1]", "was": "inf"}, {"at": "a[2].b", "was": "nan"}, {"at": "c", "was": "-inf"}]
    text = strict_json.dumps_result({"schema": 1, "x": math.inf})
    assert strict_loads(text) == {"schema": 1, "x": None, "non_finite": [{"at": "x", "was": "inf"}]}


def test_process_json_of_a_noiseless_spectrum_is_strict_and_its_ratio_not_assessed(
    tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    assert main(["process", "--json", str(noiseless_csv(tmp_path / "exact.csv"))]) == 0
    out = capsys.readouterr().out
    assert "Infinity" not in out and "NaN" not in out
    result = strict_loads(out)
    assert isinstance(result, dict)
    [snr] = [check for check in result["checks"] if check["name"] == "signal_to_noise"]
    assert snr["status"] == "not_assessed" and snr["value"] is None  # not an "inf x the noise" pass


def test_reports_and_ledger_of_the_station_are_strict_json(tmp_path: Path, monkeypatch: pytest.MonkeyPatch,
                                                          capsys: pytest.CaptureFixture[str]) -> None:
    monkeypatch.setenv("BANDWATCH_CONFIG", str(tmp_path / "none.toml"))
    export, data = tmp_path / "export", tmp_path / "data"
    export.mkdir()
    noiseless_csv(export / "exact.csv")
    # 0, or 3 when a run's verdict is FAIL (not station trouble, which is 1)
    assert main(["watch", str(export), "--data", str(data), "--once", "--plain", "--settle", "0.05", "--workers", "1"]) in (0, 3)
    capsys.readouterr()
    [report] = list((data / "reports").glob("*/result.json"))
    strict_loads(report.read_text())
    for command in (["list", "--json"], ["show", "1", "--json"]):
        assert main(["ledger", *command, "--data", str(data)]) == 0
        for line in capsys.readouterr().out.splitlines():
            strict_loads(line)
    assert main(["ledger", "export", "--format", "json", "--data", str(data)]) == 0
    strict_loads(capsys.readouterr().out)
    from processing.station.ledger import open_ledger

    conn = open_ledger(data, read_only=True)
    stored = conn.execute("SELECT result_json FROM runs WHERE run_id = 1").fetchone()[0]
    conn.close()
    result = strict_loads(stored)
    assert isinstance(result, dict) and {"at": "checks[0].value", "was": "inf"} not in (result.get("non_finite") or [])



def test_a_flat_listing_row_is_written_as_dumps_writes_it() -> None:
    from processing import strict_json as sj

    rows = [
        {"run_id": 1, "path": "/e/a}{b.csv", "species": ["H35Cl", "H37Cl"], "decision": None, "ok": True},
        {"run_id": 2, "path": "/e/\u00e9t\u00e9 \u202e\n.csv", "species": [], "error": "x: {\"y\": 1}, [2]", "ok": False},
        {"run_id": 3, "path": "\udcff", "species": ["}{"], "instrument": ""},
    ]
    assert [sj.dumps_flat(row) for row in rows] == [sj.dumps(row) for row in rows]


def _walked(result: dict) -> str:
    """The run's JSON text by the walk alone (to_plain, then json with allow_nan=False)."""
    replaced: list[dict[str, str]] = []
    plain = strict_json.to_plain(result, replaced)
    if replaced:
        known = list(plain.get("non_finite") or [])
        plain["non_finite"] = known + [item for item in replaced if item not in known]
    return json.dumps(plain, allow_nan=False)


def test_a_runs_json_is_the_walks_text_to_the_byte_whichever_way_it_is_encoded(tmp_path: Path) -> None:
    """dumps_result hands plain finite data straight to json's encoder and walks anything else:
    the text is the walk's either way, for every sample run and for a run with an infinite
    signal-to-noise ratio (which must take the walk and list it under non_finite)."""
    from processing.pipeline import process_file

    folder = Path(__file__).resolve().parent.parent / "sample_runs"
    samples = sorted(p for p in folder.iterdir() if p.suffix in (".jdx", ".csv", ".dx"))
    assert len(samples) >= 10
    for path in samples + [noiseless_csv(tmp_path / "exact.csv")]:
        result = process_file(path).to_dict()
        assert strict_json.dumps_result(result) == _walked(result), path.name
    awkward = {"ints": np.arange(3), "count": np.int64(4), "kinds": {"b", "a"}, "ok": 1.5, "bad": [math.nan]}
    assert strict_json.dumps_result(awkward) == _walked(awkward)
    assert strict_loads(strict_json.dumps_result(awkward))["non_finite"] == [{"at": "bad[0]", "was": "nan"}]
