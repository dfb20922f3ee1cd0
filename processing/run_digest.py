"""What recording a run needs of its result, made where the result is made.

A station's worker analyses a file and sends back the result's JSON, its report texts and this
digest: the few fields the ledger stores beside the JSON (status, verdict, species, main
reasons, the fitted quantities the trends read). The station records and reports a run from
these without rebuilding the result object (a few thousand objects: the station process's
largest cost per file). The result itself still travels with them, pickled, for whoever asks.
"""
from __future__ import annotations

from dataclasses import dataclass
from typing import TYPE_CHECKING

if TYPE_CHECKING:
    from processing.results import RunResult

# (isotopologue, band ("1-0", "" for a molecular constant), quantity, value, sigma, unit)
QuantityRow = tuple[str, str, str, float, "float | None", str]


@dataclass(frozen=True)
class RunDigest:
    """A result's fields that the ledger stores beside its JSON (`record_run`) and the reports
    name (`write_reports`)."""

    file: str
    status: str
    sha256: str | None
    error: str | None
    verdict: str | None
    species: tuple[str, ...]
    reasons: tuple[str, ...]  # the verdict's main reasons (`result_text.main_reasons`)
    quantities: tuple[QuantityRow, ...]  # every finite fitted quantity (`ledger.quantity_rows`)


def digest_of(result: RunResult) -> RunDigest:
    """The digest of a result (the same values the ledger would take from the result)."""
    from processing.result_text import main_reasons
    from processing.station.ledger import quantity_rows

    return RunDigest(
        file=result.file, status=result.status, sha256=result.sha256, error=result.error, verdict=result.verdict,
        species=tuple(result.species), reasons=main_reasons(result), quantities=tuple(quantity_rows(result)),
    )
