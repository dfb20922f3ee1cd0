"""Term-value fits of assigned lines: per isotopologue, and mass-reduced across isotopologues.

Every assigned line is nu = E(v', J') - E(v'', J'') with Dunham term values
    E(v, J) = sum_kl Y_kl (v + 1/2)^k [J(J+1)]^l,
which is linear in the Y_kl, so all bands of one isotopologue (fundamental, overtone, hot
band) are fitted at once by weighted linear least squares. Which Y_kl are floated depends on
what the data determine:
- vibrational Y_k0 (k >= 1): one fewer than the number of vibrational levels seen (at most
  three). With only v = 0 and 1 omega_e is not determined (reported as such);
- Y01 always; Y11 with two or more levels; Y21 with three or more;
- Y03 (sextic), Y12, Y21 and Y02 only when significant (|value| > 3 sigma).
Every term the fit does not float is held at the `fallback` value given (the library's), not
at zero: a truncated model would otherwise pass off the missing terms as its own constants.
Mass-reduced fit: Y_kl = U_kl mu^-(k/2 + l) for all isotopologues of one molecule; the mass
dependence separates U10 from U20 when hydrogen and deuterium forms are both present.
"""
from __future__ import annotations

import functools
from dataclasses import dataclass, field
from collections.abc import Iterable, Mapping

import numpy as np

from processing.estimate import Estimate
from processing.library_uncertainty import term_column
from processing.linear_fit import SIGNIFICANT, SIGNIFICANT_SEXTIC, LinearFit, weighted_least_squares

OPTIONAL_TERMS = ((0, 3), (1, 2), (2, 1), (0, 2))  # dropped in this order while not significant


@dataclass(frozen=True)
class AssignedLines:
    """Assigned lines of one or more isotopologues, as aligned arrays.

    `library_rows`, when given, holds the library's positions of these lines and their
    d(position)/d(theta) rows (see `library_uncertainty.predicted_lines`), worked out once for
    a run's lines and carried along by `select`. Design columns (`column`) are worked out
    once, on the table a selection was made from."""

    isotopologue: np.ndarray  # labels
    reduced_mass_u: np.ndarray
    v_upper: np.ndarray
    v_lower: np.ndarray
    J_upper: np.ndarray
    J_lower: np.ndarray
    position_cm1: np.ndarray
    sigma_cm1: np.ndarray
    sigma_known: bool = True
    library_rows: tuple[np.ndarray, np.ndarray] | None = field(default=None, repr=False, compare=False)
    selected_from: tuple[AssignedLines, np.ndarray] | None = field(default=None, repr=False, compare=False)  # (table, mask)

    @property
    def count(self) -> int:
        return int(self.position_cm1.size)

    def select(self, mask: np.ndarray) -> AssignedLines:
        rows = None if self.library_rows is None else (self.library_rows[0][mask], self.library_rows[1][mask])
        return AssignedLines(
            self.isotopologue[mask], self.reduced_mass_u[mask], self.v_upper[mask], self.v_lower[mask],
            self.J_upper[mask], self.J_lower[mask], self.position_cm1[mask], self.sigma_cm1[mask], self.sigma_known, rows,
            (self, mask),
        )

    @functools.cached_property
    def levels(self) -> tuple[int, ...]:
        return tuple(sorted(set(self.v_upper.tolist()) | set(self.v_lower.tolist())))

    @functools.cached_property
    def _columns(self) -> dict[tuple[int, int, bool], np.ndarray]:
        # design columns already worked out (a fit and its model reference ask for the same
        # terms again and again; cached_property writes the instance dict, frozen or not)
        return {}

    def column(self, k: int, l: int, mass_reduced: bool) -> np.ndarray:
        """d(position)/d(Y_kl) of every line, (v'+1/2)^k [J'(J'+1)]^l - (v''+1/2)^k [J''(J''+1)]^l,
        times mu^-(k/2 + l) when mass-reduced (d/d(U_kl)); read-only, computed once."""
        key = (k, l, mass_reduced)
        column = self._columns.get(key)
        if column is None:
            if self.selected_from is not None:
                table, mask = self.selected_from
                column = table.column(k, l, mass_reduced)[mask]
            elif mass_reduced:
                column = self.column(k, l, False) * self.reduced_mass_u ** (-(k / 2.0 + l))
            else:
                column = term_column(self.v_upper, self.J_upper, self.v_lower, self.J_lower, k, l)
            column.flags.writeable = False
            self._columns[key] = column
        return column


def term_name(k: int, l: int) -> str:
    return f"Y{k}{l}"


@dataclass(frozen=True)
class TermFit:
    """A Dunham (or mass-reduced) fit: parameters by name ("Y10", or "U10" when mass-reduced)."""

    terms: tuple[tuple[int, int], ...]
    fit: LinearFit
    mass_reduced: bool
    vibrational_levels: tuple[int, ...]
    held: dict[tuple[int, int], float] = field(default_factory=dict)  # terms not floated: value used

    def estimate(self, k: int, l: int) -> Estimate | None:
        name = ("U" if self.mass_reduced else "Y") + f"{k}{l}"
        if name not in self.fit.names:
            return None
        sigma = self.fit.sigma(name) if self.fit.dof > 0 else None
        unit = "cm-1" if not self.mass_reduced else f"cm-1 u^{k / 2 + l:g}"
        return Estimate(self.fit.value(name), sigma, unit)

    def index(self, k: int, l: int) -> int | None:
        name = ("U" if self.mass_reduced else "Y") + f"{k}{l}"
        return self.fit.names.index(name) if name in self.fit.names else None

    @property
    def names(self) -> tuple[str, ...]:
        return self.fit.names


def _candidate_terms(n_levels: int, vibrational_from_mass: bool) -> list[tuple[int, int]]:
    n_vib = max(1, n_levels - 1) + (1 if vibrational_from_mass else 0)
    terms = [(k, 0) for k in range(1, min(n_vib, 3) + 1)]
    terms.append((0, 1))
    if n_levels >= 2:
        terms += [(1, 1), (1, 2)]
    if n_levels >= 3:
        terms.append((2, 1))
    terms += [(0, 2), (0, 3)]
    return terms


def vibration_separable(lines: AssignedLines, mass_reduced: bool) -> bool:
    """Whether omega_e and omega_e x_e can both be floated: three vibrational levels, or (mass-
    reduced) hydrogen and deuterium forms together (reduced masses differing by > 20%)."""
    masses = lines.reduced_mass_u
    from_mass = mass_reduced and masses.size > 0 and float(masses.max() / masses.min()) > 1.2
    return len(lines.levels) >= 3 or from_mass


def term_columns(lines: AssignedLines, terms: Iterable[tuple[int, int]], mass_reduced: bool) -> np.ndarray:
    """Design columns (rows = lines) of the given (k, l) terms."""
    terms = list(terms)
    if not terms:
        return np.zeros((lines.count, 0))
    design = np.empty((lines.count, len(terms)))
    for i, (k, l) in enumerate(terms):
        design[:, i] = lines.column(k, l, mass_reduced)
    return design


def fit_terms(
    lines: AssignedLines,
    mass_reduced: bool = False,
    held: dict[tuple[int, int], float] | None = None,
    fallback: Mapping[tuple[int, int], float] | None = None,
) -> TermFit:
    """Fit the lines' term values; optional terms are dropped while not significant.

    `held` fixes terms at given values (subtracted from the positions, not floated);
    `fallback` gives the value of any other term once it is not floated (a candidate dropped
    as not significant, or one the data cannot reach, such as omega_e y_e with three levels)."""
    levels = lines.levels
    masses = lines.reduced_mass_u
    vibrational_from_mass = mass_reduced and masses.size > 0 and float(masses.max() / masses.min()) > 1.2
    fixed = dict(held or {})
    terms = [t for t in _candidate_terms(len(levels), vibrational_from_mass) if t not in fixed]
    prefix = "U" if mass_reduced else "Y"
    while True:
        holding = dict(fixed)
        holding.update({t: v for t, v in (fallback or {}).items() if t not in terms and t not in fixed})
        target = lines.position_cm1 - term_columns(lines, holding, mass_reduced) @ np.array(list(holding.values()))
        design = term_columns(lines, terms, mass_reduced)
        names = tuple(prefix + f"{k}{l}" for k, l in terms)
        if lines.count < len(terms) + 1:
            # too few lines: drop optional terms first
            optional = [t for t in OPTIONAL_TERMS if t in terms]
            if not optional:
                raise ValueError(f"{lines.count} lines cannot determine {len(terms)} term constants")
            terms.remove(optional[0])
            continue
        fit = weighted_least_squares(design, target, lines.sigma_cm1, names, sigma_known=lines.sigma_known)
        weak = [
            t for t in OPTIONAL_TERMS
            if t in terms and not abs(fit.value(prefix + f"{t[0]}{t[1]}")) > (SIGNIFICANT_SEXTIC if t[1] == 3 else SIGNIFICANT) * fit.sigma(prefix + f"{t[0]}{t[1]}")
        ]
        if not weak:
            return TermFit(tuple(terms), fit, mass_reduced, levels, holding)
        terms.remove(weak[0])
