"""Band fits of assigned lines, with combination differences as an independent cross-check.

Band model (cm-1), linear in its parameters:
    nu = nu0 + B' x' - D' x'^2 + H' x'^3 - B'' x'' + D'' x''^2 - H'' x''^3,   x = J(J+1)
Centrifugal terms are chosen automatically ("significant" = |value| > 3 sigma): the sextic H
first (both free when each is significant and they differ significantly, one common H when it
is significant, none otherwise: hot or light molecules such as HF at high J need it), then D
the same way under the chosen H. Combination differences use only one state each:
    lower:  R(J-1) - P(J+1) = F''(J+1) - F''(J-1)
    upper:  R(J)   - P(J)   = F'(J+1)  - F'(J-1)
with F(J) = B x - D x^2, fitted for B (and D when significant).
"""
from __future__ import annotations

import functools
import math
from dataclasses import dataclass, field
from typing import Callable, NamedTuple

import numpy as np

from processing.estimate import Estimate
from processing.levels import R_BRANCH, upper_J
from processing.linear_fit import OUTLIER_RULE, SIGNIFICANT, SIGNIFICANT_SEXTIC, LinearFit, weighted_least_squares
from processing.results import CombinationDifferences


@dataclass(frozen=True)
class BandFit:
    """Constants of one v' <- v'' band of one isotopologue, fitted to its assigned lines."""

    isotopologue: str
    v_upper: int
    v_lower: int
    origin: Estimate
    B_upper: Estimate
    B_lower: Estimate
    D_upper: Estimate | None
    D_lower: Estimate | None
    d_model: str  # "separate D", "common D", "no D", or with library values: D_DIFFERENCE_HELD, D_HELD
    n_lines: int  # lines used (after outlier rejection)
    rms: float  # rms of obs-calc over used lines, cm-1
    chi2_reduced: float
    parameter_names: tuple[str, ...]
    covariance: np.ndarray
    correlation: np.ndarray
    J_lower: np.ndarray
    branch: np.ndarray
    observed: np.ndarray
    calc: np.ndarray
    used: np.ndarray
    rejection_rule: str = OUTLIER_RULE
    H_upper: Estimate | None = None
    H_lower: Estimate | None = None
    h_model: str = "no H"  # "separate H", "common H" or "no H"
    sigma: np.ndarray | None = None  # the line uncertainties the fit used (cm-1)
    linear_fit: LinearFit | None = field(default=None, repr=False, compare=False)  # for model references
    held: tuple[float, float, float, float] = (0.0, 0.0, 0.0, 0.0)  # (D', D'', H', H'') held, not fitted
    lower_combination: CombinationDifferences | None = None
    upper_combination: CombinationDifferences | None = None
    notes: tuple[str, ...] = field(default=())

    @property
    def residuals(self) -> np.ndarray:
        return self.observed - self.calc

    def predict(self, branch: np.ndarray, J_lower: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Positions of any lines of this band from the fitted constants, with the standard
        error of each prediction propagated from the covariance (grows outside the fitted J)."""
        return _predict(branch, J_lower, self.d_model, self.h_model, self.held, self.covariance, self._parameter_values)

    def _parameter_values(self, names: tuple[str, ...]) -> np.ndarray:
        """The fitted values behind the design columns' names."""
        estimates = {
            "origin": self.origin,
            "B_upper": self.B_upper,
            "B_lower": self.B_lower,
            "D_upper": self.D_upper,
            "D_lower": self.D_lower,
            "D": self.D_lower,
            "H_upper": self.H_upper,
            "H_lower": self.H_lower,
            "H": self.H_lower,  # the shared column: H'' (a held difference is added to H' by `held`)
        }
        values = []
        for name in names:
            estimate = estimates[name]
            assert estimate is not None
            values.append(estimate.value)
        return np.array(values)

    @property
    def label(self) -> str:
        return f"{self.isotopologue} {self.v_upper}-{self.v_lower}"


def _predict(
    branch: np.ndarray, J_lower: np.ndarray, d_model: str, h_model: str, held: tuple[float, float, float, float],
    covariance: np.ndarray, values_of: Callable[[tuple[str, ...]], np.ndarray],
) -> tuple[np.ndarray, np.ndarray]:
    """Positions of lines from a band model (`values_of(parameter names)` gives its fitted
    values), with each prediction's standard error propagated from the covariance."""
    columns = _columns_of(np.asarray(branch), np.asarray(J_lower, dtype=np.int64))
    design, names = columns.design(d_model, h_model)
    positions = design @ values_of(names) + columns.held(held)
    variance = np.einsum("ij,jk,ik->i", design, covariance, design)
    return positions, np.sqrt(np.clip(variance, 0.0, None))


def _x(J: np.ndarray) -> np.ndarray:
    J = np.asarray(J, dtype=np.float64)
    return J * (J + 1.0)


# D models that use the library's centrifugal constants (known isotopologues only): when the
# lines cannot separate D' from D'', D' - D'' (beta_e per vibrational quantum: -7e-6 cm-1 for
# HCl, which moves R(9) by ~0.07 cm-1) is held at the library's value rather than at zero;
# when they cannot determine D at all, both are held (never zero).
D_DIFFERENCE_HELD = "D'' fitted, D' - D'' from the library"
D_HELD = "D from the library"
# The same for the sextic term: H from the library, not zero (for CO to J'' 33 at 0.02 cm-1,
# H x''^3 is ~0.008 cm-1; dropped, D and B absorb it and B'' moves by 13 of its sigma).
H_DIFFERENCE_HELD = "H'' fitted, H' - H'' from the library"
H_HELD = "H from the library"
NOTHING_HELD = (0.0, 0.0, 0.0, 0.0)


def held_centrifugal(x_up: np.ndarray, x_low: np.ndarray, held: tuple[float, float, float, float]) -> np.ndarray:
    """The held centrifugal terms' part of the line positions:
    -D' x'^2 + D'' x''^2 + H' x'^3 - H'' x''^3."""
    return _BandColumns(x_up, x_low).held(held).copy()


class _BandColumns:
    """The band model's design columns for one set of lines, each computed once: a band fit
    tries several models (D, H separate, common, held) on the same lines."""

    def __init__(self, x_up: np.ndarray, x_low: np.ndarray) -> None:
        self.x_up = x_up
        self.x_low = x_low
        self.up2 = x_up**2
        self.low2 = x_low**2
        self.up3 = x_up**3
        self.low3 = x_low**3
        self._columns: dict[str, np.ndarray] = {}
        self._held: dict[tuple[float, float, float, float], np.ndarray] = {}
        self._designs: dict[tuple[str, str], tuple[np.ndarray, tuple[str, ...]]] = {}

    def held(self, held: tuple[float, float, float, float]) -> np.ndarray:
        """-D' x'^2 + D'' x''^2 + H' x'^3 - H'' x''^3 of the held values (read-only)."""
        if held not in self._held:
            d_upper, d_lower, h_upper, h_lower = held
            values = -d_upper * self.up2 + d_lower * self.low2 + h_upper * self.up3 - h_lower * self.low3
            values.flags.writeable = False
            self._held[held] = values
        return self._held[held]

    def minus_held(self, values: np.ndarray, held: tuple[float, float, float, float]) -> np.ndarray:
        """values less the held terms (values themselves when nothing is held: the same numbers)."""
        return values if held == NOTHING_HELD else values - self.held(held)

    def plus_held(self, values: np.ndarray, held: tuple[float, float, float, float]) -> np.ndarray:
        """values plus the held terms (a copy when nothing is held)."""
        return values.copy() if held == NOTHING_HELD else values + self.held(held)

    def _column(self, name: str) -> np.ndarray:
        column = self._columns.get(name)
        if column is None:
            if name == "ones":
                column = np.ones_like(self.x_up)
            elif name == "x_up":
                column = self.x_up
            elif name == "-x_low":
                column = -self.x_low
            elif name == "-up2":
                column = -self.up2
            elif name == "low2":
                column = self.low2
            elif name == "D":
                column = -self.up2 + self.low2
            elif name == "up3":
                column = self.up3
            elif name == "-low3":
                column = -self.low3
            else:  # "H"
                column = self.up3 - self.low3
            self._columns[name] = column
        return column

    def design(self, model: str, h_model: str = "no H") -> tuple[np.ndarray, tuple[str, ...]]:
        """The design matrix of a D and H model with its parameter names (read-only)."""
        if (model, h_model) not in self._designs:
            self._designs[(model, h_model)] = self._design(model, h_model)
        return self._designs[(model, h_model)]

    def _design(self, model: str, h_model: str) -> tuple[np.ndarray, tuple[str, ...]]:
        columns = ["ones", "x_up", "-x_low"]
        names: list[str] = ["origin", "B_upper", "B_lower"]
        if model == "separate D":
            columns += ["-up2", "low2"]
            names += ["D_upper", "D_lower"]
        elif model in ("common D", D_DIFFERENCE_HELD):
            columns += ["D"]
            names += ["D"]
        if h_model == "separate H":
            columns += ["up3", "-low3"]
            names += ["H_upper", "H_lower"]
        elif h_model in ("common H", H_DIFFERENCE_HELD):
            columns += ["H"]
            names += ["H"]
        design = np.empty((self.x_up.size, len(columns)))
        for i, name in enumerate(columns):
            design[:, i] = self._column(name)
        design.flags.writeable = False
        return design, tuple(names)


def _columns_of(branch: np.ndarray, J_lower: np.ndarray) -> _BandColumns:
    """The model columns of a set of lines (shared by every fit and prediction of the same
    lines in the same order: a spectrum's bands are refitted and predicted on the same sets,
    and successive spectra of one sample assign the same lines)."""
    if branch.dtype.kind == "U" and branch.shape == J_lower.shape:
        return _line_set_columns(branch.tobytes(), branch.dtype.str, J_lower.tobytes())
    return _BandColumns(_x(upper_J(branch, J_lower)), _x(J_lower))


@functools.lru_cache(maxsize=256)
def _line_set_columns(branch: bytes, branch_dtype: str, J_lower: bytes) -> _BandColumns:
    """The model columns of a set of lines given as the bytes of their branch and J'' arrays
    (cached: the assignment predicts the same sets, every line to a J'' cap, again and again;
    the columns' arrays are never written)."""
    J = np.frombuffer(J_lower, dtype=np.int64)
    return _BandColumns(_x(upper_J(np.frombuffer(branch, dtype=branch_dtype), J)), _x(J))


def _threshold(name: str) -> float:
    return SIGNIFICANT_SEXTIC if name.startswith("H") else SIGNIFICANT


def _significant(fit: LinearFit, name: str) -> bool:
    sigma = fit.sigma(name)
    return sigma > 0 and abs(fit.value(name)) > _threshold(name) * sigma


def _differ(fit: LinearFit, a: str, b: str) -> bool:
    """Both significant and significantly different from each other."""
    if not (_significant(fit, a) and _significant(fit, b)):
        return False
    i, j = fit.names.index(a), fit.names.index(b)
    covariance = fit.covariance
    var = covariance[i, i] + covariance[j, j] - 2 * covariance[i, j]
    return var > 0 and abs(fit.value(a) - fit.value(b)) > _threshold(a) * math.sqrt(var)


_SIZES = {"separate D": 2, "common D": 1, "no D": 0, D_DIFFERENCE_HELD: 1, D_HELD: 0,
          "separate H": 2, "common H": 1, "no H": 0, H_DIFFERENCE_HELD: 1, H_HELD: 0}


def _choose_band_fit(
    columns: _BandColumns,
    observed: np.ndarray,
    sigma: np.ndarray,
    sigma_known: bool,
    sextic: bool = True,
    library: tuple[float, float, float, float] | None = None,
) -> tuple[LinearFit, str, str, tuple[float, float, float, float]]:
    """(fit, D model, H model, held (D', D'', H', H'')): H chosen first with separate D (not
    floated when `sextic` is False), then D under that H. With the `library`'s (D', D'', H',
    H''), what the lines cannot determine is held at the library's values (the difference
    between upper and lower state, or both), never at zero; without it (an unidentified band)
    a term not determined is left out."""
    n = observed.size
    tried: dict[tuple[str, str, tuple[float, float, float, float]], LinearFit | None] = {}

    def attempt(d_model: str, h_model: str, held: tuple[float, float, float, float] = NOTHING_HELD) -> LinearFit | None:
        """One model's fit (each model fitted once: the H choice's trial is often the D
        choice's first)."""
        key = (d_model, h_model, held)
        if key not in tried:
            if n < 3 + _SIZES[d_model] + _SIZES[h_model] + 2:
                tried[key] = None
            else:
                design, names = columns.design(d_model, h_model)
                tried[key] = weighted_least_squares(design, columns.minus_held(observed, held), sigma, names, sigma_known=sigma_known)
        return tried[key]

    h_model, h_held = "no H", (0.0, 0.0)
    trial = attempt("separate D", "separate H") if sextic else None
    if trial is not None and _differ(trial, "H_upper", "H_lower"):
        h_model = "separate H"
    elif sextic and library is not None:
        difference = (library[2] - library[3], 0.0)
        trial = attempt("separate D", H_DIFFERENCE_HELD, (0.0, 0.0) + difference)
        h_model, h_held = (H_DIFFERENCE_HELD, difference) if trial is not None and _significant(trial, "H") else (H_HELD, library[2:])
    elif library is not None:
        h_model, h_held = H_HELD, library[2:]
    elif sextic:
        trial = attempt("separate D", "common H")
        if trial is not None and _significant(trial, "H"):
            h_model = "common H"
    trial = attempt("separate D", h_model, (0.0, 0.0) + h_held)
    if trial is not None and _differ(trial, "D_upper", "D_lower"):
        return trial, "separate D", h_model, (0.0, 0.0) + h_held
    if library is not None:
        held = (library[0] - library[1], 0.0) + h_held
        trial = attempt(D_DIFFERENCE_HELD, h_model, held)
        if trial is not None and (_significant(trial, "D") or _SIZES[h_model]):
            return trial, D_DIFFERENCE_HELD, h_model, held
        held = library[:2] + h_held
        trial = attempt("no D", h_model, held)
        if trial is not None:
            return trial, D_HELD, h_model, held
    trial = attempt("common D", h_model)
    if trial is not None and (_significant(trial, "D") or h_model != "no H"):  # H needs a D beside it
        return trial, "common D", h_model, NOTHING_HELD
    design, names = columns.design("no D")
    return weighted_least_squares(design, observed, sigma, names, sigma_known=sigma_known), "no D", "no H", NOTHING_HELD


@dataclass(frozen=True)
class BandModel:
    """A band's fitted line-position model: the least-squares fit with the D and H models
    chosen and the terms held. What the assignment iterates with; `fit_band` adds the named
    constants, their correlations and the combination-difference cross-checks."""

    linear_fit: LinearFit
    d_model: str
    h_model: str
    held: tuple[float, float, float, float]
    branch: np.ndarray  # the lines fitted
    J_lower: np.ndarray
    observed: np.ndarray
    sigma: np.ndarray
    rms: float  # of the used lines, cm-1
    n_lines: int  # lines used (after outlier rejection)
    columns: _BandColumns = field(repr=False, compare=False)

    def predict(self, branch: np.ndarray, J_lower: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Positions of any lines of this band with their standard errors (see
        `BandFit.predict`)."""
        return _predict(branch, J_lower, self.d_model, self.h_model, self.held, self.linear_fit.covariance,
                        lambda names: self.linear_fit.values)


def fit_band_model(
    isotopologue: str,
    v_upper: int,
    v_lower: int,
    branch: np.ndarray,
    J_lower: np.ndarray,
    observed_cm1: np.ndarray,
    sigma_cm1: np.ndarray,
    sigma_known: bool = True,
    sextic: bool = True,
    library_centrifugal: tuple[float, float, float, float] | None = None,
) -> BandModel:
    """The band model of `fit_band` fitted to a band's assigned lines (at least 4), without
    naming its constants or cross-checking them."""
    branch = np.asarray(branch)
    J_lower = np.asarray(J_lower, dtype=np.int64)
    observed = np.asarray(observed_cm1, dtype=np.float64)
    sigma = np.asarray(sigma_cm1, dtype=np.float64)
    if observed.size < 4:
        raise ValueError(f"{isotopologue} {v_upper}-{v_lower}: {observed.size} lines, need at least 4")
    columns = _columns_of(branch, J_lower)
    fit, model, h_model, held = _choose_band_fit(columns, observed, sigma, sigma_known, sextic, library_centrifugal)
    return BandModel(fit, model, h_model, held, branch, J_lower, observed, sigma, fit.rms, fit.n_used, columns)


def fit_band(
    isotopologue: str,
    v_upper: int,
    v_lower: int,
    branch: np.ndarray,
    J_lower: np.ndarray,
    observed_cm1: np.ndarray,
    sigma_cm1: np.ndarray,
    sigma_known: bool = True,
    cross_check: bool = True,
    sextic: bool = True,
    library_centrifugal: tuple[float, float, float, float] | None = None,
) -> BandFit:
    """Weighted least-squares fit of one band's assigned lines (at least 4 lines).

    `sigma_known=False` when the line uncertainties are nominal (see `linear_fit`);
    `cross_check=False` skips the combination-difference fits; `sextic=False` leaves H out
    (the assignment iterates with `fit_band_model` so: a cubic term extrapolates predictions to
    unassigned J wildly when a few positions are still off); `library_centrifugal` = the
    library's (D', D'', H', H'') of the band, held where the lines cannot determine them (see
    D_DIFFERENCE_HELD, H_DIFFERENCE_HELD)."""
    band_model = fit_band_model(isotopologue, v_upper, v_lower, branch, J_lower, observed_cm1, sigma_cm1, sigma_known, sextic, library_centrifugal)
    fit, model, h_model, held = band_model.linear_fit, band_model.d_model, band_model.h_model, band_model.held
    branch, J_lower, observed, sigma = band_model.branch, band_model.J_lower, band_model.observed, band_model.sigma

    def estimate(name: str) -> Estimate:
        return Estimate(fit.value(name), fit.sigma(name) if fit.dof > 0 else None)

    def pair(choice: str, letter: str) -> tuple[Estimate | None, Estimate | None]:
        """(upper, lower) of a centrifugal term: separate, common or none."""
        if choice == f"separate {letter}":
            return estimate(f"{letter}_upper"), estimate(f"{letter}_lower")
        if choice == f"common {letter}":
            return estimate(letter), estimate(letter)
        return None, None

    def held_pair(choice: str, letter: str, upper_held: float, lower_held: float) -> tuple[Estimate | None, Estimate | None]:
        """(upper, lower) with the held parts added: a held difference, or both held."""
        if choice.startswith(f"{letter}'' fitted"):
            lower = estimate(letter)
            return Estimate(lower.value + upper_held, lower.sigma), lower
        if choice == f"{letter} from the library":
            return Estimate(upper_held, None), Estimate(lower_held, None)
        return pair(choice, letter)

    D_upper, D_lower = held_pair(model, "D", held[0], held[1])
    H_upper, H_lower = held_pair(h_model, "H", held[2], held[3])
    used = fit.used
    lower_cd = upper_cd = None
    if cross_check:
        every = fit.n_used == observed.size
        tables = _branch_tables(*((branch, J_lower, observed, sigma) if every else (branch[used], J_lower[used], observed[used], sigma[used])))
        lower_cd = _fit_pairs("lower", v_lower, _pairs(tables, "lower"), sigma_known)
        upper_cd = _fit_pairs("upper", v_upper, _pairs(tables, "upper"), sigma_known)
    return BandFit(
        isotopologue=isotopologue,
        v_upper=v_upper,
        v_lower=v_lower,
        origin=estimate("origin"),
        B_upper=estimate("B_upper"),
        B_lower=estimate("B_lower"),
        D_upper=D_upper,
        D_lower=D_lower,
        d_model=model,
        n_lines=band_model.n_lines,
        rms=band_model.rms,
        chi2_reduced=fit.chi2_reduced,
        parameter_names=fit.names,
        covariance=fit.covariance,
        correlation=fit.correlation,
        J_lower=J_lower,
        branch=branch,
        observed=observed,
        calc=band_model.columns.plus_held(fit.calc, held),
        used=fit.used,
        H_upper=H_upper,
        H_lower=H_lower,
        h_model=h_model,
        sigma=sigma,
        linear_fit=fit,
        held=held,
        lower_combination=lower_cd,
        upper_combination=upper_cd,
    )


class _BranchTables(NamedTuple):
    """A band's lines by branch (row 0 R, row 1 P) and J'': present, position, sigma."""

    present: np.ndarray
    observed: np.ndarray
    sigma: np.ndarray


def _branch_tables(branch: np.ndarray, J_lower: np.ndarray, observed: np.ndarray, sigma: np.ndarray) -> _BranchTables:
    J_lower = np.asarray(J_lower, dtype=np.int64)
    size = int(J_lower.max()) + 3 if J_lower.size else 2
    row = np.where(np.asarray(branch) == R_BRANCH, 0, 1)
    present, table, table_sigma = np.zeros((2, size), dtype=bool), np.zeros((2, size)), np.zeros((2, size))
    # one line per branch and J'' in a band
    present[row, J_lower] = True
    table[row, J_lower] = observed
    table_sigma[row, J_lower] = sigma
    return _BranchTables(present, table, table_sigma)


def _pairs(tables: _BranchTables, state: str) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """`combination_difference_pairs` from a band's branch tables."""
    size = tables.present.shape[1]
    # J = 1 .. size - 2: R(J-1) and P(J+1) for the lower state, R(J) and P(J) for the upper
    r, p = (slice(0, size - 2), slice(2, size)) if state == "lower" else (slice(1, size - 1), slice(1, size - 1))
    pair = tables.present[0, r] & tables.present[1, p]
    J = np.arange(1, size - 1, dtype=np.int64)[pair]
    difference = (tables.observed[0, r] - tables.observed[1, p])[pair]
    return J, difference, np.hypot(tables.sigma[0, r], tables.sigma[1, p])[pair]


def combination_difference_pairs(
    state: str, branch: np.ndarray, J_lower: np.ndarray, observed: np.ndarray, sigma: np.ndarray
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """(J, difference, sigma) of every available pair, by J. J is that of the state concerned:
    lower: Delta2F''(J) = R(J-1) - P(J+1);  upper: Delta2F'(J) = R(J) - P(J)."""
    observed = np.asarray(observed, dtype=np.float64)
    sigma = np.asarray(sigma, dtype=np.float64)
    return _pairs(_branch_tables(branch, J_lower, observed, sigma), state)


@functools.lru_cache(maxsize=256)
def _difference_designs(J_bytes: bytes) -> tuple[np.ndarray, np.ndarray]:
    """The combination-difference designs (B) and (B, D) of the pairs' J (given as the bytes
    of an int64 array; cached, read-only): F(J+1) - F(J-1) with F = B x - D x^2."""
    J = np.frombuffer(J_bytes, dtype=np.int64)
    x_plus = _x(J + 1)
    x_minus = _x(J - 1)
    b_column = x_plus - x_minus  # = 4J + 2
    d_column = -(x_plus**2 - x_minus**2)
    b_design, bd_design = b_column[:, None], np.column_stack([b_column, d_column])
    b_design.flags.writeable = False
    bd_design.flags.writeable = False
    return b_design, bd_design


def _fit_pairs(state: str, v: int, pairs: tuple[np.ndarray, np.ndarray, np.ndarray], sigma_known: bool) -> CombinationDifferences | None:
    """B (and D if significant) of the `state` ("lower"/"upper") level from its combination
    differences (`combination_difference_pairs`); None with < 3 pairs."""
    J, difference, diff_sigma = pairs
    if J.size < 3:
        return None
    b_design, bd_design = _difference_designs(np.asarray(J, dtype=np.int64).tobytes())
    fit: LinearFit | None = None
    if J.size >= 4:
        trial = weighted_least_squares(bd_design, difference, diff_sigma, ("B", "D"), sigma_known=sigma_known)
        if _significant(trial, "D"):
            fit = trial
    if fit is None:
        fit = weighted_least_squares(b_design, difference, diff_sigma, ("B",), sigma_known=sigma_known)
    has_d = "D" in fit.names
    sig = (lambda name: fit.sigma(name) if fit.dof > 0 else None)
    return CombinationDifferences(
        state=state,
        v=v,
        B=Estimate(fit.value("B"), sig("B")),
        D=Estimate(fit.value("D"), sig("D")) if has_d else None,
        n_pairs=fit.n_used,
        rms=fit.rms,
    )
