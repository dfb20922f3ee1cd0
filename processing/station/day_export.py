"""A day's runs for the lab's records: one row per run (the newest version of each file
received that local day) with its file, time, verdict and main reasons, the decision, and the
band origins and B values with their standard errors.

CSV has one column per band quantity found that day (`H35Cl 1-0 origin cm-1`, then its
`... sigma cm-1`); JSON nests the bands. Built from the ledger's records and its quantities
table (no stored result is decoded).
"""
from __future__ import annotations

import csv
import io
from collections.abc import Mapping, Sequence
from typing import Any

from processing import strict_json
from processing.local_time import local_day, local_iso, zone_name
from processing.station.ledger import RunRecord

BandQuantity = tuple[str, str, str, float, float | None]  # isotopologue, band, quantity, value, sigma
QUANTITY_NAMES = {"origin": "origin", "B_upper": "B'", "B_lower": "B''"}
FIXED_COLUMNS = ("run_id", "file", "version", "time", "status", "verdict", "reasons", "decision",
                 "decided_by", "decision_reason", "path")


def runs_of_day(runs: Sequence[RunRecord], day: str) -> list[RunRecord]:
    """The runs received on local day `day` (YYYY-MM-DD), oldest first."""
    chosen = [run for run in runs if local_day(run.received_at) == day]
    return sorted(chosen, key=lambda run: (run.received_at, run.run_id))


def day_rows(runs: Sequence[RunRecord], quantities: Mapping[int, list[BandQuantity]]) -> list[dict[str, Any]]:
    """One dict per run (the JSON form)."""
    rows = []
    for run in runs:
        bands: dict[tuple[str, str], dict[str, Any]] = {}
        for iso, band, quantity, value, sigma in quantities.get(run.run_id, ()):
            entry = bands.setdefault((iso, band), {"isotopologue": iso, "band": band})
            entry[quantity] = {"value": value, "sigma": sigma}
        rows.append({
            "run_id": run.run_id,
            "file": run.name,
            "version": run.version,
            "time": local_iso(run.received_at),
            "status": run.status,
            "verdict": run.verdict,
            "reasons": list(run.reasons) if run.status == "processed" else ([run.error] if run.error else []),
            "decision": run.decision,
            "decided_by": run.operator,
            "decision_reason": run.decision_reason,
            "path": run.path,
            "bands": list(bands.values()),
        })
    return rows


def day_json(day: str, rows: list[dict[str, Any]]) -> str:
    return strict_json.dumps({"day": day, "zone": zone_name(), "runs": rows}, indent=1) + "\n"


def day_csv(rows: list[dict[str, Any]]) -> str:
    """One row per run; band columns for every band quantity any run of the day has."""
    band_columns: list[str] = []
    flat_rows = []
    for row in rows:
        flat = {key: row[key] for key in FIXED_COLUMNS}
        flat["reasons"] = " · ".join(str(reason) for reason in row["reasons"])
        for band in row["bands"]:
            for quantity, name in QUANTITY_NAMES.items():
                if quantity not in band:
                    continue
                label = f"{band['isotopologue']} {band['band']} {name}"
                for column, key in ((f"{label} cm-1", "value"), (f"{label} sigma cm-1", "sigma")):
                    if column not in band_columns:
                        band_columns.append(column)
                    flat[column] = band[quantity][key]
        flat_rows.append(flat)
    buffer = io.StringIO()
    writer = csv.DictWriter(buffer, fieldnames=[*FIXED_COLUMNS, *band_columns], lineterminator="\n")
    writer.writeheader()
    for flat in flat_rows:
        writer.writerow({key: "" if flat.get(key) is None else (repr(flat[key]) if isinstance(flat[key], float) else flat[key])
                         for key in [*FIXED_COLUMNS, *band_columns]})
    return buffer.getvalue()
