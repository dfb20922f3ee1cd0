"""The library's reference constants as linear functions of independent uncertain inputs.

Every Dunham coefficient of every isotopologue is Y_kl = sum_i g_i theta_i over a set of
independent library parameters theta: each tabulated constant (with its `sigma`), and the
extra uncertainty each mass scaling adds (`scaling_sigma`, Born-Oppenheimer breakdown for H/D
swaps). Isotopologues scaled from one parent share the parent's parameters, so their reference
errors are correlated (H35Cl and H37Cl share all of them), which a comparison across
isotopologues must know. Everything predicted from the library (line positions, and any
linear fit of them) is then linear in theta: its covariance is J diag(sigma^2) J^T, exactly.
"""
from __future__ import annotations

import functools
from dataclasses import dataclass, field
from typing import TYPE_CHECKING

import numpy as np

from processing.levels import CONSTANT_TO_DUNHAM

if TYPE_CHECKING:
    from processing.species import Library


@dataclass(frozen=True)
class LibraryParameters:
    """The independent parameters (name, sigma) and each isotopologue's Dunham gradients."""

    names: tuple[str, ...]
    sigma: np.ndarray
    gradients: dict[str, dict[tuple[int, int], np.ndarray]] = field(repr=False)

    @property
    def size(self) -> int:
        return len(self.names)

    def dunham_gradient(self, label: str) -> dict[tuple[int, int], np.ndarray]:
        """d Y_kl / d theta for one isotopologue (empty for an unknown label)."""
        return self.gradients.get(label, {})

    def covariance(self, jacobian: np.ndarray) -> np.ndarray:
        """J diag(sigma^2) J^T for quantities with d(quantity)/d(theta) = J (rows)."""
        jacobian = np.atleast_2d(jacobian)
        return (jacobian * self.sigma**2) @ jacobian.T


@functools.lru_cache(maxsize=8)
def library_parameters(library: Library) -> LibraryParameters:
    """Build the parameter set of a library (cached: a library does not change)."""
    names: list[str] = []
    sigmas: list[float] = []
    index: dict[str, int] = {}

    def parameter(name: str, sigma: float) -> int:
        if name not in index:
            index[name] = len(names)
            names.append(name)
            sigmas.append(sigma)
        return index[name]

    # d(constant)/d(theta) as sparse {parameter index: coefficient}
    def constant_gradient(label: str, name: str, depth: int = 0) -> dict[int, float]:
        ref = library.isotopologue(label).reference[name]
        if ref.scaled_from is None or depth > 8:
            return {parameter(f"{label}.{name}", float(ref.sigma or 0.0)): 1.0}
        out = {i: ref.scale_factor * c for i, c in constant_gradient(ref.scaled_from, name, depth + 1).items()}
        if ref.scaling_sigma > 0:
            out[parameter(f"{label}.{name}.scaling", ref.scaling_sigma)] = 1.0
        return out

    sparse: dict[str, dict[tuple[int, int], dict[int, float]]] = {}
    for iso in library.isotopologues():
        per_term: dict[tuple[int, int], dict[int, float]] = {}
        for name, ref in iso.reference.items():
            if name not in CONSTANT_TO_DUNHAM:
                continue
            k, l, sign = CONSTANT_TO_DUNHAM[name]
            per_term[(k, l)] = {i: sign * c for i, c in constant_gradient(iso.label, name).items()}
        sparse[iso.label] = per_term
    size = len(names)
    gradients: dict[str, dict[tuple[int, int], np.ndarray]] = {}
    for label, per_term in sparse.items():
        dense = {}
        for term, coefficients in per_term.items():
            vector = np.zeros(size)
            for i, c in coefficients.items():
                vector[i] = c
            dense[term] = vector
        gradients[label] = dense
    return LibraryParameters(tuple(names), np.array(sigmas), gradients)


def term_column(v_upper: np.ndarray, J_upper: np.ndarray, v_lower: np.ndarray, J_lower: np.ndarray, k: int, l: int) -> np.ndarray:
    """d(line position)/d(Y_kl): (v'+1/2)^k [J'(J'+1)]^l - (v''+1/2)^k [J''(J''+1)]^l."""
    x_up = np.asarray(J_upper, dtype=np.float64) * (np.asarray(J_upper) + 1.0)
    x_low = np.asarray(J_lower, dtype=np.float64) * (np.asarray(J_lower) + 1.0)
    return (np.asarray(v_upper) + 0.5) ** k * x_up**l - (np.asarray(v_lower) + 0.5) ** k * x_low**l


def predicted_lines(
    library: Library, label: str, v_upper: np.ndarray, J_upper: np.ndarray, v_lower: np.ndarray, J_lower: np.ndarray
) -> tuple[np.ndarray, np.ndarray]:
    """The library's positions of the given lines and d(position)/d(theta) (rows per line)."""
    parameters = library_parameters(library)
    dunham = library.isotopologue(label).dunham
    gradients = parameters.dunham_gradient(label)
    n = np.asarray(v_upper).size
    positions = np.zeros(n)
    jacobian = np.zeros((n, parameters.size))
    for (k, l), value in dunham.items():
        column = term_column(v_upper, J_upper, v_lower, J_lower, k, l)
        positions += value * column
        gradient = gradients.get((k, l))
        if gradient is not None:
            jacobian += np.outer(column, gradient)
    return positions, jacobian
