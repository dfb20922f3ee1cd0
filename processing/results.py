"""A run's result as typed data, and its one JSON codec (`schema` 1).

Everything bandwatch concludes about a file crosses from the analysis to the ledger, the
reports and the interface as a `RunResult`: frozen dataclasses (spectrum summary, lines with
their assignments, bands, molecular constants with derived quantities and diagnostics, checks,
intensities, baseline, contours), each quantity an `Estimate`. `to_dict` writes the public JSON
object the README describes (keys only ever added, never renamed or dropped); `from_dict` reads
it back, also from results written by older versions (a key they lack takes its default). The
two are exact inverses on everything the pipeline writes (tests/test_results_codec.py).
`to_json` / `from_json` add strict JSON text (`strict_json`): encode once, store the bytes.

No numpy here and no analysis: the analysis modules build these records.
"""
from __future__ import annotations

import json
import math
from collections.abc import Mapping
from dataclasses import dataclass, field
from typing import Any

from processing import strict_json
from processing.estimate import Estimate

SCHEMA_VERSION = 1

JSON = dict[str, Any]


class ResultFormatError(ValueError):
    """A result object that is not of the public shape (names the place)."""


# ----------------------------------------------------------------------------- helpers
def _q(estimate: Estimate | None) -> JSON | None:
    return estimate.to_dict() if estimate is not None else None


def _estimate(data: Any, where: str) -> Estimate | None:
    """An Estimate from its JSON form; None for null. A null value (not finite when written)
    reads as NaN: the result's `non_finite` list says what it was."""
    if data is None:
        return None
    if not isinstance(data, Mapping) or "value" not in data:
        raise ResultFormatError(f"{where}: expected {{\"value\", \"sigma\"}}, got {data!r:.80}")
    value = data["value"]
    return Estimate(math.nan if value is None else value, data.get("sigma"), data.get("unit", "cm-1"))


def _required(data: Mapping[str, Any], key: str, where: str) -> Any:
    if key not in data:
        raise ResultFormatError(f"{where}: no {key!r}")
    return data[key]


def _table(data: Any, where: str) -> Mapping[str, Any]:
    if not isinstance(data, Mapping):
        raise ResultFormatError(f"{where}: expected an object, got {type(data).__name__}")
    return data


def _items(data: Any, where: str) -> list[Any]:
    if data is None:
        return []
    if not isinstance(data, list | tuple):
        raise ResultFormatError(f"{where}: expected a list, got {type(data).__name__}")
    return list(data)


# ----------------------------------------------------------------------------- spectrum
@dataclass(frozen=True)
class SpectrumSummary:
    """What was read: enough for a table row and the `spectrum` JSON object."""

    points: int
    first_cm1: float
    last_cm1: float
    spacing_cm1: float | None
    y_units: str
    resolution_cm1: float | None
    kind: str  # "spectrum" or "line list"
    format: str
    title: str
    notes: tuple[str, ...] = ()

    def to_dict(self) -> JSON:
        return {
            "points": self.points,
            "first_cm1": self.first_cm1,
            "last_cm1": self.last_cm1,
            "spacing_cm1": self.spacing_cm1,
            "y_units": self.y_units,
            "resolution_cm1": self.resolution_cm1,
            "kind": self.kind,
            "format": self.format,
            "title": self.title,
            "notes": list(self.notes),
        }

    @classmethod
    def from_dict(cls, data: Any) -> SpectrumSummary:
        data = _table(data, "spectrum")
        return cls(
            points=_required(data, "points", "spectrum"),
            first_cm1=_required(data, "first_cm1", "spectrum"),
            last_cm1=_required(data, "last_cm1", "spectrum"),
            spacing_cm1=data.get("spacing_cm1"),
            y_units=data.get("y_units", "absorbance"),
            resolution_cm1=data.get("resolution_cm1"),
            kind=data.get("kind", "spectrum"),
            format=data.get("format", ""),
            title=data.get("title", ""),
            notes=tuple(data.get("notes") or ()),
        )


# ----------------------------------------------------------------------------- lines
@dataclass(frozen=True)
class Assignment:
    """Which isotopologue, band, branch and J a line was given, and how well it fits."""

    isotopologue: str
    v_upper: int
    v_lower: int
    branch: str  # "P" | "R"
    J_lower: int
    m: int  # running index: -J'' for P, J''+1 for R
    calc: float
    residual: float
    confidence: float
    method: str = "library"  # "library" | "pattern"
    blended: bool = False
    used_in_fit: bool = True

    @property
    def band(self) -> str:
        """"1-0"."""
        return f"{self.v_upper}-{self.v_lower}"

    def to_dict(self) -> JSON:
        return {
            "isotopologue": self.isotopologue,
            "v_upper": self.v_upper,
            "v_lower": self.v_lower,
            "branch": self.branch,
            "J_lower": self.J_lower,
            "m": self.m,
            "calc": self.calc,
            "residual": self.residual,
            "confidence": self.confidence,
            "method": self.method,
            "blended": self.blended,
            "used_in_fit": self.used_in_fit,
        }

    @classmethod
    def from_dict(cls, data: Any, where: str = "assigned") -> Assignment:
        data = _table(data, where)
        branch = _required(data, "branch", where)
        J_lower = _required(data, "J_lower", where)
        m = data.get("m")
        if m is None:
            m = -J_lower if branch == "P" else J_lower + 1
        return cls(
            isotopologue=_required(data, "isotopologue", where),
            v_upper=_required(data, "v_upper", where),
            v_lower=_required(data, "v_lower", where),
            branch=branch,
            J_lower=J_lower,
            m=m,
            calc=_required(data, "calc", where),
            residual=_required(data, "residual", where),
            confidence=data.get("confidence", 1.0),
            method=data.get("method", "library"),
            blended=data.get("blended", False),
            used_in_fit=data.get("used_in_fit", True),
        )


@dataclass(frozen=True)
class Line:
    """One line found in the spectrum (or given by a line list)."""

    position: Estimate
    height: float
    width: float | None = None
    area: float | None = None
    snr: float | None = None
    saturated: bool = False
    blended: bool = False
    ringing: bool = False
    few_points: bool = False
    equivalent_width: float | None = None
    assigned: Assignment | None = None
    likely_cause: str | None = None

    @property
    def key(self) -> float:
        """The line's identity for exclusion requests: its observed position, cm-1, 4 decimals."""
        return round(float(self.position.value), 4)

    def to_dict(self) -> JSON:
        return {
            "position": self.position.to_dict(),
            "height": self.height,
            "width": self.width,
            "area": self.area,
            "snr": self.snr,
            "saturated": self.saturated,
            "blended": self.blended,
            "ringing": self.ringing,
            "few_points": self.few_points,
            "equivalent_width": self.equivalent_width,
            "assigned": self.assigned.to_dict() if self.assigned is not None else None,
            "likely_cause": self.likely_cause,
        }

    @classmethod
    def from_dict(cls, data: Any, where: str = "line") -> Line:
        data = _table(data, where)
        position = _estimate(_required(data, "position", where), f"{where}.position")
        assert position is not None
        assigned = data.get("assigned")
        return cls(
            position=position,
            height=_required(data, "height", where),
            width=data.get("width"),
            area=data.get("area"),
            snr=data.get("snr"),
            saturated=data.get("saturated", False),
            blended=data.get("blended", False),
            ringing=data.get("ringing", False),
            few_points=data.get("few_points", False),
            equivalent_width=data.get("equivalent_width"),
            assigned=Assignment.from_dict(assigned, f"{where}.assigned") if assigned else None,
            likely_cause=data.get("likely_cause"),
        )


# ----------------------------------------------------------------------------- comparisons
@dataclass(frozen=True)
class Comparison:
    """A fitted quantity against the reference for the model fitted.

    `reference` is what the same model gives on the library's own positions of the same lines
    (the value shown beside the fitted one); `handbook` is the library's value of the constant
    itself (tabulated or mass-scaled); `z` = difference / `combined_sigma` (the fit's
    statistical error and the reference's own uncertainty). The `effective_*` keys repeat
    `reference` and `z`; results written before references were computed for the model
    fitted held the handbook value in `reference` and the compared value in
    `effective_reference` (`compared_reference` and `compared_z` read both forms)."""

    name: str
    fitted: Estimate
    reference: float | None
    source: str
    difference: float | None
    difference_percent: float | None
    z: float | None
    effective_reference: float | None = None
    effective_z: float | None = None
    effective_rule: str | None = None
    reference_sigma: float | None = None
    combined_sigma: float | None = None
    handbook: float | None = None
    model: str = ""

    @property
    def compared_reference(self) -> float | None:
        """The value `z` is computed against."""
        return self.effective_reference if self.effective_reference is not None else self.reference

    @property
    def compared_z(self) -> float | None:
        """The z that goes with `compared_reference`."""
        return self.effective_z if self.effective_reference is not None else self.z

    @property
    def handbook_value(self) -> float | None:
        """The library's value of the constant (older results: `reference`, when the compared
        value sat in `effective_reference`)."""
        if self.handbook is not None:
            return self.handbook
        return self.reference if self.effective_reference is not None else None

    def to_dict(self) -> JSON:
        return {
            "name": self.name,
            "fitted": self.fitted.to_dict(),
            "reference": self.reference,
            "reference_sigma": self.reference_sigma,
            "source": self.source,
            "difference": self.difference,
            "difference_percent": self.difference_percent,
            "z": self.z,
            "combined_sigma": self.combined_sigma,
            "handbook": self.handbook,
            "model": self.model,
            "effective_reference": self.effective_reference,
            "effective_z": self.effective_z,
            "effective_rule": self.effective_rule,
        }

    @classmethod
    def from_dict(cls, data: Any, where: str = "comparison") -> Comparison:
        data = _table(data, where)
        fitted = _estimate(_required(data, "fitted", where), f"{where}.fitted")
        assert fitted is not None
        return cls(
            name=_required(data, "name", where),
            fitted=fitted,
            reference=data.get("reference"),
            source=data.get("source", ""),
            difference=data.get("difference"),
            difference_percent=data.get("difference_percent"),
            z=data.get("z"),
            effective_reference=data.get("effective_reference"),
            effective_z=data.get("effective_z"),
            effective_rule=data.get("effective_rule"),
            reference_sigma=data.get("reference_sigma"),
            combined_sigma=data.get("combined_sigma"),
            handbook=data.get("handbook"),
            model=data.get("model", ""),
        )


def _comparisons_to_dict(comparisons: Mapping[str, Comparison]) -> JSON:
    return {key: comparison.to_dict() for key, comparison in comparisons.items()}


def _comparisons_from_dict(data: Any, where: str) -> dict[str, Comparison]:
    return {str(key): Comparison.from_dict(item, f"{where}.{key}") for key, item in _table(data or {}, where).items()}


# ----------------------------------------------------------------------------- bands
@dataclass(frozen=True)
class CombinationDifferences:
    """B (and D) of one vibrational state from combination differences."""

    state: str  # "lower" or "upper"
    v: int
    B: Estimate
    D: Estimate | None
    n_pairs: int
    rms: float

    def to_dict(self) -> JSON:
        return {"state": self.state, "v": self.v, "B": self.B.to_dict(), "D": _q(self.D), "n_pairs": self.n_pairs, "rms": self.rms}

    @classmethod
    def from_dict(cls, data: Any, where: str = "combination_differences") -> CombinationDifferences:
        data = _table(data, where)
        B = _estimate(_required(data, "B", where), f"{where}.B")
        assert B is not None
        return cls(_required(data, "state", where), _required(data, "v", where), B, _estimate(data.get("D"), f"{where}.D"),
                   _required(data, "n_pairs", where), _required(data, "rms", where))


BAND_QUANTITIES = ("origin", "B_upper", "B_lower", "D_upper", "D_lower", "H_upper", "H_lower")


@dataclass(frozen=True)
class Band:
    """One band's fitted constants, the fit's quality, and each constant against its reference."""

    isotopologue: str
    v_upper: int
    v_lower: int
    n_lines: int
    rms: float
    origin: Estimate
    B_upper: Estimate
    B_lower: Estimate
    D_upper: Estimate | None = None
    D_lower: Estimate | None = None
    d_model: str = ""
    n_rejected: int = 0
    held_centrifugal: Mapping[str, float] | None = None  # D_upper, D_lower, H_upper, H_lower held
    H_upper: Estimate | None = None
    H_lower: Estimate | None = None
    h_model: str = "no H"
    chi2_reduced: float | None = None
    parameters: tuple[str, ...] = ()
    correlation: tuple[tuple[float, ...], ...] = ()
    rejection_rule: str = ""
    combination_differences: tuple[CombinationDifferences, ...] = ()
    notes: tuple[str, ...] = ()
    reference: Mapping[str, Comparison] = field(default_factory=dict)

    @property
    def band(self) -> str:
        """"1-0"."""
        return f"{self.v_upper}-{self.v_lower}"

    @property
    def label(self) -> str:
        """"H35Cl 1-0"."""
        return f"{self.isotopologue} {self.band}"

    def quantity(self, name: str) -> Estimate | None:
        """One of BAND_QUANTITIES by name."""
        if name not in BAND_QUANTITIES:
            raise KeyError(name)
        value: Estimate | None = getattr(self, name)
        return value

    def to_dict(self) -> JSON:
        return {
            "isotopologue": self.isotopologue,
            "v_upper": self.v_upper,
            "v_lower": self.v_lower,
            "n_lines": self.n_lines,
            "n_rejected": self.n_rejected,
            "rms": self.rms,
            "origin": self.origin.to_dict(),
            "B_upper": self.B_upper.to_dict(),
            "B_lower": self.B_lower.to_dict(),
            "D_upper": _q(self.D_upper),
            "D_lower": _q(self.D_lower),
            "d_model": self.d_model,
            "held_centrifugal": dict(self.held_centrifugal) if self.held_centrifugal is not None else None,
            "H_upper": _q(self.H_upper),
            "H_lower": _q(self.H_lower),
            "h_model": self.h_model,
            "chi2_reduced": self.chi2_reduced,
            "parameters": list(self.parameters),
            "correlation": [list(row) for row in self.correlation],
            "rejection_rule": self.rejection_rule,
            "combination_differences": [cd.to_dict() for cd in self.combination_differences],
            "notes": list(self.notes),
            "reference": _comparisons_to_dict(self.reference),
        }

    @classmethod
    def from_dict(cls, data: Any, where: str = "band") -> Band:
        data = _table(data, where)

        def needed(name: str) -> Estimate:
            estimate = _estimate(_required(data, name, where), f"{where}.{name}")
            assert estimate is not None
            return estimate

        held = data.get("held_centrifugal")
        return cls(
            isotopologue=_required(data, "isotopologue", where),
            v_upper=_required(data, "v_upper", where),
            v_lower=_required(data, "v_lower", where),
            n_lines=_required(data, "n_lines", where),
            rms=_required(data, "rms", where),
            origin=needed("origin"),
            B_upper=needed("B_upper"),
            B_lower=needed("B_lower"),
            D_upper=_estimate(data.get("D_upper"), f"{where}.D_upper"),
            D_lower=_estimate(data.get("D_lower"), f"{where}.D_lower"),
            d_model=data.get("d_model", ""),
            n_rejected=data.get("n_rejected", 0),
            held_centrifugal=dict(_table(held, f"{where}.held_centrifugal")) if held is not None else None,
            H_upper=_estimate(data.get("H_upper"), f"{where}.H_upper"),
            H_lower=_estimate(data.get("H_lower"), f"{where}.H_lower"),
            h_model=data.get("h_model", "no H"),
            chi2_reduced=data.get("chi2_reduced"),
            parameters=tuple(data.get("parameters") or ()),
            correlation=tuple(tuple(row) for row in _items(data.get("correlation"), f"{where}.correlation")),
            rejection_rule=data.get("rejection_rule", ""),
            combination_differences=tuple(
                CombinationDifferences.from_dict(item, f"{where}.combination_differences[{i}]")
                for i, item in enumerate(_items(data.get("combination_differences"), f"{where}.combination_differences"))
            ),
            notes=tuple(data.get("notes") or ()),
            reference=_comparisons_from_dict(data.get("reference"), f"{where}.reference"),
        )


# ----------------------------------------------------------------------------- constants
@dataclass(frozen=True)
class DerivedQuantity:
    """A quantity derived from fitted constants under a named model (k_e, zero-point energy,
    Morse D_e and D_0), with the same model's reference and z."""

    value: float
    sigma: float | None
    unit: str
    model: str
    reference: float | None = None
    reference_sigma: float | None = None
    z: float | None = None
    value_eV: float | None = None
    value_kJ_per_mol: float | None = None

    def to_dict(self) -> JSON:
        out: JSON = {"value": self.value, "sigma": self.sigma, "unit": self.unit, "model": self.model,
                     "reference": self.reference, "reference_sigma": self.reference_sigma, "z": self.z}
        if self.value_eV is not None:
            out["value_eV"] = self.value_eV
        if self.value_kJ_per_mol is not None:
            out["value_kJ_per_mol"] = self.value_kJ_per_mol
        return out

    @classmethod
    def from_dict(cls, data: Any, where: str = "derived") -> DerivedQuantity:
        data = _table(data, where)
        return cls(_required(data, "value", where), data.get("sigma"), data.get("unit", "cm-1"), data.get("model", ""),
                   data.get("reference"), data.get("reference_sigma"), data.get("z"), data.get("value_eV"),
                   data.get("value_kJ_per_mol"))


@dataclass(frozen=True)
class HeldTerm:
    """A term the lines cannot determine, held at the library's value with its uncertainty."""

    value: float
    sigma: float | None
    source: str

    def to_dict(self) -> JSON:
        return {"value": self.value, "sigma": self.sigma, "source": self.source}

    @classmethod
    def from_dict(cls, data: Any, where: str = "held") -> HeldTerm:
        data = _table(data, where)
        return cls(_required(data, "value", where), data.get("sigma"), data.get("source", ""))


@dataclass(frozen=True)
class Relation:
    """A consistency relation between constants (Kratzer, Pekeris): what it predicts for
    `quantity` against the fitted value."""

    relation: str
    quantity: str  # "D_e" | "alpha_e"
    predicted: float
    fitted: float | None
    ratio: float | None
    omega_e_from: str  # "fitted" | "library"

    def to_dict(self) -> JSON:
        return {"relation": self.relation, f"predicted_{self.quantity}": self.predicted, f"fitted_{self.quantity}": self.fitted,
                "ratio": self.ratio, "omega_e_from": self.omega_e_from}

    @classmethod
    def from_dict(cls, data: Any, where: str = "diagnostics") -> Relation:
        data = _table(data, where)
        quantity = next((key[len("predicted_"):] for key in data if key.startswith("predicted_")), None)
        if quantity is None:
            raise ResultFormatError(f"{where}: no predicted_* value")
        return cls(data.get("relation", ""), quantity, data[f"predicted_{quantity}"], data.get(f"fitted_{quantity}"),
                   data.get("ratio"), data.get("omega_e_from", ""))


MOLECULAR_CONSTANTS = ("B_e", "alpha_e", "D_e", "r_e", "omega_e", "omega_e_x_e", "omega_e_y_e", "gamma_e", "beta_e", "H_e")


@dataclass(frozen=True)
class IsotopologueConstants:
    """Molecular constants of one isotopologue from one term-value fit of all its lines, each
    beside the reference for the model fitted, with derived quantities and diagnostics."""

    isotopologue: str
    n_lines: int
    vibrational_levels: tuple[int, ...]
    rms_cm1: float
    constants: Mapping[str, Estimate | None]  # MOLECULAR_CONSTANTS: fitted only (r_e in angstrom)
    band_origins: Mapping[str, Estimate]  # "1-0" -> nu0 from the term fit
    B_v: Mapping[int, Estimate]
    derived: Mapping[str, DerivedQuantity]
    comparisons: tuple[Comparison, ...]
    diagnostics: Mapping[str, Relation]  # kratzer, pekeris
    dunham: Mapping[str, Estimate]
    correlation: tuple[tuple[float, ...], ...]
    notes: tuple[str, ...] = ()
    held: Mapping[str, HeldTerm] = field(default_factory=dict)
    origin_comparisons: tuple[Comparison, ...] = ()
    B_v_comparisons: tuple[Comparison, ...] = ()
    model: str = ""
    chi2_reduced: float | None = None

    @property
    def reference(self) -> dict[str, Comparison]:
        """Each compared constant's comparison by name."""
        return {c.name: c for c in self.comparisons}

    def to_dict(self) -> JSON:
        out: JSON = {"isotopologue": self.isotopologue}
        for name in MOLECULAR_CONSTANTS:
            out[name] = _q(self.constants.get(name))
        out.update(
            {
                "n_lines": self.n_lines,
                "vibrational_levels": list(self.vibrational_levels),
                "rms": self.rms_cm1,
                "chi2_reduced": self.chi2_reduced,
                "model": self.model,
                "held": {name: term.to_dict() for name, term in self.held.items()},
                "band_origins": {k: v.to_dict() for k, v in self.band_origins.items()},
                "band_origins_reference": {c.name: c.to_dict() for c in self.origin_comparisons},
                "B_v": {str(v): e.to_dict() for v, e in self.B_v.items()},
                "B_v_reference": {c.name: c.to_dict() for c in self.B_v_comparisons},
                "derived": {name: d.to_dict() for name, d in self.derived.items()},
                "reference": {c.name: c.to_dict() for c in self.comparisons},
                "diagnostics": {name: r.to_dict() for name, r in self.diagnostics.items()},
                "dunham": {k: v.to_dict() for k, v in self.dunham.items()},
                "dunham_correlation": [list(row) for row in self.correlation],
                "notes": list(self.notes),
            }
        )
        return out

    @classmethod
    def from_dict(cls, data: Any, where: str = "constants") -> IsotopologueConstants:
        data = _table(data, where)

        def estimates(key: str) -> dict[str, Estimate]:
            out = {}
            for name, item in _table(data.get(key) or {}, f"{where}.{key}").items():
                estimate = _estimate(item, f"{where}.{key}.{name}")
                if estimate is not None:
                    out[str(name)] = estimate
            return out

        def comparisons(key: str) -> tuple[Comparison, ...]:
            return tuple(_comparisons_from_dict(data.get(key), f"{where}.{key}").values())

        return cls(
            isotopologue=_required(data, "isotopologue", where),
            n_lines=data.get("n_lines", 0),
            vibrational_levels=tuple(data.get("vibrational_levels") or ()),
            rms_cm1=data.get("rms", math.nan),
            constants={name: _estimate(data.get(name), f"{where}.{name}") for name in MOLECULAR_CONSTANTS},
            band_origins=estimates("band_origins"),
            B_v={int(v): e for v, e in estimates("B_v").items()},
            derived={str(name): DerivedQuantity.from_dict(item, f"{where}.derived.{name}")
                     for name, item in _table(data.get("derived") or {}, f"{where}.derived").items()},
            comparisons=comparisons("reference"),
            diagnostics={str(name): Relation.from_dict(item, f"{where}.diagnostics.{name}")
                         for name, item in _table(data.get("diagnostics") or {}, f"{where}.diagnostics").items()},
            dunham=estimates("dunham"),
            correlation=tuple(tuple(row) for row in _items(data.get("dunham_correlation"), f"{where}.dunham_correlation")),
            notes=tuple(data.get("notes") or ()),
            held={str(name): HeldTerm.from_dict(item, f"{where}.held.{name}")
                  for name, item in _table(data.get("held") or {}, f"{where}.held").items()},
            origin_comparisons=comparisons("band_origins_reference"),
            B_v_comparisons=comparisons("B_v_reference"),
            model=data.get("model", ""),
            chi2_reduced=data.get("chi2_reduced"),
        )


@dataclass(frozen=True)
class ReferencedValue:
    """A value with its sigma, the reference for its model and z (a mass-reduced fit's
    constants of one isotopologue)."""

    value: float
    sigma: float | None
    reference: float | None
    reference_sigma: float | None
    z: float | None

    def to_dict(self) -> JSON:
        return {"value": self.value, "sigma": self.sigma, "reference": self.reference,
                "reference_sigma": self.reference_sigma, "z": self.z}

    @classmethod
    def from_dict(cls, data: Any, where: str = "value") -> ReferencedValue:
        data = _table(data, where)
        return cls(_required(data, "value", where), data.get("sigma"), data.get("reference"), data.get("reference_sigma"), data.get("z"))


@dataclass(frozen=True)
class MassReducedMember:
    """One isotopologue in a mass-reduced fit: its constants from the U_kl and its residuals."""

    reduced_mass_u: float
    n_lines: int
    residual_mean: float | None
    residual_mean_sigma: float | None
    residual_rms: float | None
    constants: Mapping[str, ReferencedValue] = field(default_factory=dict)

    _FIXED = ("reduced_mass_u", "n_lines", "residual_mean", "residual_mean_sigma", "residual_rms")

    def to_dict(self) -> JSON:
        out: JSON = {"reduced_mass_u": self.reduced_mass_u, "n_lines": self.n_lines, "residual_mean": self.residual_mean,
                     "residual_mean_sigma": self.residual_mean_sigma, "residual_rms": self.residual_rms}
        out.update({name: value.to_dict() for name, value in self.constants.items()})
        return out

    @classmethod
    def from_dict(cls, data: Any, where: str = "per_isotopologue") -> MassReducedMember:
        data = _table(data, where)
        constants = {str(name): ReferencedValue.from_dict(item, f"{where}.{name}")
                     for name, item in data.items() if name not in cls._FIXED}
        return cls(data.get("reduced_mass_u", math.nan), data.get("n_lines", 0), data.get("residual_mean"),
                   data.get("residual_mean_sigma"), data.get("residual_rms"), constants)


@dataclass(frozen=True)
class MassReducedFit:
    """U_kl of one molecule across its isotopologues."""

    molecule: str
    isotopologues: tuple[str, ...]
    n_lines: int
    rms_cm1: float
    parameters: Mapping[str, Estimate]  # U_kl
    per_isotopologue: Mapping[str, MassReducedMember]
    notes: tuple[str, ...] = ()
    held: Mapping[str, float] = field(default_factory=dict)

    def to_dict(self) -> JSON:
        return {
            "molecule": self.molecule,
            "isotopologues": list(self.isotopologues),
            "n_lines": self.n_lines,
            "rms": self.rms_cm1,
            "parameters": {k: v.to_dict() for k, v in self.parameters.items()},
            "held": dict(self.held),
            "per_isotopologue": {k: v.to_dict() for k, v in self.per_isotopologue.items()},
            "notes": list(self.notes),
        }

    @classmethod
    def from_dict(cls, data: Any, where: str = "mass_reduced") -> MassReducedFit:
        data = _table(data, where)
        parameters = {}
        for name, item in _table(data.get("parameters") or {}, f"{where}.parameters").items():
            estimate = _estimate(item, f"{where}.parameters.{name}")
            if estimate is not None:
                parameters[str(name)] = estimate
        return cls(
            molecule=_required(data, "molecule", where),
            isotopologues=tuple(data.get("isotopologues") or ()),
            n_lines=data.get("n_lines", 0),
            rms_cm1=data.get("rms", math.nan),
            parameters=parameters,
            per_isotopologue={str(label): MassReducedMember.from_dict(item, f"{where}.per_isotopologue.{label}")
                              for label, item in _table(data.get("per_isotopologue") or {}, f"{where}.per_isotopologue").items()},
            notes=tuple(data.get("notes") or ()),
            held=dict(_table(data.get("held") or {}, f"{where}.held")),
        )


# ----------------------------------------------------------------------------- checks
@dataclass(frozen=True)
class CalibrationBand:
    """One band's part in the calibration fit: its origin's offset from its reference."""

    label: str
    offset: float
    sigma: float
    wavenumber_cm1: float
    weight: float = 0.0

    def to_dict(self) -> JSON:
        return {"label": self.label, "offset": self.offset, "sigma": self.sigma, "wavenumber_cm1": self.wavenumber_cm1, "weight": self.weight}

    @classmethod
    def from_dict(cls, data: Any, where: str = "bands") -> CalibrationBand:
        data = _table(data, where)
        return cls(_required(data, "label", where), _required(data, "offset", where), data.get("sigma", math.nan),
                   _required(data, "wavenumber_cm1", where), data.get("weight", 0.0))


@dataclass(frozen=True)
class CalibrationFit:
    """Offset (at `wavenumber_cm1`) and scale of the wavenumber axis from the band references."""

    offset_cm1: float
    offset_sigma_cm1: float
    scale_ppm: float
    scale_sigma_ppm: float
    wavenumber_cm1: float
    chi2_reduced: float | None
    model: str
    bands: tuple[CalibrationBand, ...]

    def to_dict(self) -> JSON:
        return {
            "offset_cm1": self.offset_cm1,
            "offset_sigma_cm1": self.offset_sigma_cm1,
            "scale_ppm": self.scale_ppm,
            "scale_sigma_ppm": self.scale_sigma_ppm,
            "wavenumber_cm1": self.wavenumber_cm1,
            "chi2_reduced": self.chi2_reduced,
            "model": self.model,
            "bands": [band.to_dict() for band in self.bands],
        }

    @classmethod
    def from_dict(cls, data: Any, where: str = "fit") -> CalibrationFit:
        data = _table(data, where)
        return cls(
            _required(data, "offset_cm1", where), data.get("offset_sigma_cm1", math.nan), data.get("scale_ppm", 0.0),
            data.get("scale_sigma_ppm", math.nan), data.get("wavenumber_cm1", math.nan), data.get("chi2_reduced"),
            data.get("model", ""),
            tuple(CalibrationBand.from_dict(item, f"{where}.bands[{i}]") for i, item in enumerate(_items(data.get("bands"), f"{where}.bands"))),
        )


CHECK_STATUSES = ("pass", "warn", "fail", "not_assessed")


@dataclass(frozen=True)
class Check:
    """One run check: pass, warn or fail with a one-line reason and the number behind it, or
    not_assessed when the data cannot answer it."""

    name: str
    status: str  # CHECK_STATUSES
    detail: str
    value: float | None = None
    fit: CalibrationFit | None = None  # the calibration check's offset + scale fit

    def to_dict(self) -> JSON:
        out: JSON = {"name": self.name, "status": self.status, "detail": self.detail, "value": self.value}
        if self.fit is not None:
            out["fit"] = self.fit.to_dict()
        return out

    @classmethod
    def from_dict(cls, data: Any, where: str = "check") -> Check:
        data = _table(data, where)
        fit = data.get("fit")
        return cls(_required(data, "name", where), _required(data, "status", where), data.get("detail", ""), data.get("value"),
                   CalibrationFit.from_dict(fit, f"{where}.fit") if fit is not None else None)


# ----------------------------------------------------------------------------- intensities
TEMPERATURE_MODEL = (
    "Boltzmann plot ln(W / (L_HL nu)) = a_P|R - E''/(k T); sigma adds the shift a first-order "
    "optical-depth term (- kappa W / W_max) makes"
)


@dataclass(frozen=True)
class RotationalTemperature:
    isotopologue: str
    v_upper: int
    v_lower: int
    temperature: Estimate  # K; sigma includes the optical-depth systematic
    n_lines: int
    rms: float  # of ln(W/(L nu)) residuals
    optical_depth: Estimate | None = None  # kappa: relative W deficit of the strongest line
    uncorrected: Estimate | None = None  # the plain Boltzmann plot, statistical sigma only
    model: str = TEMPERATURE_MODEL

    def to_dict(self) -> JSON:
        return {
            "isotopologue": self.isotopologue,
            "v_upper": self.v_upper,
            "v_lower": self.v_lower,
            "temperature_K": self.temperature.to_dict(),
            "n_lines": self.n_lines,
            "rms": self.rms,
            "optical_depth_deficit": _q(self.optical_depth),
            "statistical_temperature_K": _q(self.uncorrected),
            "model": self.model,
        }

    @classmethod
    def from_dict(cls, data: Any, where: str = "rotational_temperatures") -> RotationalTemperature:
        data = _table(data, where)
        temperature = _estimate(_required(data, "temperature_K", where), f"{where}.temperature_K")
        assert temperature is not None
        return cls(_required(data, "isotopologue", where), _required(data, "v_upper", where), _required(data, "v_lower", where),
                   temperature, data.get("n_lines", 0), data.get("rms", math.nan),
                   _estimate(data.get("optical_depth_deficit"), f"{where}.optical_depth_deficit"),
                   _estimate(data.get("statistical_temperature_K"), f"{where}.statistical_temperature_K"),
                   data.get("model", TEMPERATURE_MODEL))


@dataclass(frozen=True)
class AbundanceRatio:
    numerator: str
    denominator: str
    ratio: Estimate  # dimensionless
    natural: float | None
    n_pairs: int
    basis: str

    def to_dict(self) -> JSON:
        return {"numerator": self.numerator, "denominator": self.denominator, "ratio": self.ratio.to_dict(),
                "natural": self.natural, "n_pairs": self.n_pairs, "basis": self.basis}

    @classmethod
    def from_dict(cls, data: Any, where: str = "abundance_ratios") -> AbundanceRatio:
        data = _table(data, where)
        ratio = _estimate(_required(data, "ratio", where), f"{where}.ratio")
        assert ratio is not None
        return cls(_required(data, "numerator", where), _required(data, "denominator", where), ratio, data.get("natural"),
                   data.get("n_pairs", 0), data.get("basis", ""))


@dataclass(frozen=True)
class HydrogenFraction:
    molecule_h: str
    molecule_d: str
    fraction_h: Estimate  # N(H form) / (N(H form) + N(D form))
    n_lines: int
    basis: str

    def to_dict(self) -> JSON:
        return {"molecule_h": self.molecule_h, "molecule_d": self.molecule_d, "hydrogen_fraction": self.fraction_h.to_dict(),
                "n_lines": self.n_lines, "basis": self.basis}

    @classmethod
    def from_dict(cls, data: Any, where: str = "hydrogen_fractions") -> HydrogenFraction:
        data = _table(data, where)
        fraction = _estimate(_required(data, "hydrogen_fraction", where), f"{where}.hydrogen_fraction")
        assert fraction is not None
        return cls(_required(data, "molecule_h", where), _required(data, "molecule_d", where), fraction,
                   data.get("n_lines", 0), data.get("basis", ""))


@dataclass(frozen=True)
class Intensities:
    """Rotational temperatures, abundance ratios, optical depth and hydrogen fractions."""

    temperatures: tuple[RotationalTemperature, ...]
    ratios: tuple[AbundanceRatio, ...]
    optically_thin: bool | None  # None: no isotopologue pair to tell
    thinness: float | None  # measured/natural ratio of the best-measured pair (1 = thin)
    hydrogen_fractions: tuple[HydrogenFraction, ...] = ()
    notes: tuple[str, ...] = ()

    def to_dict(self) -> JSON:
        return {
            "rotational_temperatures": [t.to_dict() for t in self.temperatures],
            "abundance_ratios": [r.to_dict() for r in self.ratios],
            "optically_thin": self.optically_thin,
            "hydrogen_fractions": [h.to_dict() for h in self.hydrogen_fractions],
            "thin_ratio": self.thinness,
            "notes": list(self.notes),
        }

    @classmethod
    def from_dict(cls, data: Any, where: str = "intensities") -> Intensities:
        data = _table(data, where)
        return cls(
            tuple(RotationalTemperature.from_dict(t, f"{where}.rotational_temperatures[{i}]")
                  for i, t in enumerate(_items(data.get("rotational_temperatures"), where))),
            tuple(AbundanceRatio.from_dict(r, f"{where}.abundance_ratios[{i}]")
                  for i, r in enumerate(_items(data.get("abundance_ratios"), where))),
            data.get("optically_thin"),
            data.get("thin_ratio"),
            tuple(HydrogenFraction.from_dict(h, f"{where}.hydrogen_fractions[{i}]")
                  for i, h in enumerate(_items(data.get("hydrogen_fractions"), where))),
            tuple(data.get("notes") or ()),
        )


# ----------------------------------------------------------------------------- baseline
@dataclass(frozen=True)
class FringeSummary:
    period_cm1: float
    amplitude: float
    contrast: float

    def to_dict(self) -> JSON:
        return {"period_cm1": self.period_cm1, "amplitude": self.amplitude, "contrast": self.contrast}

    @classmethod
    def from_dict(cls, data: Any, where: str = "fringes") -> FringeSummary:
        data = _table(data, where)
        return cls(_required(data, "period_cm1", where), _required(data, "amplitude", where), data.get("contrast", math.nan))


@dataclass(frozen=True)
class SaturatedRegion:
    first_cm1: float
    last_cm1: float
    peak_absorbance: float
    reason: str

    def to_dict(self) -> JSON:
        return {"first_cm1": self.first_cm1, "last_cm1": self.last_cm1, "peak_absorbance": self.peak_absorbance, "reason": self.reason}

    @classmethod
    def from_dict(cls, data: Any, where: str = "saturated_regions") -> SaturatedRegion:
        data = _table(data, where)
        return cls(_required(data, "first_cm1", where), _required(data, "last_cm1", where),
                   data.get("peak_absorbance", math.nan), data.get("reason", ""))


@dataclass(frozen=True)
class BaselineSummary:
    """The baseline and noise as measured: per-point sigma, its correlation, rounding grid,
    fringes, offset and tilt, saturated regions."""

    noise_sigma: float
    noise_correlation_points: float | None
    quantization_step: float | None
    quantization_floor: float | None
    noise_measurable: bool | None
    noise_description: str | None
    fringes: FringeSummary | None
    offset_median: float
    tilt_per_1000_cm1: float
    line_free_fraction: float
    usable_absorbance: float
    saturated_regions: tuple[SaturatedRegion, ...] = ()

    def to_dict(self) -> JSON:
        return {
            "noise_sigma": self.noise_sigma,
            "noise_correlation_points": self.noise_correlation_points,
            "quantization_step": self.quantization_step,
            "quantization_floor": self.quantization_floor,
            "noise_measurable": self.noise_measurable,
            "noise_description": self.noise_description,
            "fringes": self.fringes.to_dict() if self.fringes is not None else None,
            "offset_median": self.offset_median,
            "tilt_per_1000_cm1": self.tilt_per_1000_cm1,
            "line_free_fraction": self.line_free_fraction,
            "usable_absorbance": self.usable_absorbance,
            "saturated_regions": [r.to_dict() for r in self.saturated_regions],
        }

    @classmethod
    def from_dict(cls, data: Any, where: str = "baseline") -> BaselineSummary:
        data = _table(data, where)
        fringes = data.get("fringes")
        return cls(
            data.get("noise_sigma", math.nan), data.get("noise_correlation_points"), data.get("quantization_step"),
            data.get("quantization_floor"), data.get("noise_measurable"), data.get("noise_description"),
            FringeSummary.from_dict(fringes, f"{where}.fringes") if fringes is not None else None,
            data.get("offset_median", math.nan), data.get("tilt_per_1000_cm1", math.nan), data.get("line_free_fraction", math.nan),
            data.get("usable_absorbance", math.nan),
            tuple(SaturatedRegion.from_dict(r, f"{where}.saturated_regions[{i}]")
                  for i, r in enumerate(_items(data.get("saturated_regions"), f"{where}.saturated_regions"))),
        )


# ----------------------------------------------------------------------------- contours
@dataclass(frozen=True)
class BandContour:
    """An unresolved band seen as its P and R branch contours."""

    isotopologue: str
    v_upper: int
    v_lower: int
    p_max_cm1: float
    r_max_cm1: float
    line_spacing_cm1: float  # 2 B'' near the band centre (library)
    resolution_fwhm_cm1: float  # of the instrument line shape used
    origin: Estimate
    B_lower: Estimate  # from the contour fit
    temperature_K: float
    model: str

    @property
    def label(self) -> str:
        return f"{self.isotopologue} {self.v_upper}-{self.v_lower}"

    @property
    def separation_cm1(self) -> float:
        return self.r_max_cm1 - self.p_max_cm1

    def to_dict(self) -> JSON:
        return {
            "isotopologue": self.isotopologue,
            "v_upper": self.v_upper,
            "v_lower": self.v_lower,
            "p_max_cm1": self.p_max_cm1,
            "r_max_cm1": self.r_max_cm1,
            "separation_cm1": self.separation_cm1,
            "line_spacing_cm1": self.line_spacing_cm1,
            "resolution_fwhm_cm1": self.resolution_fwhm_cm1,
            "origin": self.origin.to_dict(),
            "B_lower": self.B_lower.to_dict(),
            "temperature_K": self.temperature_K,
            "model": self.model,
        }

    @classmethod
    def from_dict(cls, data: Any, where: str = "contours") -> BandContour:
        data = _table(data, where)
        origin = _estimate(_required(data, "origin", where), f"{where}.origin")
        B_lower = _estimate(_required(data, "B_lower", where), f"{where}.B_lower")
        assert origin is not None and B_lower is not None
        return cls(_required(data, "isotopologue", where), _required(data, "v_upper", where), _required(data, "v_lower", where),
                   _required(data, "p_max_cm1", where), _required(data, "r_max_cm1", where), data.get("line_spacing_cm1", math.nan),
                   data.get("resolution_fwhm_cm1", math.nan), origin, B_lower, data.get("temperature_K", math.nan), data.get("model", ""))


# ----------------------------------------------------------------------------- the run
RUN_STATUSES = ("processed", "unreadable", "failed")


@dataclass(frozen=True)
class NonFinite:
    """Where a value that was not finite was written as null, and what it was."""

    at: str
    was: str  # "inf" | "-inf" | "nan"

    def to_dict(self) -> JSON:
        return {"at": self.at, "was": self.was}


@dataclass(frozen=True)
class RunResult:
    """Everything bandwatch concluded about one file.

    The analysis part (`species_found` to `contours`) is None for a file that was not analysed
    (unreadable, failed) and then left out of the JSON."""

    file: str
    status: str  # RUN_STATUSES
    sha256: str | None = None
    error: str | None = None
    spectrum: SpectrumSummary | None = None
    lines: tuple[Line, ...] = ()
    bands: tuple[Band, ...] = ()
    constants: tuple[IsotopologueConstants, ...] = ()
    checks: tuple[Check, ...] = ()
    verdict: str | None = None
    species_found: tuple[str, ...] | None = None
    notes: tuple[str, ...] | None = None
    band_shifts_cm1: Mapping[str, float] | None = None
    timing_ms: Mapping[str, float] | None = None
    baseline: BaselineSummary | None = None
    mass_reduced: tuple[MassReducedFit, ...] | None = None
    intensities: Intensities | None = None
    contours: tuple[BandContour, ...] | None = None
    non_finite: tuple[NonFinite, ...] = ()

    @property
    def species(self) -> tuple[str, ...]:
        """Isotopologues found: `species_found`, else those of the bands, constants and lines."""
        found = list(self.species_found or ())
        found += [band.isotopologue for band in self.bands]
        found += [entry.isotopologue for entry in self.constants]
        found += [line.assigned.isotopologue for line in self.lines if line.assigned is not None]
        return tuple(dict.fromkeys(label for label in found if label))

    def band(self, isotopologue: str, v_upper: int, v_lower: int) -> Band | None:
        return next((b for b in self.bands if (b.isotopologue, b.v_upper, b.v_lower) == (isotopologue, v_upper, v_lower)), None)

    def to_dict(self) -> JSON:
        """The public JSON object (`schema` 1). Keys may be added, never renamed or dropped."""
        out: JSON = {
            "schema": SCHEMA_VERSION,
            "file": self.file,
            "sha256": self.sha256,
            "status": self.status,
            "error": self.error,
            "spectrum": self.spectrum.to_dict() if self.spectrum is not None else None,
            "lines": [line.to_dict() for line in self.lines],
            "bands": [band.to_dict() for band in self.bands],
            "constants": [entry.to_dict() for entry in self.constants],
            "checks": [check.to_dict() for check in self.checks],
            "verdict": self.verdict,
        }
        if self.species_found is not None:
            out["species_found"] = list(self.species_found)
        if self.notes is not None:
            out["notes"] = list(self.notes)
        if self.band_shifts_cm1 is not None:
            out["band_shifts_cm1"] = dict(self.band_shifts_cm1)
        if self.timing_ms is not None:
            out["timing_ms"] = dict(self.timing_ms)
        if self.baseline is not None:
            out["baseline"] = self.baseline.to_dict()
        if self.mass_reduced is not None:
            out["mass_reduced"] = [fit.to_dict() for fit in self.mass_reduced]
        if self.intensities is not None:
            out["intensities"] = self.intensities.to_dict()
        if self.contours is not None:
            out["contours"] = [contour.to_dict() for contour in self.contours]
        if self.non_finite:
            out["non_finite"] = [item.to_dict() for item in self.non_finite]
        return out

    @classmethod
    def from_dict(cls, data: Any) -> RunResult:
        """A RunResult from its JSON object; raises ResultFormatError naming the place of
        anything that is not of the public shape."""
        data = _table(data, "result")
        schema = data.get("schema", SCHEMA_VERSION)
        if schema != SCHEMA_VERSION:
            raise ResultFormatError(f"result: schema {schema!r}, this bandwatch reads {SCHEMA_VERSION}")
        spectrum = data.get("spectrum")

        def listed(key: str, reader: Any) -> tuple[Any, ...]:
            return tuple(reader(item, f"{key}[{i}]") for i, item in enumerate(_items(data.get(key), key)))

        def optional_list(key: str, reader: Any) -> tuple[Any, ...] | None:
            return listed(key, reader) if key in data and data[key] is not None else None

        def optional_strings(key: str) -> tuple[str, ...] | None:
            return tuple(data[key]) if key in data and data[key] is not None else None

        baseline = data.get("baseline")
        intensities = data.get("intensities")
        return cls(
            file=_required(data, "file", "result"),
            status=_required(data, "status", "result"),
            sha256=data.get("sha256"),
            error=data.get("error"),
            spectrum=SpectrumSummary.from_dict(spectrum) if spectrum is not None else None,
            lines=listed("lines", Line.from_dict),
            bands=listed("bands", Band.from_dict),
            constants=listed("constants", IsotopologueConstants.from_dict),
            checks=listed("checks", Check.from_dict),
            verdict=data.get("verdict"),
            species_found=optional_strings("species_found"),
            notes=optional_strings("notes"),
            band_shifts_cm1=dict(_table(data["band_shifts_cm1"], "band_shifts_cm1")) if data.get("band_shifts_cm1") is not None else None,
            timing_ms=dict(_table(data["timing_ms"], "timing_ms")) if data.get("timing_ms") is not None else None,
            baseline=BaselineSummary.from_dict(baseline) if baseline is not None else None,
            mass_reduced=optional_list("mass_reduced", MassReducedFit.from_dict),
            intensities=Intensities.from_dict(intensities) if intensities is not None else None,
            contours=optional_list("contours", BandContour.from_dict),
            non_finite=tuple(NonFinite(str(item.get("at", "")), str(item.get("was", "")))
                             for item in _items(data.get("non_finite"), "non_finite") if isinstance(item, Mapping)),
        )


def to_json(result: RunResult) -> str:
    """The result as strict JSON text (one line): what `--json` prints, the ledger stores and
    result.json holds. Encode once and share the text."""
    return strict_json.dumps_result(result.to_dict())


def from_json(text: str | bytes) -> RunResult:
    """A RunResult from its JSON text."""
    try:
        data = json.loads(text)
    except ValueError as error:
        raise ResultFormatError(f"result: not JSON ({error})") from None
    return RunResult.from_dict(data)
