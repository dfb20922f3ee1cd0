"""Weighted linear least squares with honest standard errors and a stated outlier rule.

Shared by the band fits, the combination-difference fits and the molecular-constant fits.
Standard errors are sqrt(diag(C)) with C = (A^T W A)^-1 scaled by max(1, chi2/dof): the
line uncertainties are trusted as a floor, and inflated when the scatter says they are too
small (Birge-ratio scaling; common practice in spectroscopic fits). When the uncertainties are
only nominal, C is scaled by chi2/dof itself.
"""
from __future__ import annotations

from dataclasses import dataclass
from typing import NamedTuple

import numpy as np

from processing.order_stats import median

# An optional term (centrifugal D, sextic H, gamma_e, beta_e) joins a model when |value| exceeds
# this many standard errors. The sextic term is strongly correlated with D and B, and line
# positions carry small J-dependent systematics (profile-model bias, neighbours' wings) that a
# 3-sigma test takes for H in ~5% of noise realisations, shifting B by ~4 sigma (Monte-Carlo,
# HCl at 0.5 cm-1): H must stand out more clearly.
SIGNIFICANT = 3.0
SIGNIFICANT_SEXTIC = 5.0

OUTLIER_RULE = (
    "worst line removed, one at a time, while |obs-calc|/sigma > 4 x max(1, 1.4826 x median "
    "|obs-calc|/sigma); at most 20% of the lines, keeping at least parameters + 2"
)


@dataclass(frozen=True)
class LinearFit:
    """Result of `weighted_least_squares`."""

    names: tuple[str, ...]
    values: np.ndarray
    covariance: np.ndarray  # scaled as described in the module docstring
    residuals: np.ndarray  # obs - calc for every input row (rejected rows included)
    calc: np.ndarray
    used: np.ndarray  # bool per row: False where the outlier rule removed it
    chi2_reduced: float  # of the used rows; nan when dof = 0
    dof: int
    # values = operator @ y: the weighted least-squares solution as a linear map of the data
    # (zero columns for rejected rows); lets a caller fit the same model, rows and weights to
    # other numbers (e.g. the library's own positions of the same lines)
    operator: np.ndarray | None = None

    @property
    def sigmas(self) -> np.ndarray:
        """Standard errors of the values (read-only; computed once)."""
        sigmas = self.__dict__.get("_sigmas")
        if sigmas is None:
            sigmas = np.sqrt(np.maximum(self.covariance.diagonal(), 0.0))  # (clip with no upper bound, without its checks)
            sigmas.flags.writeable = False
            self.__dict__["_sigmas"] = sigmas  # a frozen instance's cache, as cached_property does
        return sigmas

    @property
    def correlation(self) -> np.ndarray:
        sig = self.sigmas
        with np.errstate(invalid="ignore", divide="ignore"):
            corr = self.covariance / np.outer(sig, sig)
        corr[~np.isfinite(corr)] = 0.0
        return corr

    @property
    def n_used(self) -> int:
        """Rows used (not rejected): the degrees of freedom plus the parameters."""
        return self.dof + len(self.names)

    @property
    def rms(self) -> float:
        """Unweighted rms of obs-calc over the used rows, in the data's unit."""
        r = self.residuals if self.n_used == self.residuals.size else self.residuals[self.used]
        return float(np.sqrt((r**2).sum() / r.size)) if r.size else float("nan")

    def value(self, name: str) -> float:
        return float(self.values[self.names.index(name)])

    def sigma(self, name: str) -> float:
        return float(self.sigmas[self.names.index(name)])


class _Solution(NamedTuple):
    """One SVD solution of the weighted, column-scaled problem (see `_solve`)."""

    params: np.ndarray
    u_t: np.ndarray  # U transposed
    v_inverse: np.ndarray  # V diag(1/s) (dropped directions zero)
    sqrt_w: np.ndarray
    scale: np.ndarray

    def operator(self) -> np.ndarray:
        """parameters = operator @ y."""
        return ((self.v_inverse @ self.u_t) * self.sqrt_w) / self.scale[:, None]

    def covariance(self) -> np.ndarray:
        """Unscaled covariance (A^T W A)^-1."""
        return (self.v_inverse @ self.v_inverse.T) / (self.scale[:, None] * self.scale)


def _solve(design: np.ndarray, y: np.ndarray, weights: np.ndarray) -> _Solution:
    """The weighted problem solved from one SVD of the column-scaled design (singular
    directions below 1e-12 of the largest are dropped); the operator and covariance are
    formed only when asked (an outlier pass needs the parameters alone)."""
    sqrt_w = np.sqrt(weights)
    a = design * sqrt_w[:, None]
    scale = np.sqrt(np.einsum("ij,ij->j", a, a))
    if not scale.all():
        scale[scale == 0] = 1.0
    u, singular, vt = np.linalg.svd(a / scale, full_matrices=False)
    if singular.size and singular[-1] > 1e-12 * singular[0]:
        inverse = 1.0 / singular  # every direction kept (singular values descend)
    else:
        inverse = np.zeros_like(singular)
        if singular.size:
            np.divide(1.0, singular, out=inverse, where=singular > 1e-12 * singular[0])
    v_inverse = vt.T * inverse
    u_t = u.T
    params = (v_inverse @ (u_t @ (sqrt_w * y))) / scale
    return _Solution(params, u_t, v_inverse, sqrt_w, scale)


def weighted_least_squares(
    design: np.ndarray,
    y: np.ndarray,
    sigma: np.ndarray,
    names: tuple[str, ...],
    reject_outliers: bool = True,
    sigma_known: bool = True,
) -> LinearFit:
    """Fit y = design @ p with weights 1/sigma^2; optionally apply `OUTLIER_RULE`.

    `sigma_known=False` says the sigmas are only relative weights (e.g. a line list with no
    stated uncertainties): the covariance is then scaled by chi2/dof in both directions."""
    design = np.asarray(design, dtype=np.float64)
    y = np.asarray(y, dtype=np.float64)
    sigma = np.asarray(sigma, dtype=np.float64)
    n_rows, n_params = design.shape
    if n_rows < n_params:
        raise ValueError(f"{n_rows} data for {n_params} parameters")
    used = np.ones(n_rows, dtype=bool)
    weights = 1.0 / sigma**2
    max_rejections = int(0.2 * n_rows) if reject_outliers else 0
    n_rejected = 0
    while True:
        all_rows = n_rejected == 0
        solution = _solve(design if all_rows else design[used], y if all_rows else y[used], weights if all_rows else weights[used])
        params = solution.params
        calc = design @ params
        residuals = y - calc
        dof = n_rows - n_rejected - n_params
        if n_rejected >= max_rejections or dof < 2:
            break
        normalised = np.abs(residuals) / sigma
        candidates = np.where(used, normalised, -np.inf) if n_rejected else normalised
        worst = int(candidates.argmax())
        largest = candidates[worst]
        limit = 4.0 * max(1.0, 1.4826 * median(normalised[used] if n_rejected else normalised))
        if largest <= limit:
            break
        used[worst] = False
        n_rejected += 1
    chi2 = float(((residuals[used] / sigma[used] if n_rejected else residuals / sigma) ** 2).sum())
    chi2_reduced = chi2 / dof if dof > 0 else float("nan")
    if dof <= 0:
        inflation = 1.0
    elif sigma_known:
        inflation = max(1.0, chi2_reduced)
    else:
        inflation = chi2_reduced
    if n_rejected:
        operator = np.zeros((n_params, n_rows))
        operator[:, used] = solution.operator()
    else:
        operator = solution.operator()
    return LinearFit(
        names=tuple(names),
        values=params,
        covariance=solution.covariance() * inflation if inflation != 1.0 else solution.covariance(),
        residuals=residuals,
        calc=calc,
        used=used,
        chi2_reduced=chi2_reduced,
        dof=dof,
        operator=operator,
    )
