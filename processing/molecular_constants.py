"""Molecular constants from all of a run's assigned lines, each beside the reference for the
model that was fitted.

Per isotopologue: one Dunham term-value fit of the lines and sigmas its band fits used (see
`dunham_fit`), giving B_e, alpha_e (two or more vibrational levels), gamma_e, D_e, beta_e,
H_e where determined, and omega_e, omega_e x_e when three or more vibrational levels are seen
(fundamental + overtone, or a hot band). Every term the data cannot float is held at the
library's value, its uncertainty propagated ("held"). Derived quantities, each labelled with
the model it assumes:
- r_e = sqrt(h / (8 pi^2 c mu B_e)) (rigid-rotor definition with the Dunham Y01 as B_e);
- k_e = mu (2 pi c omega_e)^2 (harmonic force constant);
- zero-point energy G(0) = sum_k Y_k0 / 2^k (Dunham, Y00 omitted);
- Morse dissociation energy D_e = omega_e^2 / (4 omega_e x_e), and D_0 = D_e - G(0).

Comparisons (one rule for everything, see `model_reference`): each fitted quantity against
what the same model gives on the library's own positions of the same lines, that reference
shown beside it, the handbook (library) value and the model named alongside. Band fits get
the same for their origins, B, D and H values.

Consistency diagnostics: Kratzer D_e ~ 4 B_e^3 / omega_e^2 and Pekeris alpha_e ~
6 sqrt(omega_e x_e B_e^3)/omega_e - 6 B_e^2/omega_e (the latter only good to 5-20%).
Mass-reduced fit per molecule: U_kl with Y_kl = U_kl mu^-(k/2+l); mean residuals per
isotopologue beyond their noise indicate Born-Oppenheimer breakdown.
"""
from __future__ import annotations

import functools
import math
from dataclasses import dataclass
from typing import TYPE_CHECKING, Callable

import numpy as np

from processing.dunham_fit import AssignedLines, TermFit, fit_terms, term_columns
from processing.errors import UnknownSpeciesError
from processing.estimate import Estimate
from processing.levels import CONSTANT_TO_DUNHAM, band_origin, centrifugal_constant, rotational_constant, sextic_constant, upper_J
from processing.library_uncertainty import library_parameters, predicted_lines
from processing.model_reference import Compared, FittedModel, fitted_model
from processing.results import (
    Comparison,
    DerivedQuantity,
    HeldTerm,
    IsotopologueConstants,
    MassReducedFit,
    MassReducedMember,
    ReferencedValue,
    Relation,
)
from processing.species import Isotopologue
from processing.physical_constants import (
    CM1_TO_EV,
    CM1_TO_KJ_PER_MOL,
    bond_length_angstrom,
    force_constant_n_per_m,
)

if TYPE_CHECKING:
    from processing.fit import BandFit
    from processing.pipeline import Analysis
    from processing.species import Library

# Dunham term -> (constant name, sign): constant = sign * Y_kl
CONSTANT_OF_TERM: dict[tuple[int, int], tuple[str, float]] = {
    (k, l): (name, sign) for name, (k, l, sign) in CONSTANT_TO_DUNHAM.items() if name != "omega_e_z_e"
}
NAME_OF_TERM: dict[tuple[int, int], tuple[str, float]] = {(k, l): (name, sign) for name, (k, l, sign) in CONSTANT_TO_DUNHAM.items()}
COMPARED = ("omega_e", "omega_e_x_e", "omega_e_y_e", "B_e", "alpha_e", "gamma_e", "D_e", "beta_e", "H_e", "r_e")
# Born-Oppenheimer breakdown between H and D forms: ~0.05-0.3 cm-1 in omega_e, ~3e-4 cm-1 in
# B_e (calc); a mass-reduced fit without such terms carries them as a systematic on the
# deuterated form's band origins and rotational constants.
BORN_OPPENHEIMER_OMEGA_CM1 = 0.1
BORN_OPPENHEIMER_B_CM1 = 3e-4
# a mean residual per isotopologue beyond this many standard errors is not noise
RESIDUAL_MEAN_LIMIT = 3.0


def make_comparison(name: str, compared: Compared, unit: str, handbook: float | None, source: str, model: str) -> Comparison | None:
    """A Comparison from a `Compared` quantity (None without a reference)."""
    if compared.reference is None:
        return None
    difference = compared.value - compared.reference
    percent = 100.0 * difference / compared.reference if compared.reference else float("nan")
    return Comparison(
        name=name,
        fitted=Estimate(compared.value, compared.sigma, unit),
        reference=compared.reference,
        source=source,
        difference=difference,
        difference_percent=percent,
        z=compared.z,
        effective_reference=compared.reference,
        effective_z=compared.z,
        effective_rule=model,
        reference_sigma=compared.reference_sigma,
        combined_sigma=compared.combined_sigma,
        handbook=handbook,
        model=model,
    )


@dataclass(frozen=True)
class BandReference:
    """A band fit's parameters against the reference for its model (see `model_reference`)."""

    isotopologue: str
    v_upper: int
    v_lower: int
    model: FittedModel
    comparisons: tuple[Comparison, ...]

    @property
    def key(self) -> tuple[str, int, int]:
        return (self.isotopologue, self.v_upper, self.v_lower)


# ------------------------------------------------------------------------------ line table
BandRows = dict[int, tuple[np.ndarray, np.ndarray]]


# a band's table of library rows covers J'' up to a multiple of this (one table serves most runs)
_TABLE_J_STEP = 32


@functools.lru_cache(maxsize=64)
def _band_line_table(library: Library, label: str, v_upper: int, v_lower: int, j_max: int) -> tuple[np.ndarray, np.ndarray]:
    """The library's positions and d/d(theta) rows of every line of a band with J'' <= j_max:
    row 2 J'' is the P line (J' = J'' - 1), row 2 J'' + 1 the R line (cached: the library
    fixes them, and a run's bands come back in the next run)."""
    J_lower = np.repeat(np.arange(j_max + 1, dtype=np.int64), 2)
    J_upper = J_lower + np.tile(np.array([-1, 1], dtype=np.int64), j_max + 1)
    n = J_lower.size
    positions, jacobian = predicted_lines(library, label, np.full(n, v_upper), J_upper, np.full(n, v_lower), J_lower)
    positions.flags.writeable = False
    jacobian.flags.writeable = False
    return positions, jacobian


def _band_rows(library: Library, label: str, v_upper: int, v_lower: int, J_upper: np.ndarray, J_lower: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """The library's positions of a band's lines and their d/d(theta) rows (from the band's
    table: the same numbers `predicted_lines` gives line by line)."""
    J_upper = np.asarray(J_upper, dtype=np.int64)
    J_lower = np.asarray(J_lower, dtype=np.int64)
    n = J_lower.size
    if n == 0 or J_lower.min() < 0 or np.any(np.abs(J_upper - J_lower) != 1):
        return predicted_lines(library, label, np.full(n, v_upper), J_upper, np.full(n, v_lower), J_lower)
    j_max = _TABLE_J_STEP * (int(J_lower.max()) // _TABLE_J_STEP + 1)
    positions, jacobian = _band_line_table(library, label, int(v_upper), int(v_lower), j_max)
    row = 2 * J_lower + (J_upper > J_lower)
    return positions[row], jacobian[row]


def band_library_rows(analysis: Analysis, library: Library) -> BandRows:
    """Per band fit (by its index in the assignment), the library's positions of all its lines
    and their d/d(theta) rows: worked out once, for the band's own reference and for every term
    fit of the lines it used."""
    known = {iso.label for iso in library.isotopologues()}
    rows: BandRows = {}
    for i, band in enumerate(analysis.assignment.bands):
        if band.isotopologue in known:
            rows[i] = _band_rows(library, band.isotopologue, band.v_upper, band.v_lower, upper_J(band.branch, band.J_lower), band.J_lower)
    return rows


def assigned_lines_from(analysis: Analysis, library: Library, band_rows: BandRows | None = None) -> AssignedLines:
    """The lines each band fit used, with the positions and uncertainties it used (blend
    pulls removed, doublet-measured sigmas, saturated/blended lines widened as it widened
    them): two fits of the same lines see the same numbers. With `band_rows` (from
    `band_library_rows`) the lines carry their library rows."""
    masses = {iso.label: iso.reduced_mass_u for iso in library.isotopologues()}
    parts = []
    rows = []
    for i, band in enumerate(analysis.assignment.bands):
        if band.isotopologue not in masses:
            continue
        used = np.flatnonzero(band.used)
        sigma = band.sigma if band.sigma is not None else np.full(band.observed.size, 1e-3)
        J_up = upper_J(band.branch, band.J_lower)
        parts.append((np.full(used.size, band.isotopologue, dtype=object), np.full(used.size, masses[band.isotopologue], dtype=np.float64),
                      np.full(used.size, band.v_upper, dtype=np.int64), np.full(used.size, band.v_lower, dtype=np.int64),
                      np.asarray(J_up, dtype=np.int64)[used], np.asarray(band.J_lower, dtype=np.int64)[used],
                      np.asarray(band.observed, dtype=np.float64)[used], np.asarray(sigma, dtype=np.float64)[used]))
        if band_rows is not None:
            positions, jacobian = band_rows[i]
            rows.append((positions[used], jacobian[used]))
    sigma_known = bool(analysis.lines.sigma_known)
    if not parts:
        empty = np.zeros(0)
        return AssignedLines(np.array([], dtype=object), empty, empty.astype(int), empty.astype(int), empty.astype(int), empty.astype(int), empty, empty, sigma_known)
    columns = [np.concatenate(column) for column in zip(*parts)]
    library_rows = None
    if band_rows is not None:
        library_rows = (np.concatenate([r[0] for r in rows]), np.concatenate([r[1] for r in rows]))
    return AssignedLines(*columns, sigma_known=sigma_known, library_rows=library_rows)


# ------------------------------------------------------------------------ model references
def _library_rows(library: Library, lines: AssignedLines) -> tuple[np.ndarray, np.ndarray]:
    """Library positions of every line (each with its own isotopologue's constants) and their
    d/d(theta) rows (those the lines carry, when they do)."""
    if lines.library_rows is not None:
        return lines.library_rows
    parameters = library_parameters(library)
    positions = np.zeros(lines.count)
    jacobian = np.zeros((lines.count, parameters.size))
    for label in set(lines.isotopologue.tolist()):
        mine = lines.isotopologue == label
        p, j = predicted_lines(library, label, lines.v_upper[mine], lines.J_upper[mine], lines.v_lower[mine], lines.J_lower[mine])
        positions[mine] = p
        jacobian[mine] = j
    return positions, jacobian


def _term_model(term_fit: TermFit, lines: AssignedLines, library: Library | None, reference_label: str | None,
                systematic: np.ndarray | None = None) -> FittedModel:
    """The term fit as a FittedModel: held terms with their library gradients, and the model
    reference on the library's positions of the same lines."""
    prefix = "U" if term_fit.mass_reduced else "Y"
    held_terms = list(term_fit.held)
    held_names = tuple(prefix + f"{k}{l}" for k, l in held_terms)
    held_values = np.array([term_fit.held[t] for t in held_terms])
    columns = term_columns(lines, held_terms, term_fit.mass_reduced)
    if library is None or reference_label is None:
        return fitted_model(term_fit.fit, None, held_names=held_names, held_columns=columns, held_values=held_values, systematic=systematic)
    parameters = library_parameters(library)
    gradients = parameters.dunham_gradient(reference_label)
    scale = library.isotopologue(reference_label).reduced_mass_u if term_fit.mass_reduced else 1.0
    held_gradients = np.array([
        gradients.get(t, np.zeros(parameters.size)) * scale ** (t[0] / 2 + t[1]) for t in held_terms
    ]).reshape(len(held_terms), parameters.size)
    positions, jacobian = _library_rows(library, lines)
    return fitted_model(term_fit.fit, parameters, positions, jacobian, held_names, columns, held_values, held_gradients, systematic)


def _term_getter(model: FittedModel, prefix: str = "Y") -> Callable[[np.ndarray, int, int], float]:
    indices = {name: i for i, name in enumerate(model.names)}

    def term(values: np.ndarray, k: int, l: int) -> float:
        i = indices.get(f"{prefix}{k}{l}")
        return 0.0 if i is None else float(values[i])

    return term


def _term_weights(model: FittedModel, coefficients: dict[tuple[int, int], float], prefix: str = "Y") -> np.ndarray:
    """Weights over the model's parameters of sum coefficient * Y_kl (terms the model lacks
    contribute nothing, as `_term_getter` reads them)."""
    weights = np.zeros(len(model.names))
    for (k, l), coefficient in coefficients.items():
        i = model.index(f"{prefix}{k}{l}")
        if i is not None:
            weights[i] += coefficient
    return weights


def _model_text(term_fit: TermFit) -> str:
    prefix = "U" if term_fit.mass_reduced else "Y"
    floated = ", ".join(prefix + f"{k}{l}" for k, l in term_fit.terms)
    held = ", ".join(prefix + f"{k}{l}" for k, l in term_fit.held)
    levels = ",".join(str(v) for v in term_fit.vibrational_levels)
    text = f"Dunham term values of levels v = {levels}: floated {floated}"
    return text + (f"; held at library values {held}" if held else "")


# ------------------------------------------------------------------------ per isotopologue
def constants_for_isotopologue(lines: AssignedLines, isotopologue: Isotopologue, library: Library | None = None) -> IsotopologueConstants:
    """Fit one isotopologue's lines; derive its constants and compare each with the reference
    for the model fitted."""
    fallback = dict(isotopologue.dunham) if library is not None else {}
    term_fit = fit_terms(lines, fallback=fallback)
    model = _term_model(term_fit, lines, library, isotopologue.label if library is not None else None)
    term = _term_getter(model)
    levels = term_fit.vibrational_levels
    vibration_determined = len(levels) >= 3
    model_text = _model_text(term_fit)
    notes: list[str] = []
    if not vibration_determined:
        notes.append("omega_e and omega_e x_e need two vibrational intervals (e.g. fundamental + overtone)")
    if term_fit.held:
        notes.append(
            "held at the library's values (not determined by these lines): "
            + ", ".join(NAME_OF_TERM.get(t, (f"Y{t[0]}{t[1]}", 1.0))[0] for t in term_fit.held)
        )

    constants: dict[str, Estimate | None] = {name: None for name in COMPARED}
    comparisons: list[Comparison] = []
    floated = set(term_fit.terms)
    for (k, l), (name, sign) in CONSTANT_OF_TERM.items():
        if (k, l) not in floated or (k >= 1 and l == 0 and not vibration_determined):
            continue
        compared = model.linear(_term_weights(model, {(k, l): sign}))
        constants[name] = Estimate(compared.value, compared.sigma)
        handbook = isotopologue.reference.get(name)
        comparison = make_comparison(name, compared, "cm-1", handbook.value if handbook else None, _source(isotopologue, name), model_text)
        if comparison is not None:
            comparisons.append(comparison)

    mu = isotopologue.reduced_mass_u
    r_e = model.quantity(lambda p: bond_length_angstrom(term(p, 0, 1), mu))
    constants["r_e"] = Estimate(r_e.value, r_e.sigma, "angstrom")
    r_handbook = isotopologue.reference.get("r_e_angstrom")
    comparison = make_comparison("r_e", r_e, "angstrom", r_handbook.value if r_handbook else None, _source(isotopologue, "r_e_angstrom"),
                                 model_text + "; r_e = sqrt(h / (8 pi^2 c mu B_e)) from B_e")
    if comparison is not None:
        comparisons.append(comparison)

    band_origins: dict[str, Estimate] = {}
    origin_comparisons: list[Comparison] = []
    for v_upper, v_lower in sorted(set(zip(lines.v_upper.tolist(), lines.v_lower.tolist()))):
        label = f"{v_upper}-{v_lower}"
        compared = model.linear(_term_weights(model, {(k, 0): (v_upper + 0.5) ** k - (v_lower + 0.5) ** k for k in range(1, 5)}))
        band_origins[label] = Estimate(compared.value, compared.sigma)
        comparison = make_comparison(label, compared, "cm-1", _library_origin(isotopologue, v_upper, v_lower), _source(isotopologue, "omega_e"), model_text)
        if comparison is not None:
            origin_comparisons.append(comparison)
    B_v: dict[int, Estimate] = {}
    B_v_comparisons: list[Comparison] = []
    for v in levels:
        compared = model.linear(_term_weights(model, {(k, 1): (v + 0.5) ** k for k in range(4)}))
        B_v[v] = Estimate(compared.value, compared.sigma)
        comparison = make_comparison(f"B_{v}", compared, "cm-1", _library_level(isotopologue, v)[0], _source(isotopologue, "B_e"), model_text)
        if comparison is not None:
            B_v_comparisons.append(comparison)

    derived = _derived(model, term, mu) if vibration_determined else {}
    diagnostics = _diagnostics(constants, isotopologue)
    dunham = {name: Estimate(float(term_fit.fit.values[i]), float(term_fit.fit.sigmas[i])) for i, name in enumerate(term_fit.names)}
    covariance = model.covariance()
    held: dict[str, HeldTerm] = {}
    for t, value in term_fit.held.items():
        name, sign = NAME_OF_TERM.get(t, (f"Y{t[0]}{t[1]}", 1.0))
        i = model.index(f"Y{t[0]}{t[1]}")
        sigma = math.sqrt(max(covariance[i, i], 0.0)) if i is not None else None
        held[name] = HeldTerm(sign * value, sigma, _source(isotopologue, name))
    return IsotopologueConstants(
        isotopologue=isotopologue.label,
        n_lines=int(term_fit.fit.used.sum()),
        vibrational_levels=levels,
        rms_cm1=term_fit.fit.rms,
        constants=constants,
        band_origins=band_origins,
        B_v=B_v,
        derived=derived,
        comparisons=tuple(comparisons),
        diagnostics=diagnostics,
        dunham=dunham,
        correlation=tuple(tuple(row) for row in np.round(term_fit.fit.correlation, 6).tolist()),
        notes=tuple(notes),
        held=held,
        origin_comparisons=tuple(origin_comparisons),
        B_v_comparisons=tuple(B_v_comparisons),
        model=model_text,
        chi2_reduced=None if not np.isfinite(term_fit.fit.chi2_reduced) else float(term_fit.fit.chi2_reduced),
    )


@functools.lru_cache(maxsize=256)
def _library_origin(isotopologue: Isotopologue, v_upper: int, v_lower: int) -> float:
    """The library's origin of a band (cached: the isotopologue's constants fix it)."""
    return band_origin(isotopologue.dunham, v_upper, v_lower)


@functools.lru_cache(maxsize=256)
def _library_level(isotopologue: Isotopologue, v: int) -> tuple[float, float, float]:
    """The library's B_v, D_v and H_v of one vibrational level (cached as `_library_origin`)."""
    dunham = isotopologue.dunham
    return rotational_constant(dunham, v), centrifugal_constant(dunham, v), sextic_constant(dunham, v)


def _source(isotopologue: Isotopologue, name: str) -> str:
    reference = isotopologue.reference.get(name)
    if reference is not None:
        return reference.source
    return f"mass-scaled from {isotopologue.derived_from}" if isotopologue.derived_from else "library"


def _vibrational_term(values: np.ndarray, term: Callable[[np.ndarray, int, int], float], v: int) -> float:
    return sum(term(values, k, 0) * (v + 0.5) ** k for k in range(1, 5))


def _derived(model: FittedModel, term: Callable[[np.ndarray, int, int], float], mu: float) -> dict[str, DerivedQuantity]:
    """k_e, zero-point energy and the Morse figures, each with its model reference and z."""

    def omega(p: np.ndarray) -> float:
        return term(p, 1, 0)

    def omega_x(p: np.ndarray) -> float:
        return -term(p, 2, 0)

    def zero_point(p: np.ndarray) -> float:
        return _vibrational_term(p, term, 0)

    def entry(compared: Compared, unit: str, model_text: str, value_eV: float | None = None,
              value_kJ_per_mol: float | None = None) -> DerivedQuantity:
        return DerivedQuantity(compared.value, compared.sigma, unit, model_text, compared.reference, compared.reference_sigma,
                               compared.z, value_eV, value_kJ_per_mol)

    out: dict[str, DerivedQuantity] = {}
    out["k_e"] = entry(model.quantity(lambda p: force_constant_n_per_m(omega(p), mu)), "N/m", "harmonic: k_e = mu (2 pi c omega_e)^2")
    out["zero_point_energy"] = entry(model.quantity(zero_point), "cm-1", "Dunham G(0) = sum_k Y_k0 / 2^k, held terms included (Y00 omitted)")
    if omega_x(model.values) > 0:
        morse = model.quantity(lambda p: omega(p) ** 2 / (4 * omega_x(p)))
        out["morse_dissociation_energy"] = entry(
            morse, "cm-1", "Morse potential: D_e = omega_e^2 / (4 omega_e x_e) (overestimates real D_e)",
            value_eV=morse.value * CM1_TO_EV, value_kJ_per_mol=morse.value * CM1_TO_KJ_PER_MOL,
        )
        d0 = model.quantity(lambda p: omega(p) ** 2 / (4 * omega_x(p)) - zero_point(p))
        out["morse_D0"] = entry(d0, "cm-1", "Morse D_e minus the zero-point energy", value_eV=d0.value * CM1_TO_EV)
    return out


def _library_value(isotopologue: Isotopologue, name: str) -> float | None:
    """A library constant (or r_e from the library's B_e) for diagnostics."""
    if name == "r_e":
        B_e = isotopologue.dunham.get((0, 1))
        return bond_length_angstrom(B_e, isotopologue.reduced_mass_u) if B_e else None
    if name not in CONSTANT_TO_DUNHAM:
        return None
    k, l, sign = CONSTANT_TO_DUNHAM[name]
    value = isotopologue.dunham.get((k, l))
    return None if value is None else sign * value


def _diagnostics(constants: dict[str, Estimate | None], isotopologue: Isotopologue) -> dict[str, Relation]:
    """Kratzer and Pekeris relations, with fitted values where the run has them."""
    out: dict[str, Relation] = {}
    B_e = constants["B_e"].value if constants.get("B_e") else None
    omega = constants["omega_e"].value if constants.get("omega_e") else _library_value(isotopologue, "omega_e")
    omega_source = "fitted" if constants.get("omega_e") else "library"
    omega_x = constants["omega_e_x_e"].value if constants.get("omega_e_x_e") else _library_value(isotopologue, "omega_e_x_e")
    if B_e and omega:
        kratzer = 4 * B_e**3 / omega**2
        D_fit = constants.get("D_e")
        out["kratzer"] = Relation("D_e ~ 4 B_e^3 / omega_e^2", "D_e", kratzer, D_fit.value if D_fit else None,
                                  (D_fit.value / kratzer) if D_fit else None, omega_source)
    if B_e and omega and omega_x and omega_x > 0:
        pekeris = 6 * math.sqrt(omega_x * B_e**3) / omega - 6 * B_e**2 / omega
        alpha = constants.get("alpha_e")
        out["pekeris"] = Relation("alpha_e ~ 6 sqrt(omega_e x_e B_e^3)/omega_e - 6 B_e^2/omega_e (Morse; 5-20%)", "alpha_e",
                                  pekeris, alpha.value if alpha else None, (alpha.value / pekeris) if alpha else None, omega_source)
    return out


# --------------------------------------------------------------------------- band fits
def band_reference(fit: BandFit, library: Library, rows: tuple[np.ndarray, np.ndarray] | None = None) -> BandReference | None:
    """A band fit's origin, B, D and H against the same band model fitted to the library's
    positions of the same lines (None for a band the library does not know). `rows`: the
    library's positions of the band's lines and their d/d(theta) rows, when already known."""
    if fit.linear_fit is None:
        return None
    try:
        isotopologue = library.isotopologue(fit.isotopologue)
    except UnknownSpeciesError:
        return None
    n = fit.observed.size
    J_up = upper_J(fit.branch, fit.J_lower)
    if rows is None:
        rows = predicted_lines(library, isotopologue.label, np.full(n, fit.v_upper), J_up, np.full(n, fit.v_lower), fit.J_lower)
    positions, jacobian = rows
    held = {}
    if any(fit.held):
        x_up, x_low = J_up * (J_up + 1.0), fit.J_lower * (fit.J_lower + 1.0)
        held = dict(held_names=("D_upper (held)", "D_lower (held)", "H_upper (held)", "H_lower (held)"),
                    held_columns=np.column_stack([-(x_up**2), x_low**2, x_up**3, -(x_low**3)]),
                    held_values=np.array(fit.held, dtype=np.float64))
    model = fitted_model(fit.linear_fit, library_parameters(library), positions, jacobian, **held)
    upper, lower = _library_level(isotopologue, fit.v_upper), _library_level(isotopologue, fit.v_lower)
    model_text = f"band model ({fit.d_model}, {fit.h_model}) fitted to the library's positions of the same {fit.n_lines} lines"
    library_values = {
        "origin": _library_origin(isotopologue, fit.v_upper, fit.v_lower),
        "B_upper": upper[0],
        "B_lower": lower[0],
        "D_upper": upper[1],
        "D_lower": lower[1],
        "H_upper": upper[2],
        "H_lower": lower[2],
    }
    aliases = {"D_upper": "D", "D_lower": "D", "H_upper": "H", "H_lower": "H"}
    comparisons = []
    for name, handbook in library_values.items():
        parameter = name if name in model.names else aliases.get(name)
        if parameter not in model.names:
            continue
        compared = model.parameter(parameter)
        comparison = make_comparison(name, compared, "cm-1", handbook, _source(isotopologue, "B_e" if name != "origin" else "omega_e"), model_text)
        if comparison is not None:
            comparisons.append(comparison)
    return BandReference(fit.isotopologue, fit.v_upper, fit.v_lower, model, tuple(comparisons))


# --------------------------------------------------------------------------- mass-reduced
def _main_label(labels: list[str], library: Library) -> str:
    """The isotopologue whose library constants stand for the molecule: a tabulated one,
    the most abundant first."""
    entries = [library.isotopologue(label) for label in labels]
    return max(entries, key=lambda e: (e.derived_from is None, e.abundance)).label


def mass_reduced_fit(lines: AssignedLines, molecule: str, library: Library | None = None) -> MassReducedFit | None:
    """U_kl for all isotopologues of `molecule` in `lines` (needs two or more).

    Terms the data cannot float are held at the library's values (mass-reduced from the main
    isotopologue): with one vibrational interval and heavy-atom isotopologues only, U20 (else
    the isotope shift of the band origin is mis-modelled by ~2 omega_e x_e (rho - 1), ~0.08
    cm-1 for 35/37Cl, posing as Born-Oppenheimer breakdown); with H and D fundamentals, U30
    and the higher terms. Such a fit has no Born-Oppenheimer terms: omega_e from it is an
    effective value whose sigma carries their size as a systematic."""
    labels = sorted(set(lines.isotopologue.tolist()))
    if len(labels) < 2:
        return None
    notes: list[str] = []
    main = _main_label(labels, library) if library is not None else None
    fallback: dict[tuple[int, int], float] = {}
    if main is not None:
        reference = library.isotopologue(main)
        fallback = {t: y * reference.reduced_mass_u ** (t[0] / 2 + t[1]) for t, y in reference.dunham.items()}
    term_fit = fit_terms(lines, mass_reduced=True, fallback=fallback)
    fit = term_fit.fit
    masses = lines.reduced_mass_u
    hydrogen_and_deuterium = float(masses.max() / masses.min()) > 1.2
    systematic = None
    if hydrogen_and_deuterium:
        heavy = masses > 1.2 * masses.min()
        systematic = np.zeros((len(fit.names), len(fit.names)))
        for size, column in (
            (BORN_OPPENHEIMER_OMEGA_CM1, (lines.v_upper - lines.v_lower).astype(float)),
            (BORN_OPPENHEIMER_B_CM1, lines.J_upper * (lines.J_upper + 1.0) - lines.J_lower * (lines.J_lower + 1.0)),
        ):
            effect = fit.operator @ np.where(heavy, column, 0.0) * size
            systematic += np.outer(effect, effect)
    model = _term_model(term_fit, lines, library, main, systematic)
    parameters = {}
    for i, name in enumerate(fit.names):
        compared = model.parameter(name)
        parameters[name] = Estimate(compared.value, compared.sigma, "cm-1 u^" + f"{int(name[1]) / 2 + int(name[2]):g}")
    vibration_determined = term_fit.index(2, 0) is not None
    per_isotopologue: dict[str, MassReducedMember] = {}
    any_excess = []
    for label in labels:
        mine = lines.isotopologue == label
        mu = float(lines.reduced_mass_u[mine][0])
        used = mine & fit.used
        residuals = fit.residuals[used]
        weights = 1.0 / lines.sigma_cm1[used] ** 2
        mean = float(np.sum(weights * residuals) / weights.sum()) if residuals.size else None
        mean_sigma = float(math.sqrt(max(1.0, fit.chi2_reduced if np.isfinite(fit.chi2_reduced) else 1.0) / weights.sum())) if residuals.size else None
        member_constants: dict[str, ReferencedValue] = {}
        if mean is not None and mean_sigma and abs(mean) > RESIDUAL_MEAN_LIMIT * mean_sigma:
            any_excess.append(f"{label} {mean:+.4f} +- {mean_sigma:.4f} cm-1")
        for (k, l), (name, sign) in CONSTANT_OF_TERM.items():
            if term_fit.index(k, l) is None or (l == 0 and not vibration_determined):
                continue
            scale = mu ** (-(k / 2 + l))
            compared = model.linear(_term_weights(model, {(k, l): sign * scale}, "U"))
            member_constants[name] = ReferencedValue(compared.value, compared.sigma, compared.reference, compared.reference_sigma, compared.z)
        per_isotopologue[label] = MassReducedMember(
            mu, int(mine.sum()), mean, mean_sigma, float(np.sqrt(np.mean(residuals**2))) if residuals.size else None, member_constants
        )
    held = {f"U{k}{l}": value for (k, l), value in term_fit.held.items()}
    if term_fit.held:
        notes.append("held at the library's values (from " + str(main) + "): " + ", ".join(held))
    if vibration_determined:
        notes.append("omega_e and omega_e x_e separated by the mass dependence of the band origins")
    if hydrogen_and_deuterium:
        notes.append(
            f"no Born-Oppenheimer terms fitted: omega_e and B_e here are effective values; their sigmas include "
            f"{BORN_OPPENHEIMER_OMEGA_CM1} cm-1 (band origin) and {BORN_OPPENHEIMER_B_CM1:g} cm-1 (B) for the deuterated forms"
        )
    if any_excess:
        cause = "Born-Oppenheimer breakdown (H/D) or a misassignment" if hydrogen_and_deuterium else "a misassignment or a blend (heavy-atom isotopologues follow mass scaling to ~0.01 cm-1)"
        notes.append("mean residuals per isotopologue beyond their noise (" + "; ".join(any_excess) + "): " + cause)
    return MassReducedFit(molecule, tuple(labels), int(fit.used.sum()), fit.rms, parameters, per_isotopologue, tuple(notes), held)


@dataclass(frozen=True)
class ConstantsResult:
    per_isotopologue: tuple[IsotopologueConstants, ...]
    mass_reduced: tuple[MassReducedFit, ...]
    notes: tuple[str, ...] = ()
    bands: tuple[BandReference, ...] = ()

    def band(self, key: tuple[str, int, int]) -> BandReference | None:
        return next((b for b in self.bands if b.key == key), None)


def molecular_constants(analysis: Analysis, library: Library) -> ConstantsResult:
    """All constants a run's assignment supports (isotopologues with >= 6 fitted lines), and
    every band fit beside its model reference."""
    band_rows = band_library_rows(analysis, library)
    lines = assigned_lines_from(analysis, library, band_rows)
    per_isotopologue = []
    notes: list[str] = []
    for label in sorted(set(lines.isotopologue.tolist())):
        mine = lines.select(lines.isotopologue == label)
        if mine.count < 6:
            continue
        try:
            per_isotopologue.append(constants_for_isotopologue(mine, library.isotopologue(label), library))
        except (ValueError, np.linalg.LinAlgError) as error:
            notes.append(f"{label}: constants not determined ({error})")
    mass_reduced = []
    molecules: dict[str, list[str]] = {}
    for label in sorted(set(lines.isotopologue.tolist())):
        molecules.setdefault(library.family(label), []).append(label)
    for pair, labels in molecules.items():
        if len(labels) < 2:
            continue
        mine = lines.select(np.isin(lines.isotopologue, labels))
        try:
            fit = mass_reduced_fit(mine, pair, library)
        except (ValueError, np.linalg.LinAlgError) as error:
            notes.append(f"{pair}: mass-reduced fit not possible ({error})")
            continue
        if fit is not None:
            mass_reduced.append(fit)
    bands = tuple(b for b in (band_reference(fit, library, band_rows.get(i)) for i, fit in enumerate(analysis.assignment.bands)) if b is not None)
    return ConstantsResult(tuple(per_isotopologue), tuple(mass_reduced), tuple(notes), bands)

