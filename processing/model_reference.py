"""Each fitted quantity beside the reference for the model that was fitted.

A fit with a truncated model (two vibrational levels, no gamma_e, no H_v, ...) does not
estimate the handbook constants: its parameters absorb the terms it lacks. The reference it
must be compared with is what the same model, fitted to the same lines with the same weights,
gives on the library's own positions of those lines (computed from the library's full
constant set): `reference = operator @ library_positions`. Terms the data cannot float are
held at their library values (`held`), their uncertainty propagated into the fitted values.

Library errors enter through `processing.library_uncertainty` (independent parameters theta).
With S = d(fitted)/d(theta) (through held terms) and R = d(reference)/d(theta):
    covariance of the fitted values    C_stat + S Sigma S^T
    covariance of the reference        R Sigma R^T
    covariance of fitted - reference   C_stat + (S - R) Sigma (S - R)^T
(held terms cancel in the difference: fitted - reference = operator (y - library positions)).
z = (f(fitted) - f(reference)) / that last sigma, for any function f of the parameters.
"""
from __future__ import annotations

import functools
import math
from dataclasses import dataclass, field
from typing import Callable

import numpy as np

from processing.library_uncertainty import LibraryParameters
from processing.linear_fit import LinearFit


@dataclass(frozen=True)
class Compared:
    """A fitted quantity and the reference for its model: value +- sigma against reference
    +- reference_sigma; z = (value - reference) / combined_sigma."""

    value: float
    sigma: float | None
    reference: float | None = None
    reference_sigma: float | None = None
    z: float | None = None
    combined_sigma: float | None = None



def _gradient(function: Callable[[np.ndarray], float], values: np.ndarray) -> np.ndarray:
    """Numerical gradient (central differences, relative step 1e-6)."""
    gradient = np.zeros(values.size)
    for i in range(values.size):
        step = 1e-6 * max(abs(values[i]), 1e-12)
        up, down = values.copy(), values.copy()
        up[i] += step
        down[i] -= step
        gradient[i] = (float(function(up)) - float(function(down))) / (2 * step)
    return gradient


def _quadratic(gradient: np.ndarray, covariance: np.ndarray) -> float:
    return math.sqrt(max(float(gradient @ covariance @ gradient), 0.0))


@dataclass(frozen=True)
class FittedModel:
    """Fitted parameters (floated, then held) with what is needed to compare any function of
    them with its model reference. `reference` is None when the library has no such species."""

    names: tuple[str, ...]
    values: np.ndarray
    statistical: np.ndarray  # from the data (held rows and columns are zero)
    library: LibraryParameters | None
    sensitivity: np.ndarray  # d values / d theta
    reference: np.ndarray | None = None
    reference_sensitivity: np.ndarray | None = None
    systematic: np.ndarray | None = None  # model systematics added to the fitted covariance
    held: tuple[str, ...] = field(default=())
    sigma_determined: bool = True  # False when the fit had no degrees of freedom

    def index(self, name: str) -> int | None:
        return self.names.index(name) if name in self.names else None

    def covariance(self) -> np.ndarray:
        """Covariance of the fitted values: statistical + library (through held terms) +
        model systematics (read-only; computed once)."""
        return self._covariances[0]

    def difference_covariance(self) -> np.ndarray:
        """Covariance of fitted - reference (read-only; computed once)."""
        return self._covariances[1]

    def reference_covariance(self) -> np.ndarray | None:
        """Covariance of the reference values (None without a library; computed once)."""
        return self._covariances[2]

    @functools.cached_property
    def _covariances(self) -> tuple[np.ndarray, np.ndarray, np.ndarray | None]:
        # Every quantity derived from the model needs these; a frozen instance computes them
        # once (cached_property writes the instance dict, which frozen does not guard).
        fitted = self.statistical.copy()
        if self.library is not None and self.sensitivity.size:
            fitted = fitted + self.library.covariance(self.sensitivity)
        if self.systematic is not None:
            fitted = fitted + self.systematic
        difference = self.statistical.copy()
        reference = None
        if self.library is not None and self.reference_sensitivity is not None:
            difference = difference + self.library.covariance(self.sensitivity - self.reference_sensitivity)
            reference = self.library.covariance(self.reference_sensitivity)
        for matrix in (fitted, difference, reference):
            if matrix is not None:
                matrix.flags.writeable = False
        return fitted, difference, reference

    def quantity(self, function: Callable[[np.ndarray], float], gradient: np.ndarray | None = None) -> Compared:
        """`function` of the parameter vector, fitted and referenced. `gradient`, when given,
        is the function's exact (constant) gradient: a linear function needs no differences."""
        value = float(function(self.values))
        fitted_gradient = _gradient(function, self.values) if gradient is None else gradient
        sigma = _quadratic(fitted_gradient, self.covariance()) if self.sigma_determined else None
        if self.reference is None:
            return Compared(value, sigma)
        reference = float(function(self.reference))
        reference_covariance = self.reference_covariance()
        reference_sigma = None
        if reference_covariance is not None:
            reference_gradient = _gradient(function, self.reference) if gradient is None else gradient
            reference_sigma = _quadratic(reference_gradient, reference_covariance)
        combined = _quadratic(fitted_gradient, self.difference_covariance())
        z = (value - reference) / combined if self.sigma_determined and combined > 0 else None
        return Compared(value, sigma, reference, reference_sigma, z, combined)

    def parameter(self, name: str) -> Compared:
        i = self.names.index(name)
        unit = np.zeros(len(self.names))
        unit[i] = 1.0
        return self.quantity(lambda p, i=i: p[i], unit)

    def linear(self, weights: np.ndarray) -> Compared:
        """The linear combination weights @ parameters, fitted and referenced."""
        weights = np.asarray(weights, dtype=np.float64)
        return self.quantity(lambda p: float(weights @ p), weights)


def fitted_model(
    fit: LinearFit,
    library: LibraryParameters | None,
    library_positions: np.ndarray | None = None,
    library_jacobian: np.ndarray | None = None,
    held_names: tuple[str, ...] = (),
    held_columns: np.ndarray | None = None,
    held_values: np.ndarray | None = None,
    held_gradients: np.ndarray | None = None,
    systematic: np.ndarray | None = None,
) -> FittedModel:
    """A linear fit (rows = lines) with its held terms and, when the library knows the
    species, its model reference.

    held_columns (rows x held): design columns of the held terms, whose contribution
    held_columns @ held_values was subtracted from the data before the fit; held_gradients
    (held x theta): d(held value)/d(theta)."""
    n_fit = len(fit.names)
    n_held = len(held_names)
    n_theta = library.size if library is not None else 0
    operator = fit.operator if fit.operator is not None else np.zeros((n_fit, 0))
    columns = held_columns if held_columns is not None else np.zeros((operator.shape[1], 0))
    held = held_values if held_values is not None else np.zeros(0)
    held_grad = held_gradients if held_gradients is not None else np.zeros((n_held, n_theta))
    values = np.concatenate([fit.values, held])
    statistical = np.zeros((n_fit + n_held, n_fit + n_held))
    statistical[:n_fit, :n_fit] = fit.covariance
    sensitivity = np.vstack([-operator @ columns @ held_grad, held_grad]) if n_theta else np.zeros((n_fit + n_held, 0))
    full_systematic = None
    if systematic is not None:
        full_systematic = np.zeros_like(statistical)
        full_systematic[:n_fit, :n_fit] = systematic
    reference = reference_sensitivity = None
    if library is not None and library_positions is not None and library_jacobian is not None:
        target = library_positions - columns @ held
        reference = np.concatenate([operator @ target, held])
        reference_sensitivity = np.vstack([operator @ (library_jacobian - columns @ held_grad), held_grad])
    return FittedModel(
        names=tuple(fit.names) + tuple(held_names),
        values=values,
        statistical=statistical,
        library=library,
        sensitivity=sensitivity,
        reference=reference,
        reference_sensitivity=reference_sensitivity,
        systematic=full_systematic,
        held=tuple(held_names),
        sigma_determined=fit.dof > 0,
    )


# ------------------------------------------------------------------- reading the JSON form
