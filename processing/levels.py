"""Term values and line positions of a diatomic molecule: the one place for J and m numbering.

Dunham expansion (all in cm-1):
    E(v, J) = sum_kl Y_kl (v + 1/2)^k [J(J+1)]^l
with Y10 = omega_e, Y20 = -omega_e x_e, Y30 = omega_e y_e, Y01 = B_e, Y11 = -alpha_e,
Y21 = gamma_e, Y02 = -D_e, Y12 = -beta_e, Y03 = H_e.

Branch bookkeeping (a line is labelled by its lower-state J, "J''"):
    R(J''):  J' = J'' + 1,  m = J'' + 1   (m = 1, 2, 3, ...)
    P(J''):  J' = J'' - 1,  m = -J''      (m = -1, -2, -3, ...)
There is no line at m = 0 (the band origin gap).
"""
from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass

import numpy as np

DunhamCoefficients = Mapping[tuple[int, int], float]

# Traditional constant name -> (k, l, sign) so that Y_kl = sign * constant.
CONSTANT_TO_DUNHAM: dict[str, tuple[int, int, float]] = {
    "omega_e": (1, 0, +1.0),
    "omega_e_x_e": (2, 0, -1.0),
    "omega_e_y_e": (3, 0, +1.0),
    "omega_e_z_e": (4, 0, +1.0),
    "B_e": (0, 1, +1.0),
    "alpha_e": (1, 1, -1.0),
    "gamma_e": (2, 1, +1.0),
    "D_e": (0, 2, -1.0),
    "beta_e": (1, 2, -1.0),
    "H_e": (0, 3, +1.0),
}

P_BRANCH = "P"
R_BRANCH = "R"


def dunham_from_constants(constants: Mapping[str, float]) -> dict[tuple[int, int], float]:
    """Y_kl from traditional constants; names not in `CONSTANT_TO_DUNHAM` are ignored."""
    coefficients: dict[tuple[int, int], float] = {}
    for name, value in constants.items():
        if name in CONSTANT_TO_DUNHAM and value is not None:
            k, l, sign = CONSTANT_TO_DUNHAM[name]
            coefficients[(k, l)] = sign * float(value)
    return coefficients


def term_value(dunham: DunhamCoefficients, v: np.ndarray | int, J: np.ndarray | int) -> np.ndarray:
    """E(v, J) in cm-1 (relative to the potential minimum); broadcasts over v and J.

    Summed as sum_l [J(J+1)]^l sum_k Y_kl (v+1/2)^k: for one v (the common case) the inner
    sums are numbers and only one array operation per power of J(J+1) remains."""
    # one v (the common case): the inner sums in Python floats, the same IEEE operations as
    # numpy's scalars (pow from the C library in both), without numpy's per-scalar overhead
    vib = float(v) + 0.5 if isinstance(v, (int, np.integer)) else np.asarray(v, dtype=np.float64) + 0.5
    x = np.asarray(J, dtype=np.float64)
    x = x * (x + 1.0)
    by_power: dict[int, np.ndarray | float] = {}
    for (k, l), y_kl in dunham.items():
        by_power[l] = by_power.get(l, 0.0) + y_kl * vib**k
    total = np.zeros(np.broadcast(vib, x).shape, dtype=np.float64)
    power: np.ndarray | float = 1.0
    for l in range(max(by_power, default=-1) + 1):
        if l in by_power:
            total = total + by_power[l] * power
        power = power * x
    return total


def dunham_key(dunham: DunhamCoefficients) -> tuple[tuple[tuple[int, int], float], ...]:
    """A hashable form of a set of Dunham coefficients (for caches)."""
    return tuple(sorted(dunham.items()))


def rotational_constant(dunham: DunhamCoefficients, v: int) -> float:
    """B_v = sum_k Y_k1 (v+1/2)^k, cm-1."""
    return float(sum(y * (v + 0.5) ** k for (k, l), y in dunham.items() if l == 1))


def centrifugal_constant(dunham: DunhamCoefficients, v: int) -> float:
    """D_v = -sum_k Y_k2 (v+1/2)^k, cm-1 (positive for a normal molecule)."""
    return float(-sum(y * (v + 0.5) ** k for (k, l), y in dunham.items() if l == 2))


def sextic_constant(dunham: DunhamCoefficients, v: int) -> float:
    """H_v = sum_k Y_k3 (v+1/2)^k, cm-1."""
    return float(sum(y * (v + 0.5) ** k for (k, l), y in dunham.items() if l == 3))


def band_origin(dunham: DunhamCoefficients, v_upper: int, v_lower: int) -> float:
    """nu0 = G(v') - G(v''), cm-1."""
    return float(term_value(dunham, v_upper, 0) - term_value(dunham, v_lower, 0))


def m_from_branch(branch: np.ndarray | str, J_lower: np.ndarray | int) -> np.ndarray:
    """Running index m: R(J'') -> J''+1, P(J'') -> -J''."""
    J = np.asarray(J_lower, dtype=np.int64)
    is_r = np.asarray(branch) == R_BRANCH
    return np.where(is_r, J + 1, -J)


def m_of_line(branch: str, J_lower: int) -> int:
    """`m_from_branch` of one line, as a Python int."""
    return int(J_lower) + 1 if branch == R_BRANCH else -int(J_lower)


def band_m(J_max: int) -> np.ndarray:
    """m of every P(1..J_max) and R(0..J_max) line, ascending: -J_max..-1, 1..J_max+1."""
    return np.concatenate([np.arange(-J_max, 0), np.arange(1, J_max + 2)])


def branch_from_m(m: np.ndarray | int) -> tuple[np.ndarray, np.ndarray]:
    """Inverse of `m_from_branch`: (branch array of "P"/"R", J'' array). m must be non-zero."""
    m_values = np.asarray(m, dtype=np.int64)
    if np.any(m_values == 0):
        raise ValueError("m = 0 is the band-origin gap: no line has it")
    branch = np.where(m_values > 0, R_BRANCH, P_BRANCH)
    J_lower = np.where(m_values > 0, m_values - 1, -m_values)
    return branch, J_lower


def upper_J(branch: np.ndarray | str, J_lower: np.ndarray | int) -> np.ndarray:
    """J' of a line: J''+1 for R, J''-1 for P."""
    J = np.asarray(J_lower, dtype=np.int64)
    return np.where(np.asarray(branch) == R_BRANCH, J + 1, J - 1)


@dataclass(frozen=True)
class BandLines:
    """P and R line positions of one v' <- v'' band (arrays share one order: ascending m)."""

    v_upper: int
    v_lower: int
    m: np.ndarray
    branch: np.ndarray  # "P" or "R"
    J_lower: np.ndarray
    J_upper: np.ndarray
    wavenumber_cm1: np.ndarray
    lower_energy_cm1: np.ndarray  # E(v'', J'') above E(0, 0)

    def span_to(self, J_max: int) -> slice:
        """Where the lines P(J_max)..R(J_max) lie in this band's arrays (a run of its m order)."""
        return slice(int(np.searchsorted(self.m, -J_max)), int(np.searchsorted(self.m, J_max + 1, side="right")))

    def part(self, span: slice) -> BandLines:
        """The lines in `span` of this band's arrays, as views."""
        return BandLines(self.v_upper, self.v_lower, self.m[span], self.branch[span], self.J_lower[span],
                         self.J_upper[span], self.wavenumber_cm1[span], self.lower_energy_cm1[span])


def band_lines(
    dunham: DunhamCoefficients, v_upper: int, v_lower: int, J_max: int
) -> BandLines:
    """Every P(1..J_max) and R(0..J_max) line of the band, ordered by m (= by wavenumber near
    the origin). Positions are exact differences of Dunham term values."""
    if v_upper <= v_lower:
        raise ValueError(f"absorption band needs v' > v'', got {v_upper} <- {v_lower}")
    if J_max < 1:
        raise ValueError("J_max must be at least 1")
    m = band_m(J_max)
    branch, J_lower = branch_from_m(m)
    J_up = upper_J(branch, J_lower)
    lower = term_value(dunham, v_lower, J_lower)
    upper = term_value(dunham, v_upper, J_up)
    ground = term_value(dunham, 0, 0)
    return BandLines(
        v_upper=v_upper,
        v_lower=v_lower,
        m=m,
        branch=branch,
        J_lower=J_lower,
        J_upper=J_up,
        wavenumber_cm1=upper - lower,
        lower_energy_cm1=lower - ground,
    )


def band_position_from_constants(
    origin: float, B_upper: float, B_lower: float, D_upper: float, D_lower: float,
    m: np.ndarray,
) -> np.ndarray:
    """nu(m) = nu0 + (B'+B'')m + (B'-B'')m^2 - 2(D'+D'')m^3 - (D'-D'')m^2(m^2+1), cm-1.

    Exact for the band model nu = nu0 + F'(J') - F''(J'') with F(J) = B J(J+1) - D [J(J+1)]^2
    (the m^2 part of the last term is often dropped; it matters once D' != D'', i.e. beta_e).
    """
    m = np.asarray(m, dtype=np.float64)
    return (
        origin
        + (B_upper + B_lower) * m
        + (B_upper - B_lower) * m**2
        - 2.0 * (D_upper + D_lower) * m**3
        - (D_upper - D_lower) * m**2 * (m**2 + 1.0)
    )
