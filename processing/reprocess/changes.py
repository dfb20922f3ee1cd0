"""What changed: per fitted quantity, the distribution of new - old across a reprocessed archive.

For every file whose newest version a reprocess made with today's analysis and library, each
fitted quantity (the ledger's `quantities` table) is compared with the version it was
reprocessed from. A correction of the library or the analysis then shows as one clean shift
(a median with quartiles close around it); scattered differences show as a wide spread.
Streamed from the ledger one quantity at a time, so memory is one quantity's differences.
"""
from __future__ import annotations

from array import array
from dataclasses import dataclass
from itertools import groupby

import numpy as np

from processing.order_stats import percentiles
from processing.provenance import Provenance
from processing.station import ledger


@dataclass(frozen=True)
class QuantityShift:
    """new - old of one quantity across the runs that have it in both versions."""

    isotopologue: str
    band: str  # "1-0" for a band constant, "" for a molecular constant
    quantity: str
    unit: str
    count: int
    median: float
    lower_quartile: float
    upper_quartile: float
    smallest: float
    largest: float

    def to_dict(self) -> dict[str, object]:
        return {
            "isotopologue": self.isotopologue, "band": self.band, "quantity": self.quantity, "unit": self.unit,
            "count": self.count, "median": self.median, "lower_quartile": self.lower_quartile,
            "upper_quartile": self.upper_quartile, "min": self.smallest, "max": self.largest,
        }


def quantity_shifts(conn: ledger.Connection, provenance: Provenance) -> list[QuantityShift]:
    """One `QuantityShift` per (isotopologue, band, quantity) that today's reprocess changed or
    kept, in that order."""
    shifts: list[QuantityShift] = []
    rows = ledger.quantity_changes(conn, provenance)
    for (isotopologue, band, quantity), group in groupby(rows, key=lambda row: row[:3]):
        differences = array("d")
        unit = ""
        for row in group:
            unit = row[3]
            differences.append(row[4])
        values = np.frombuffer(differences, dtype=float)
        lower, median, upper = percentiles(values, (25.0, 50.0, 75.0))
        shifts.append(QuantityShift(
            isotopologue, band, quantity, unit, int(values.size), float(median), float(lower), float(upper),
            float(values.min()), float(values.max()),
        ))
    return shifts
