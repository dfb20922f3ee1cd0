"""Line intensities of diatomic vibration-rotation bands (positions come from processing.levels).

Line strength of a v' <- v'' line with lower level (v'', J''), all energies in cm-1:

    S = abundance * S_band * F_HW(m) * L(J'') * exp(-c2 E''/T) / Q(T)
        * nu * (1 - exp(-c2 nu / T)) / N_band

with Hoenl-London factor L = J''+1 (R) or J'' (P), Herman-Wallis factor
F_HW = (1 + C1 m + C2 m^2)^2, total internal partition function Q(T) = sum_{v,J} (2J+1)
exp(-c2 E(v,J)/T) (E from the v=0, J=0 level), and c2 = h c / k.

S_band is the strength of the cold band with the same Delta v (v''=0 -> Delta v), by default the
library's fundamental strength (Delta v = 1) or overtone_ratio times it (Delta v = 2), times the
harmonic factor for a hot band: (v''+1) for Delta v = 1, (v''+1)(v''+2)/2 for Delta v = 2 (a
rough guess for hot overtones). N_band is the sum of the other factors over every line of that
cold band at 296 K, so the cold band's lines add up to abundance x S_band at 296 K and a hot
band carries, on top of its harmonic factor, its lower-state population and its own
wavenumbers.
"""
from __future__ import annotations

import functools
import math
from dataclasses import dataclass

import numpy as np

from processing.physical_constants import C2_CM_K as _C2_CM_K
from processing.levels import BandLines, DunhamCoefficients, R_BRANCH, band_lines, dunham_key, term_value
from processing.species import Isotopologue

# Second radiation constant c2 = h c / k in cm K (CODATA via scipy.constants).
C2_CM_K: float = _C2_CM_K
REFERENCE_TEMPERATURE_K: float = 296.0
# Terms with exp(-c2 E/T) below this are dropped from sums (relative to the ground level).
_NEGLIGIBLE_EXPONENT = 46.0  # exp(-46) ~ 1e-20
_MAX_J = 2000
_MAX_V = 200


def boltzmann_factor(energy_gap_cm1: float | np.ndarray, temperature_K: float) -> np.ndarray:
    """exp(-c2 dE / T): population ratio of two single states dE (cm-1) apart."""
    _check_temperature(temperature_K)
    return np.exp(-C2_CM_K * np.asarray(energy_gap_cm1, dtype=np.float64) / temperature_K)


def _check_temperature(temperature_K: float) -> None:
    if not temperature_K > 0 or not math.isfinite(temperature_K):
        raise ValueError(f"temperature must be a positive number of kelvin, got {temperature_K!r}")


def highest_bound_v(dunham: DunhamCoefficients) -> int:
    """Largest v for which the Dunham G(v) still increases with v (the expansion's validity
    limit, near dissociation)."""
    return _highest_bound_v(dunham_key(dunham))


@functools.lru_cache(maxsize=256)
def _highest_bound_v(key: tuple) -> int:
    v = np.arange(0, _MAX_V + 1)
    g = term_value(dict(key), v, 0)
    rising = np.diff(g) > 0
    if rising.all():
        return _MAX_V
    return int(np.argmin(rising))


def highest_bound_J(dunham: DunhamCoefficients, v: int) -> int:
    """Largest J for which F_v(J) still increases with J (the centrifugal terms turn the Dunham
    series over beyond it)."""
    return _highest_bound_J(dunham_key(dunham), int(v))


@functools.lru_cache(maxsize=4096)
def _highest_bound_J(key: tuple, v: int) -> int:
    J = np.arange(0, _MAX_J + 1)
    e = term_value(dict(key), v, J)
    rising = np.diff(e) > 0
    if rising.all():
        return _MAX_J
    return int(np.argmin(rising))


def _rotational_terms(dunham: DunhamCoefficients, v: int, temperature_K: float) -> tuple[np.ndarray, np.ndarray]:
    """(J, E(v,J) - E(0,0)) over the J range that matters at this temperature."""
    J_limit = highest_bound_J(dunham, v)
    J = np.arange(0, J_limit + 1)
    energy = term_value(dunham, v, J) - term_value(dunham, 0, 0)
    exponent = C2_CM_K * (energy - energy[0]) / temperature_K
    keep = exponent < _NEGLIGIBLE_EXPONENT
    last = int(np.nonzero(keep)[0].max()) if keep.any() else 0
    return J[: last + 1], energy[: last + 1]


def rotational_partition_function(isotopologue: Isotopologue, temperature_K: float, v: int = 0) -> float:
    """Q_rot(v, T) = sum_J (2J+1) exp(-c2 F_v(J) / T), F_v(J) from that level's J=0."""
    _check_temperature(temperature_K)
    J, energy = _rotational_terms(isotopologue.dunham, v, temperature_K)
    return float(np.sum((2 * J + 1) * np.exp(-C2_CM_K * (energy - energy[0]) / temperature_K)))


def vibrational_partition_function(isotopologue: Isotopologue, temperature_K: float) -> float:
    """Q_vib(T) = sum_v exp(-c2 (G(v) - G(0)) / T), summed while G(v) is bound and the term
    matters."""
    _check_temperature(temperature_K)
    v = np.arange(0, highest_bound_v(isotopologue.dunham) + 1)
    g = term_value(isotopologue.dunham, v, 0) - term_value(isotopologue.dunham, 0, 0)
    exponent = C2_CM_K * g / temperature_K
    return float(np.sum(np.exp(-exponent[exponent < _NEGLIGIBLE_EXPONENT])))


@functools.lru_cache(maxsize=512)
def total_partition_function(isotopologue: Isotopologue, temperature_K: float) -> float:
    """Q(T) = sum over v, J of (2J+1) exp(-c2 E(v,J)/T), E from the (0,0) level; a direct sum
    (no rigid-rotor or harmonic separation)."""
    _check_temperature(temperature_K)
    dunham = isotopologue.dunham
    g = term_value(dunham, np.arange(0, highest_bound_v(dunham) + 1), 0) - term_value(dunham, 0, 0)
    total = 0.0
    for v, g_v in enumerate(g):
        if C2_CM_K * g_v / temperature_K >= _NEGLIGIBLE_EXPONENT:
            break
        J, energy = _rotational_terms(dunham, v, temperature_K)
        total += float(np.sum((2 * J + 1) * np.exp(-C2_CM_K * energy / temperature_K)))
    return total


def boltzmann_population_fraction(
    isotopologue: Isotopologue, v: int | np.ndarray, J: int | np.ndarray, temperature_K: float
) -> np.ndarray:
    """Fraction of molecules in level (v, J), counting all 2J+1 sublevels: (2J+1) exp(-c2 E/T)/Q."""
    _check_temperature(temperature_K)
    J_array = np.asarray(J, dtype=np.float64)
    energy = term_value(isotopologue.dunham, v, J) - term_value(isotopologue.dunham, 0, 0)
    q = total_partition_function(isotopologue, temperature_K)
    return (2.0 * J_array + 1.0) * np.exp(-C2_CM_K * energy / temperature_K) / q


def hoenl_london(band: BandLines) -> np.ndarray:
    """Hoenl-London factors of a 1Sigma-1Sigma band: J''+1 for R lines, J'' for P lines."""
    J = band.J_lower.astype(np.float64)
    return np.where(np.asarray(band.branch) == R_BRANCH, J + 1.0, J)


def herman_wallis_factor(m: np.ndarray, herman_wallis: tuple[float, float]) -> np.ndarray:
    """F(m) = (1 + C1 m + C2 m^2)^2."""
    c1, c2 = herman_wallis
    m = np.asarray(m, dtype=np.float64)
    return (1.0 + c1 * m + c2 * m**2) ** 2


def hot_band_factor(v_upper: int, v_lower: int) -> float:
    """Harmonic transition-moment factor of v'' -> v' relative to 0 -> (v'-v''): (v''+1) for
    Delta v = 1, (v''+1)(v''+2)/2 for Delta v = 2 (the latter only a rough guess)."""
    delta_v = v_upper - v_lower
    if delta_v == 1:
        return float(v_lower + 1)
    if delta_v == 2:
        return (v_lower + 1) * (v_lower + 2) / 2.0
    return 1.0


def default_band_strength(isotopologue: Isotopologue, delta_v: int) -> float:
    """Integrated strength (cm/molecule, 296 K) of the cold band 0 -> delta_v from the library:
    the fundamental strength, or overtone_ratio times it for delta_v = 2."""
    fundamental = isotopologue.band_strength_cm_per_molecule
    if delta_v == 1:
        return fundamental
    if delta_v == 2:
        return fundamental * isotopologue.overtone_ratio
    raise ValueError(
        f"no default strength for a Delta v = {delta_v} band of {isotopologue.label}; pass band_strength"
    )


def _unnormalised(
    band: BandLines, temperature_K: float, q_total: float, herman_wallis: tuple[float, float]
) -> np.ndarray:
    """L * F_HW * exp(-c2 E''/T) / Q * nu * (1 - exp(-c2 nu/T))."""
    nu = band.wavenumber_cm1
    population = np.exp(-C2_CM_K * band.lower_energy_cm1 / temperature_K) / q_total
    stimulated = -np.expm1(-C2_CM_K * nu / temperature_K)
    return hoenl_london(band) * herman_wallis_factor(band.m, herman_wallis) * population * nu * stimulated


@functools.lru_cache(maxsize=512)
def _band_normalisation(
    isotopologue: Isotopologue, delta_v: int, herman_wallis: tuple[float, float]
) -> float:
    """Sum of the unnormalised strengths of the whole cold band 0 -> delta_v at 296 K."""
    dunham = isotopologue.dunham
    T0 = REFERENCE_TEMPERATURE_K
    band = band_lines(dunham, delta_v, 0, _usable_J_max(dunham, delta_v, 0, T0))
    q_total = total_partition_function(isotopologue, T0)
    return float(np.sum(_unnormalised(band, T0, q_total, herman_wallis)))


def _usable_J_max(dunham: DunhamCoefficients, v_upper: int, v_lower: int, temperature_K: float) -> int:
    """J'' up to which lower levels are populated (exp > 1e-20) and the Dunham series is valid."""
    J, _energy = _rotational_terms(dunham, v_lower, temperature_K)
    limit = min(int(J[-1]), highest_bound_J(dunham, v_upper) - 1, highest_bound_J(dunham, v_lower))
    return max(limit, 1)


def line_strengths(
    isotopologue: Isotopologue,
    band: BandLines,
    temperature_K: float,
    *,
    band_strength: float | None = None,
    herman_wallis: tuple[float, float] = (0.0, 0.0),
    include_abundance: bool = True,
) -> np.ndarray:
    """Line strengths (cm/molecule) aligned with `band`'s arrays.

    `band` must come from `levels.band_lines` with this isotopologue's Dunham coefficients.
    `band_strength` overrides the library's strength of the cold band with the same Delta v
    (cm/molecule, or any relative unit: the result is then in that unit); the hot-band factor
    still applies. Per molecule of the isotopologue when
    `include_abundance` is False; per molecule of the natural-abundance species otherwise."""
    _check_temperature(temperature_K)
    delta_v = band.v_upper - band.v_lower
    cold_strength = (
        default_band_strength(isotopologue, delta_v) if band_strength is None else float(band_strength)
    )
    strength = cold_strength * hot_band_factor(band.v_upper, band.v_lower)
    q_total = total_partition_function(isotopologue, temperature_K)
    weights = _unnormalised(band, temperature_K, q_total, herman_wallis)
    norm = _band_normalisation(isotopologue, delta_v, herman_wallis)
    abundance = isotopologue.abundance if include_abundance else 1.0
    return abundance * strength * weights / norm


@dataclass(frozen=True)
class BandIntensities:
    """Positions and strengths of one band at one temperature (arrays aligned with `lines`)."""

    isotopologue: str
    temperature_K: float
    lines: BandLines
    strength_cm_per_molecule: np.ndarray


def lines_for(
    isotopologue: Isotopologue,
    v_upper: int,
    v_lower: int,
    temperature_K: float,
    min_relative: float = 1e-4,
    *,
    band_strength: float | None = None,
    herman_wallis: tuple[float, float] = (0.0, 0.0),
    include_abundance: bool = True,
) -> BandIntensities:
    """The band's lines up to the J'' beyond which every line is weaker than
    `min_relative` x the strongest line (P and R both checked)."""
    if not 0.0 < min_relative < 1.0:
        raise ValueError(f"min_relative must lie in (0, 1), got {min_relative!r}")
    dunham = isotopologue.dunham
    options = dict(band_strength=band_strength, herman_wallis=herman_wallis, include_abundance=include_abundance)
    J_limit = _usable_J_max(dunham, v_upper, v_lower, temperature_K)
    wide = band_lines(dunham, v_upper, v_lower, J_limit)
    strengths = line_strengths(isotopologue, wide, temperature_K, **options)
    threshold = min_relative * float(np.max(np.abs(strengths)))
    strong_J = wide.J_lower[np.abs(strengths) >= threshold]
    J_max = max(int(strong_J.max()), 1)
    # the lines up to J_max are a run of the wider set, and every position and strength is
    # computed line by line: taken from it, not computed again
    span = wide.span_to(J_max)
    lines = wide.part(span)
    return BandIntensities(
        isotopologue=isotopologue.label,
        temperature_K=float(temperature_K),
        lines=lines,
        strength_cm_per_molecule=strengths[span],
    )
