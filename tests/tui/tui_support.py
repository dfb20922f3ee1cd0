"""Helpers for the interface tests: deterministic ledgers: fixed times, hand-made results of the public shape.

The numbers in the hand-made results only have to look like a real HCl run (the interface
renders them, it computes nothing); they are H35Cl/H37Cl values of the right size:
# H35Cl band origin 2885.98 cm-1, B_e 10.5934 cm-1, alpha_e 0.3072 cm-1, r_e 1.27455 Å:
# Huber & Herzberg 1979 via NIST WebBook, values recalled from memory.
"""
from __future__ import annotations

import hashlib
from pathlib import Path
from typing import Any

import numpy as np

from processing.results import RunResult
from processing.station.ledger import open_ledger, record_run


async def quiet(pilot: Any) -> None:
    """Wait (by conditions, not by time) until no worker runs and the selected run is shown.

    Workers start other workers through messages (runs -> detail and spectrum), so a fixed
    number of pauses is not enough on a loaded machine.
    """
    from textual.worker import WorkerCancelled

    from tui.screens.main_screen import LEDGER_FEED_GROUP, MainScreen
    from tui.widgets.run_tables import RunList
    from tui.widgets.spectrum_plot import SpectrumPlot

    app = pilot.app
    for _ in range(1000):
        # the ledger feed follows the ledger for as long as the screen is there: never "complete"
        finite = [worker for worker in app.workers if worker.group != LEDGER_FEED_GROUP]
        if finite:  # (an empty list would mean "every worker" to Textual)
            try:
                await app.workers.wait_for_complete(finite)
            except WorkerCancelled:
                continue  # an exclusive worker replaced by a newer one: look again
        await pilot.pause(0.01)
        if any(worker.is_running for worker in app.workers if worker.group != LEDGER_FEED_GROUP):
            continue
        main = next((s for s in app.screen_stack if isinstance(s, MainScreen)), None)
        if main is None or not main.runs:
            continue
        selected = main.selected_run_id
        if main.query_one(RunList).selected_run_id() != selected:
            continue  # a cursor move not yet handled
        if selected is not None and (main.detail is None or main.detail.run_id != selected):
            continue
        if main.query_one(SpectrumPlot).is_loading_for(selected):
            continue
        await pilot.pause()
        return
    raise AssertionError("the interface did not settle within 10 s")


ORIGIN_H35CL = 2885.98  # cm-1, Huber & Herzberg 1979 via NIST WebBook, recalled from memory
B_H35CL = 10.44  # cm-1, ground-state B0 of H35Cl, same source
RUN_TIMES = ("2026-03-05T09:15:00.000Z", "2026-03-05T10:40:00.000Z", "2026-03-05T12:05:00.000Z")


def q(value: float, sigma: float | None) -> dict[str, Any]:
    return {"value": value, "sigma": sigma}


def hcl_result(path: str, origin: float, verdict: str = "pass", sha256: str = "0" * 64) -> RunResult:
    """A result of the public JSON shape with a few assigned and one unassigned line."""
    return RunResult.from_dict(hcl_result_json(path, origin, verdict, sha256))


def hcl_result_json(path: str, origin: float, verdict: str = "pass", sha256: str = "0" * 64) -> dict[str, Any]:
    """The JSON object of `hcl_result`."""
    lines: list[dict[str, Any]] = []
    for J in range(0, 4):  # R(J): upper J+1; P(J): upper J-1; spacing ~2B (rigid rotor, common practice)
        r_pos = origin + 2 * B_H35CL * (J + 1)
        lines.append(
            {
                "position": q(round(r_pos + 0.003, 4), 0.002),
                "height": 0.5,
                "width": 0.2,
                "assigned": {
                    "isotopologue": "H35Cl", "v_upper": 1, "v_lower": 0, "branch": "R", "J_lower": J,
                    "calc": round(r_pos, 4), "residual": 0.003, "confidence": 0.98,
                },
                "likely_cause": None,
            }
        )
        if J >= 1:
            p_pos = origin - 2 * B_H35CL * J
            lines.append(
                {
                    "position": q(round(p_pos - 0.002, 4), 0.002),
                    "height": 0.5,
                    "width": 0.2,
                    "assigned": {
                        "isotopologue": "H35Cl", "v_upper": 1, "v_lower": 0, "branch": "P", "J_lower": J,
                        "calc": round(p_pos, 4), "residual": -0.002, "confidence": 0.97,
                    },
                    "likely_cause": None,
                }
            )
    lines.append(
        {"position": q(2925.5, 0.01), "height": 0.05, "width": 0.3, "assigned": None,
         "likely_cause": "water vapour line"}
    )
    return {
        "schema": 1,
        "file": path,
        "sha256": sha256,
        "status": "processed",
        "error": None,
        "spectrum": {"points": 2001, "first_cm1": 2700.0, "last_cm1": 3100.0, "y_units": "absorbance",
                     "resolution_cm1": 0.5},
        "lines": lines,
        "bands": [
            {"isotopologue": "H35Cl", "v_upper": 1, "v_lower": 0, "n_lines": 7, "rms": 0.0031,
             "origin": q(origin, 0.0012), "B_upper": q(10.1365, 0.0004), "B_lower": q(10.4398, 0.0004),
             "D_upper": None, "D_lower": None,
             "reference": {"origin": {"name": "origin", "fitted": q(origin, 0.0012), "reference": round(origin - 0.0048, 4),
                                      "reference_sigma": 0.0005, "z": 4.0, "handbook": round(origin - 0.0048, 4),
                                      "model": "band model fitted to the library's positions of the same lines",
                                      "source": "library"}}}
        ],
        "constants": [
            {"isotopologue": "H35Cl", "B_e": q(10.5934, 0.0006), "alpha_e": q(0.3072, 0.0005), "D_e": None,
             "r_e": {"value": 1.27455, "sigma": 0.00004, "unit": "angstrom"}, "omega_e": None,
             "omega_e_x_e": None,
             # B_e as an older result wrote it (the compared value in effective_reference, the
             # handbook value in reference); alpha_e and r_e with a reference and no z
             "reference": {
                 "B_e": {"name": "B_e", "fitted": q(10.5934, 0.0006), "reference": 10.593416,
                         "source": "library", "difference": -0.000016, "z": -0.03,
                         "effective_reference": 10.5936, "effective_z": -0.33,
                         "effective_rule": "higher terms not determined by two levels"},
                 "alpha_e": {"name": "alpha_e", "fitted": q(0.3072, 0.0005), "reference": 0.3072},
                 "r_e": {"name": "r_e", "fitted": {"value": 1.27455, "sigma": 0.00004, "unit": "angstrom"},
                         "reference": 1.27455}}}
        ],
        "checks": [
            {"name": "saturation", "status": "pass", "detail": "no saturated points"},
            {"name": "residuals", "status": "warn" if verdict == "warn" else "pass",
             "detail": "rms 3.1e-3 cm-1 vs 1e-3 expected [limit]" if verdict == "warn" else "rms within limit"},
        ],
        "verdict": verdict,
    }


def write_spectrum_csv(path: Path, origin: float) -> None:
    """A small synthetic absorbance spectrum (Gaussian lines at the hand-made positions)."""
    x = np.linspace(2700.0, 3100.0, 2001)
    y = np.full_like(x, 0.01)
    for J in range(0, 4):
        y += 0.5 * np.exp(-(((x - (origin + 2 * B_H35CL * (J + 1))) / 0.4) ** 2))
        if J >= 1:
            y += 0.5 * np.exp(-(((x - (origin - 2 * B_H35CL * J)) / 0.4) ** 2))
    body = "\n".join(f"{a:.4f},{b:.6f}" for a, b in zip(x, y))
    path.write_text("wavenumber (cm-1),absorbance\n" + body + "\n", encoding="utf-8")


def make_lab(root: Path) -> dict[str, Path]:
    """Build the lab under `root` (export/ and data/), with fixed run times."""
    export = root / "export"
    data = root / "data"
    export.mkdir(parents=True)
    conn = open_ledger(data)
    origins = (ORIGIN_H35CL, ORIGIN_H35CL + 0.004, ORIGIN_H35CL + 0.011)  # a small drift over the day
    verdicts = ("pass", "warn", "pass")
    for index, (origin, verdict, stamp) in enumerate(zip(origins, verdicts, RUN_TIMES)):
        path = export / f"hcl_cell_{index + 1:02d}.csv"
        write_spectrum_csv(path, origin)
        sha256 = hashlib.sha256(path.read_bytes()).hexdigest()
        record_run(
            conn, str(path), sha256, "processed", result=hcl_result(str(path), origin, verdict, sha256),
            received_at=stamp, processed_at=stamp,
        )
    bad = export / "empty_scan.csv"
    bad.write_text("", encoding="utf-8")
    record_run(
        conn, str(bad), None, "unreadable", error=f"{bad}: file is empty",
        received_at="2026-03-05T12:30:00.000Z", processed_at="2026-03-05T12:30:00.000Z",
    )
    conn.close()
    return {"export": export, "data": data}
