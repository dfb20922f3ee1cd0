"""Molecular constants from all of a run's assigned lines, compared with the library.

Per isotopologue: one Dunham term-value fit of every assigned line (see `dunham_fit`), giving
B_e, alpha_e (two or more vibrational levels), gamma_e, D_e, beta_e where determined, and
omega_e, omega_e x_e when three or more vibrational levels are seen (fundamental + overtone,
or a hot band). Derived quantities, each labelled with the model it assumes:
- r_e = sqrt(h / (8 pi^2 c mu B_e)) (rigid-rotor definition with the Dunham Y01 as B_e);
- k_e = mu (2 pi c omega_e)^2 (harmonic force constant);
- zero-point energy G(0) = omega_e/2 - omega_e x_e/4 + omega_e y_e/8 (Dunham, Y00 omitted);
- Morse dissociation energy D_e = omega_e^2 / (4 omega_e x_e), and D_0 = D_e - G(0).
Consistency diagnostics: Kratzer D_e ~ 4 B_e^3 / omega_e^2 and Pekeris alpha_e ~
6 sqrt(omega_e x_e B_e^3)/omega_e - 6 B_e^2/omega_e (the latter only good to 5-20%).
Mass-reduced fit per molecule: U_kl with Y_kl = U_kl mu^-(k/2+l), residuals per isotopologue
as an indicator of Born-Oppenheimer breakdown.
"""
from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from processing.dunham_fit import AssignedLines, TermFit, fit_terms, propagate
from processing.estimate import Estimate
from processing.levels import upper_J
from processing.lines import fit_sigma_factor
from processing.species import equilibrium_bond_length_sigma_angstrom
from processing.physical_constants import (
    CM1_TO_EV,
    CM1_TO_KJ_PER_MOL,
    bond_length_angstrom,
    force_constant_n_per_m,
)

# AME2020 mass uncertainties are below 4e-8 u for every nuclide in the library (recalled from
# memory); used as a conservative per-atom uncertainty in r_e.
ATOMIC_MASS_SIGMA_U = 4e-8

# Dunham term -> (constant name, sign): constant = sign * Y_kl
CONSTANT_OF_TERM: dict[tuple[int, int], tuple[str, float]] = {
    (1, 0): ("omega_e", +1.0),
    (2, 0): ("omega_e_x_e", -1.0),
    (3, 0): ("omega_e_y_e", +1.0),
    (0, 1): ("B_e", +1.0),
    (1, 1): ("alpha_e", -1.0),
    (2, 1): ("gamma_e", +1.0),
    (0, 2): ("D_e", -1.0),
    (1, 2): ("beta_e", -1.0),
}
COMPARED = ("omega_e", "omega_e_x_e", "B_e", "alpha_e", "D_e", "r_e")


@dataclass(frozen=True)
class Comparison:
    """A fitted constant against the library's reference value."""

    name: str
    fitted: Estimate
    reference: float
    source: str
    difference: float
    difference_percent: float
    z: float | None  # difference / combined uncertainty (the reference's own is not known: 0)
    # what this run's model should give when the reference has terms the data cannot float
    # (e.g. gamma_e with two vibrational levels: alpha_e(eff) = alpha_e - 2 gamma_e)
    effective_reference: float | None = None
    effective_z: float | None = None
    effective_rule: str | None = None

    def to_dict(self) -> dict[str, Any]:
        return {
            "name": self.name,
            "fitted": self.fitted.to_dict(),
            "reference": self.reference,
            "source": self.source,
            "difference": self.difference,
            "difference_percent": self.difference_percent,
            "z": self.z,
            "effective_reference": self.effective_reference,
            "effective_z": self.effective_z,
            "effective_rule": self.effective_rule,
        }


@dataclass(frozen=True)
class IsotopologueConstants:
    isotopologue: str
    n_lines: int
    vibrational_levels: tuple[int, ...]
    rms_cm1: float
    constants: dict[str, Estimate | None]  # omega_e ... beta_e, r_e (angstrom)
    band_origins: dict[str, Estimate]  # "1-0" -> nu0 from the term fit
    B_v: dict[int, Estimate]
    derived: dict[str, dict[str, Any]]  # k_e, zero_point_energy, morse_dissociation: value, sigma, unit, model
    comparisons: tuple[Comparison, ...]
    diagnostics: dict[str, dict[str, Any]]  # kratzer, pekeris
    dunham: dict[str, Estimate]
    correlation: list[list[float]]
    notes: tuple[str, ...] = field(default=())

    def to_dict(self) -> dict[str, Any]:
        out: dict[str, Any] = {"isotopologue": self.isotopologue}
        for name in ("B_e", "alpha_e", "D_e", "r_e", "omega_e", "omega_e_x_e", "omega_e_y_e", "gamma_e", "beta_e"):
            estimate = self.constants.get(name)
            out[name] = estimate.to_dict() if estimate is not None else None
        out.update(
            {
                "n_lines": self.n_lines,
                "vibrational_levels": list(self.vibrational_levels),
                "rms": self.rms_cm1,
                "band_origins": {k: v.to_dict() for k, v in self.band_origins.items()},
                "B_v": {str(v): e.to_dict() for v, e in self.B_v.items()},
                "derived": self.derived,
                "reference": {c.name: c.to_dict() for c in self.comparisons},
                "diagnostics": self.diagnostics,
                "dunham": {k: v.to_dict() for k, v in self.dunham.items()},
                "dunham_correlation": self.correlation,
                "notes": list(self.notes),
            }
        )
        return out


@dataclass(frozen=True)
class MassReducedFit:
    molecule: str
    isotopologues: tuple[str, ...]
    n_lines: int
    rms_cm1: float
    parameters: dict[str, Estimate]  # U_kl
    per_isotopologue: dict[str, dict[str, Any]]  # omega_e, omega_e_x_e, B_e derived; residual mean/rms
    notes: tuple[str, ...] = field(default=())

    def to_dict(self) -> dict[str, Any]:
        return {
            "molecule": self.molecule,
            "isotopologues": list(self.isotopologues),
            "n_lines": self.n_lines,
            "rms": self.rms_cm1,
            "parameters": {k: v.to_dict() for k, v in self.parameters.items()},
            "per_isotopologue": self.per_isotopologue,
            "notes": list(self.notes),
        }


# ------------------------------------------------------------------------------ line table
def assigned_lines_from(analysis: Any, library: Any) -> AssignedLines:
    """The assigned lines of an analysis that its band fits used, with line uncertainties
    (inflated as in the band fits for saturated and blended lines)."""
    rows = []
    lines = analysis.lines
    masses = {iso.label: iso.reduced_mass_u for iso in library.isotopologues()}
    fits = {(f.isotopologue, f.v_upper, f.v_lower): f for f in analysis.assignment.bands}
    for i, assigned in enumerate(analysis.assignment.per_line):
        if assigned is None or not assigned.used_in_fit or assigned.isotopologue not in masses:
            continue
        if (assigned.isotopologue, assigned.v_upper, assigned.v_lower) not in fits:
            continue
        sigma = float(lines.position_sigma_cm1[i] * fit_sigma_factor(lines.saturated[i], assigned.blended))
        # an unresolved partner's pull was removed in the band fit: use the same corrected position
        observed = float(lines.position_cm1[i]) - assigned.blend_pull
        rows.append((assigned.isotopologue, masses[assigned.isotopologue], assigned.v_upper, assigned.v_lower,
                     int(upper_J(assigned.branch, assigned.J_lower)), assigned.J_lower, observed, sigma))
    if not rows:
        empty = np.zeros(0)
        return AssignedLines(np.array([], dtype=object), empty, empty.astype(int), empty.astype(int), empty.astype(int), empty.astype(int), empty, empty)
    columns = list(zip(*rows))
    return AssignedLines(
        isotopologue=np.array(columns[0], dtype=object),
        reduced_mass_u=np.array(columns[1], dtype=np.float64),
        v_upper=np.array(columns[2], dtype=np.int64),
        v_lower=np.array(columns[3], dtype=np.int64),
        J_upper=np.array(columns[4], dtype=np.int64),
        J_lower=np.array(columns[5], dtype=np.int64),
        position_cm1=np.array(columns[6], dtype=np.float64),
        sigma_cm1=np.array(columns[7], dtype=np.float64),
        sigma_known=bool(lines.sigma_known),
    )


# ------------------------------------------------------------------------ per isotopologue
def _parameter_vector(term_fit: TermFit) -> tuple[np.ndarray, np.ndarray]:
    return term_fit.fit.values.copy(), term_fit.fit.covariance


def _term(values: np.ndarray, term_fit: TermFit, k: int, l: int) -> float:
    index = term_fit.index(k, l)
    return 0.0 if index is None else float(values[index])


def constants_for_isotopologue(lines: AssignedLines, isotopologue: Any) -> IsotopologueConstants:
    """Fit one isotopologue's lines and derive, compare and check its constants."""
    term_fit = fit_terms(lines)
    values, covariance = _parameter_vector(term_fit)
    levels = term_fit.vibrational_levels
    vibration_determined = len(levels) >= 3
    notes: list[str] = []
    constants: dict[str, Estimate | None] = {name: None for name, _ in CONSTANT_OF_TERM.values()}
    for (k, l), (name, sign) in CONSTANT_OF_TERM.items():
        if k >= 1 and l == 0 and not vibration_determined:
            continue
        estimate = term_fit.estimate(k, l)
        if estimate is not None:
            constants[name] = Estimate(sign * estimate.value, estimate.sigma)
    if not vibration_determined:
        notes.append("omega_e and omega_e x_e need two vibrational intervals (e.g. fundamental + overtone)")

    mu = isotopologue.reduced_mass_u
    mu_sigma = _reduced_mass_sigma(isotopologue)
    B_index = term_fit.index(0, 1)
    assert B_index is not None
    B_e = float(values[B_index])
    B_sigma = math.sqrt(covariance[B_index, B_index])
    r_e = bond_length_angstrom(B_e, mu)
    r_sigma = equilibrium_bond_length_sigma_angstrom(B_e, B_sigma, mu, mu_sigma)
    constants["r_e"] = Estimate(r_e, r_sigma, "angstrom")

    band_origins: dict[str, Estimate] = {}
    for v_upper, v_lower in sorted(set(zip(lines.v_upper.tolist(), lines.v_lower.tolist()))):
        value, sigma = propagate(lambda p, a=v_upper, b=v_lower: _vibrational_term(p, term_fit, a) - _vibrational_term(p, term_fit, b), values, covariance)
        band_origins[f"{v_upper}-{v_lower}"] = Estimate(value, sigma)
    B_v = {}
    for v in levels:
        value, sigma = propagate(lambda p, v=v: sum(_term(p, term_fit, k, 1) * (v + 0.5) ** k for k in range(3)), values, covariance)
        B_v[v] = Estimate(value, sigma)

    derived = _derived(constants, term_fit, values, covariance, mu) if vibration_determined else {}
    comparisons = tuple(_compare(constants, isotopologue, levels, term_fit))
    diagnostics = _diagnostics(constants, isotopologue)
    dunham = {name: Estimate(float(values[i]), float(math.sqrt(covariance[i, i]))) for i, name in enumerate(term_fit.names)}
    return IsotopologueConstants(
        isotopologue=isotopologue.label,
        n_lines=int(term_fit.fit.used.sum()),
        vibrational_levels=levels,
        rms_cm1=term_fit.fit.rms,
        constants=constants,
        band_origins=band_origins,
        B_v=B_v,
        derived=derived,
        comparisons=comparisons,
        diagnostics=diagnostics,
        dunham=dunham,
        correlation=np.round(term_fit.fit.correlation, 6).tolist(),
        notes=tuple(notes),
    )


def _vibrational_term(values: np.ndarray, term_fit: TermFit, v: int) -> float:
    return sum(_term(values, term_fit, k, 0) * (v + 0.5) ** k for k in range(1, 4))


def _reduced_mass_sigma(isotopologue: Any) -> float:
    m1, m2 = isotopologue.masses_u
    # d mu / d m1 = (m2 / (m1 + m2))^2, likewise for m2
    return ATOMIC_MASS_SIGMA_U * math.hypot((m2 / (m1 + m2)) ** 2, (m1 / (m1 + m2)) ** 2)


def _derived(constants: dict[str, Estimate | None], term_fit: TermFit, values: np.ndarray, covariance: np.ndarray, mu: float) -> dict[str, dict[str, Any]]:
    def omega(p: np.ndarray) -> float:
        return _term(p, term_fit, 1, 0)

    def omega_x(p: np.ndarray) -> float:
        return -_term(p, term_fit, 2, 0)

    def zero_point(p: np.ndarray) -> float:
        return _term(p, term_fit, 1, 0) / 2 + _term(p, term_fit, 2, 0) / 4 + _term(p, term_fit, 3, 0) / 8

    out: dict[str, dict[str, Any]] = {}
    k_value, k_sigma = propagate(lambda p: force_constant_n_per_m(omega(p), mu), values, covariance)
    out["k_e"] = {"value": k_value, "sigma": k_sigma, "unit": "N/m", "model": "harmonic: k_e = mu (2 pi c omega_e)^2"}
    zpe, zpe_sigma = propagate(zero_point, values, covariance)
    out["zero_point_energy"] = {"value": zpe, "sigma": zpe_sigma, "unit": "cm-1", "model": "Dunham G(0) = omega_e/2 - omega_e x_e/4 + omega_e y_e/8 (Y00 omitted)"}
    if omega_x(values) > 0:
        morse, morse_sigma = propagate(lambda p: omega(p) ** 2 / (4 * omega_x(p)), values, covariance)
        out["morse_dissociation_energy"] = {
            "value": morse, "sigma": morse_sigma, "unit": "cm-1",
            "value_eV": morse * CM1_TO_EV, "value_kJ_per_mol": morse * CM1_TO_KJ_PER_MOL,
            "model": "Morse potential: D_e = omega_e^2 / (4 omega_e x_e) (overestimates real D_e)",
        }
        d0, d0_sigma = propagate(lambda p: omega(p) ** 2 / (4 * omega_x(p)) - zero_point(p), values, covariance)
        out["morse_D0"] = {"value": d0, "sigma": d0_sigma, "unit": "cm-1", "value_eV": d0 * CM1_TO_EV, "model": "Morse D_e minus the zero-point energy"}
    return out


def _effective_reference(name: str, isotopologue: Any, levels: tuple[int, ...], term_fit: TermFit) -> tuple[float | None, str | None]:
    """The reference as this fit's model sees it: with B_v known at two levels only, a gamma_e
    the fit cannot float is absorbed: B_e(eff) = B_e - gamma_e (a^2 + ab + b^2 - ...) etc.
    Computed exactly from the library's B_v at the levels seen (straight line through them)."""
    gamma = isotopologue.dunham.get((2, 1))
    if name not in ("B_e", "alpha_e", "r_e") or gamma is None or term_fit.index(2, 1) is not None or len(levels) != 2:
        return None, None
    from processing.levels import rotational_constant

    (a, b) = levels
    B_a, B_b = rotational_constant(isotopologue.dunham, a), rotational_constant(isotopologue.dunham, b)
    alpha_eff = (B_a - B_b) / (b - a)
    B_e_eff = B_a + alpha_eff * (a + 0.5)
    rule = f"gamma_e = {gamma:g} not determined by levels {a},{b}: B_v line through the library's B_{a}, B_{b}"
    if name == "alpha_e":
        return alpha_eff, rule
    if name == "B_e":
        return B_e_eff, rule
    return bond_length_angstrom(B_e_eff, isotopologue.reduced_mass_u), rule


def _compare(constants: dict[str, Estimate | None], isotopologue: Any, levels: tuple[int, ...], term_fit: TermFit) -> list[Comparison]:
    out = []
    for name in COMPARED:
        fitted = constants.get(name)
        key = "r_e_angstrom" if name == "r_e" else name
        reference = isotopologue.reference.get(key)
        reference_value = reference.value if reference is not None else None
        source = reference.source if reference is not None else f"mass-scaled from {isotopologue.derived_from}"
        if reference_value is None:
            reference_value = _derived_reference(isotopologue, name)
        if fitted is None or reference_value is None:
            continue
        difference = fitted.value - reference_value
        z = difference / fitted.sigma if fitted.sigma else None
        effective, rule = _effective_reference(name, isotopologue, levels, term_fit)
        effective_z = (fitted.value - effective) / fitted.sigma if effective is not None and fitted.sigma else None
        out.append(Comparison(name, fitted, float(reference_value), source, difference, 100.0 * difference / reference_value, z, effective, effective_z, rule))
    return out


def _derived_reference(isotopologue: Any, name: str) -> float | None:
    """A reference for a mass-scaled isotopologue from its Dunham set (and r_e from B_e)."""
    from processing.levels import CONSTANT_TO_DUNHAM

    if name == "r_e":
        B_e = isotopologue.dunham.get((0, 1))
        return bond_length_angstrom(B_e, isotopologue.reduced_mass_u) if B_e else None
    if name not in CONSTANT_TO_DUNHAM:
        return None
    k, l, sign = CONSTANT_TO_DUNHAM[name]
    value = isotopologue.dunham.get((k, l))
    return None if value is None else sign * value


def _diagnostics(constants: dict[str, Estimate | None], isotopologue: Any) -> dict[str, dict[str, Any]]:
    """Kratzer and Pekeris relations, with fitted values where the run has them."""
    out: dict[str, dict[str, Any]] = {}
    B_e = constants["B_e"].value if constants.get("B_e") else None
    omega = constants["omega_e"].value if constants.get("omega_e") else _derived_reference(isotopologue, "omega_e")
    omega_source = "fitted" if constants.get("omega_e") else "library"
    omega_x = constants["omega_e_x_e"].value if constants.get("omega_e_x_e") else _derived_reference(isotopologue, "omega_e_x_e")
    if B_e and omega:
        kratzer = 4 * B_e**3 / omega**2
        D_fit = constants.get("D_e")
        out["kratzer"] = {
            "relation": "D_e ~ 4 B_e^3 / omega_e^2",
            "predicted_D_e": kratzer,
            "fitted_D_e": D_fit.value if D_fit else None,
            "ratio": (D_fit.value / kratzer) if D_fit else None,
            "omega_e_from": omega_source,
        }
    if B_e and omega and omega_x and omega_x > 0:
        pekeris = 6 * math.sqrt(omega_x * B_e**3) / omega - 6 * B_e**2 / omega
        alpha = constants.get("alpha_e")
        out["pekeris"] = {
            "relation": "alpha_e ~ 6 sqrt(omega_e x_e B_e^3)/omega_e - 6 B_e^2/omega_e (Morse; 5-20%)",
            "predicted_alpha_e": pekeris,
            "fitted_alpha_e": alpha.value if alpha else None,
            "ratio": (alpha.value / pekeris) if alpha else None,
            "omega_e_from": omega_source,
        }
    return out


# --------------------------------------------------------------------------- mass-reduced
def mass_reduced_fit(lines: AssignedLines, molecule: str, library: Any = None) -> MassReducedFit | None:
    """U_kl for all isotopologues of `molecule` in `lines` (needs two or more).

    When the data cannot separate omega_e from omega_e x_e (one vibrational interval, heavy-
    atom isotopologues only), U20 is held at the library's value: without it the isotope
    shift of the band origin is mis-modelled by ~2 omega_e x_e (rho - 1) (~0.08 cm-1 for
    35/37Cl), which would pose as Born-Oppenheimer breakdown."""
    from processing.dunham_fit import vibration_separable

    labels = sorted(set(lines.isotopologue.tolist()))
    if len(labels) < 2:
        return None
    held: dict[tuple[int, int], float] = {}
    notes: list[str] = []
    if not vibration_separable(lines, mass_reduced=True) and library is not None:
        reference = library.isotopologue(labels[0])
        Y20 = reference.dunham.get((2, 0))
        if Y20 is not None:
            held[(2, 0)] = Y20 * reference.reduced_mass_u
            notes.append(f"U20 held at the library value {held[(2, 0)]:.4f} cm-1 u (from {reference.label}): not determined by these data")
    term_fit = fit_terms(lines, mass_reduced=True, held=held)
    fit = term_fit.fit
    parameters = {name: Estimate(fit.value(name), fit.sigma(name), "cm-1 u^" + f"{int(name[1]) / 2 + int(name[2]):g}") for name in fit.names}
    per_isotopologue: dict[str, dict[str, Any]] = {}
    for label in labels:
        mine = lines.isotopologue == label
        mu = float(lines.reduced_mass_u[mine][0])
        residuals = fit.residuals[mine & fit.used]
        entry: dict[str, Any] = {
            "reduced_mass_u": mu,
            "n_lines": int(mine.sum()),
            "residual_mean": float(residuals.mean()) if residuals.size else None,
            "residual_rms": float(np.sqrt(np.mean(residuals**2))) if residuals.size else None,
        }
        vibration_determined = term_fit.index(2, 0) is not None
        for (k, l), (name, sign) in CONSTANT_OF_TERM.items():
            index = term_fit.index(k, l)
            if index is None or (l == 0 and not vibration_determined):
                continue
            scale = mu ** (-(k / 2 + l))
            entry[name] = {"value": sign * float(fit.values[index]) * scale, "sigma": float(fit.sigmas[index]) * scale}
        per_isotopologue[label] = entry
    if term_fit.index(2, 0) is not None:
        notes.append("omega_e and omega_e x_e separated by the mass dependence of the band origins")
    notes.append("systematic residuals per isotopologue indicate Born-Oppenheimer breakdown (expected ~0.1 cm-1 between H and D forms)")
    return MassReducedFit(molecule, tuple(labels), int(fit.used.sum()), fit.rms, parameters, per_isotopologue, tuple(notes))


@dataclass(frozen=True)
class ConstantsResult:
    per_isotopologue: tuple[IsotopologueConstants, ...]
    mass_reduced: tuple[MassReducedFit, ...]
    notes: tuple[str, ...] = ()


def molecular_constants(analysis: Any, library: Any) -> ConstantsResult:
    """All constants a run's assignment supports (isotopologues with >= 6 fitted lines)."""
    lines = assigned_lines_from(analysis, library)
    per_isotopologue = []
    notes: list[str] = []
    for label in sorted(set(lines.isotopologue.tolist())):
        mine = lines.select(lines.isotopologue == label)
        if mine.count < 6:
            continue
        try:
            per_isotopologue.append(constants_for_isotopologue(mine, library.isotopologue(label)))
        except (ValueError, np.linalg.LinAlgError) as error:
            notes.append(f"{label}: constants not determined ({error})")
    mass_reduced = []
    molecules: dict[str, list[str]] = {}
    for label in sorted(set(lines.isotopologue.tolist())):
        molecules.setdefault(_element_pair(library.isotopologue(label)), []).append(label)
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
    return ConstantsResult(tuple(per_isotopologue), tuple(mass_reduced), tuple(notes))


def _element_pair(isotopologue: Any) -> str:
    """Molecule identity across isotopes: HCl and DCl share "H-Cl"."""
    elements = ["H" if nuclide in ("1H", "2H") else "".join(ch for ch in nuclide if ch.isalpha()) for nuclide in isotopologue.nuclides]
    return "-".join(elements)
