"""Redo a run: the station's settings with the operator's request applied, one way.

A redo analyses the run's file again with the settings the station uses (expected species,
check thresholds, where files may be read from) changed as the operator asked (`RedoRequest`:
other species, a branch renumbered, lines left out, ...), records the outcome as a new version
of the run with the request beside it, and writes its reports. The station does it in its
worker pool (`Station.reprocess`); without a running station the interface calls `redo_here`,
which runs the same analysis in the calling thread and records it the same way.
"""
from __future__ import annotations

import math
from collections.abc import Callable, Mapping
from dataclasses import dataclass, fields, replace
from pathlib import Path
from typing import Any

from processing.errors import ConfigError
from processing.pipeline import ProcessSettings, process_file
from processing.provenance import Provenance, current_provenance
from processing.regular_files import ReadPolicy
from processing.results import RunResult, to_json
from processing.station import ledger
from processing.station.config import StationConfig, station_settings
from processing.station.reports import write_reports

JOffset = tuple[str, int, int, str, int]  # (isotopologue, v_upper, v_lower, branch "P"/"R", offset added to J'')
ProcessFunction = Callable[[str, ProcessSettings], RunResult]


@dataclass(frozen=True)
class RedoRequest:
    """What the operator changes for a redo; None (or absent) keeps the station's setting."""

    species: tuple[str, ...] | None = None
    j_offsets: tuple[JOffset, ...] | None = None
    excluded_positions_cm1: tuple[float, ...] | None = None
    threshold_sigma: float | None = None
    max_shift_cm1: float | None = None
    temperature_K: float | None = None

    def to_dict(self) -> dict[str, Any]:
        """The request as stored with the new run (`settings`): the fields asked for."""
        out: dict[str, Any] = {}
        for f in fields(self):
            value = getattr(self, f.name)
            if value is not None:
                out[f.name] = [list(item) for item in value] if f.name == "j_offsets" else (list(value) if isinstance(value, tuple) else value)
        return out

    @classmethod
    def from_dict(cls, data: Mapping[str, Any]) -> RedoRequest:
        """A request from plain data; an unknown name or a bad value raises ConfigError naming it."""
        known = {f.name for f in fields(cls)}
        values: dict[str, Any] = {}
        for key, value in data.items():
            if key not in known:
                raise ConfigError(None, key, f"not a redo setting (known: {', '.join(sorted(known))})")
            if value is None:
                continue
            if key == "species":
                values[key] = _strings(key, value)
            elif key == "j_offsets":
                values[key] = tuple(_offset(item) for item in _listed(key, value))
            elif key == "excluded_positions_cm1":
                values[key] = tuple(_number(key, item) for item in _listed(key, value))
            else:
                values[key] = _number(key, value)
        return cls(**values)


def _listed(key: str, value: Any) -> list[Any]:
    if not isinstance(value, list | tuple):
        raise ConfigError(None, key, f"must be a list, got {value!r}")
    return list(value)


def _strings(key: str, value: Any) -> tuple[str, ...]:
    items = _listed(key, value)
    if not all(isinstance(item, str) and item.strip() for item in items):
        raise ConfigError(None, key, "must be a list of names")
    return tuple(item.strip() for item in items)


def _number(key: str, value: Any) -> float:
    if isinstance(value, bool) or not isinstance(value, int | float) or not math.isfinite(value):
        raise ConfigError(None, key, f"must be a finite number, got {value!r}")
    return float(value)


def _offset(item: Any) -> JOffset:
    if not isinstance(item, list | tuple) or len(item) != 5:
        raise ConfigError(None, "j_offsets", f"each must be [isotopologue, v_upper, v_lower, branch, offset], got {item!r}")
    isotopologue, v_upper, v_lower, branch, offset = item
    if not isinstance(isotopologue, str) or branch not in ("P", "R") or not all(
        isinstance(n, int) and not isinstance(n, bool) for n in (v_upper, v_lower, offset)
    ):
        raise ConfigError(None, "j_offsets", f"each must be [isotopologue, v_upper, v_lower, branch, offset], got {item!r}")
    return (isotopologue, v_upper, v_lower, branch, offset)


def redo_settings(base: ProcessSettings, request: RedoRequest) -> ProcessSettings:
    """The settings of a redo: the station's, changed as requested (the fields asked for)."""
    changes = {f.name: getattr(request, f.name) for f in fields(request) if getattr(request, f.name) is not None}
    return replace(base, **changes)


def record_redo(
    conn: ledger.Connection, run_id: int, request: RedoRequest,
    result: RunResult | None, result_json: str | None = None, failure: str | None = None,
    provenance: Provenance | None = None,
) -> ledger.RunRecord:
    """The redo's outcome as a new version of the run, with the request beside it and what it
    was made with (ledger only; the caller writes the reports: the station retries them while
    its disk is full)."""
    if result is None:
        return ledger.record_reprocessed(
            conn, run_id, None, request.to_dict(), status="failed", error=failure or "no result", provenance=provenance
        )
    return ledger.record_reprocessed(conn, run_id, result, request.to_dict(), result_json=result_json, provenance=provenance)


@dataclass(frozen=True)
class RedoOutcome:
    """A redo's new run (None when it could not be made) and what went wrong, if anything."""

    run_id: int | None
    problem: str | None = None


def redo_here(
    config: StationConfig, run_id: int, request: RedoRequest, process_function: ProcessFunction | None = None
) -> RedoOutcome:
    """Redo a run in this thread (no station running): the station's settings from `config`,
    the request applied, recorded and reported as the station does."""
    data_dir = Path(config.data_folder).expanduser()
    conn = ledger.open_ledger(config.ledger_location)
    try:
        run = ledger.get_run(conn, run_id, with_result=False)
        if run is None:
            return RedoOutcome(None, f"run {run_id} is not in the ledger")
        if not_here := other_instrument(run, config.instrument):
            return RedoOutcome(None, not_here)
        policy = _read_policy(config, data_dir)
        settings = redo_settings(station_settings(config, policy), request)
        function = process_function or process_file
        try:
            result = function(run.path, settings)
        except MemoryError:
            return RedoOutcome(None, f"run {run_id}: out of memory while redoing it")
        text = to_json(result)
        record = record_redo(conn, run_id, request, result, text, provenance=current_provenance(settings))
        if record.status == "processed":
            try:
                write_reports(data_dir, record.run_id, record.version, result, text)
            except OSError as error:
                return RedoOutcome(record.run_id, f"run {record.run_id} recorded, its report not written ({error.strerror or error})")
        return RedoOutcome(record.run_id)
    finally:
        conn.close()


def other_instrument(run: ledger.RunRecord, instrument: str) -> str | None:
    """Why a run cannot be redone on this instrument (its file is on another), or None."""
    if run.instrument and run.instrument != instrument:
        return f"run {run.run_id} was measured on {run.instrument}; redo it at that instrument's station"
    return None


def _read_policy(config: StationConfig, data_dir: Path) -> ReadPolicy:
    """The station's read policy when the export folder is known; else never the data folder."""
    if config.export_folder is not None and Path(config.export_folder).expanduser().is_dir():
        return ReadPolicy.for_station(Path(config.export_folder).expanduser(), data_dir, config.follow_links_outside)
    return ReadPolicy(forbidden=(str(data_dir.resolve()),))
