"""Interferent absorbers for the simulator: our own invented models, not database data.

- "co2": a CO2-like linear-molecule band near 2349 cm-1 (P and R branches only, even J'' only
  as for a symmetric linear molecule with spin-zero end nuclei). Origin and B values are
  rounded CO2-like numbers; the band strength is invented to give a realistic-looking amount
  of absorption for room air in an unpurged beam path.
- "water": water-vapour-like lines: a seeded, fixed set of narrow lines scattered over
  1300-2000 and 3450-4000 cm-1 with random strengths and lower-state energies. Invented; not
  real water data. The line set is the same in every run (a fixed model seed), like real water
  always is. Strengths are given at 296 K and scale with temperature through the lower-state
  energy, so the same vapour at two temperatures differs line by line in either direction.

An interferent can sit in the beam when the sample is measured (absorption lines) or when the
background was measured (`in_background`): the ratio of the two then shows its lines
inverted, as negative absorbance. Both together leave the residue lines of either sign that
real purged benches show.

Line lists come back as `InterferentLines` (positions in cm-1, strengths in cm/molecule).
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy import constants as _sc

C2_CM_K: float = _sc.h * _sc.c / _sc.k * 100.0  # second radiation constant, cm K (CODATA)

INTERFERENT_KINDS: tuple[str, ...] = ("co2", "water")

# CO2-like model (invented strength; CO2-like rounded origin and B values).
CO2_LIKE_ORIGIN_CM1 = 2349.14
CO2_LIKE_B_LOWER_CM1 = 0.3902
CO2_LIKE_B_UPPER_CM1 = 0.3871
CO2_LIKE_BAND_STRENGTH = 9.0e-17  # cm/molecule, sum over the band's lines (invented)
CO2_LIKE_MASS_U = 44.0
CO2_LIKE_BROADENING_HWHM_CM1_PER_ATM = 0.07
CO2_LIKE_J_MAX = 100

# Water-like model (all invented).
WATER_LIKE_MODEL_SEED = 20261202
WATER_LIKE_REGIONS_CM1: tuple[tuple[float, float, int], ...] = ((1300.0, 2000.0, 260), (3450.0, 4000.0, 220))
WATER_LIKE_STRENGTH_RANGE = (1.0e-23, 3.0e-19)  # cm/molecule, log-uniform (invented)
WATER_LIKE_MASS_U = 18.0
WATER_LIKE_LOWER_ENERGY_CM1 = (0.0, 1500.0)  # uniform (invented)
WATER_LIKE_REFERENCE_K = 296.0  # strengths are given at this temperature
WATER_LIKE_BROADENING_HWHM_CM1_PER_ATM = 0.09


@dataclass(frozen=True)
class Interferent:
    """An absorber in the beam outside the cell (e.g. room air in a poorly purged bench).

    Its lines are pressure-broadened by air at `air_pressure_atm`, not by the cell's gas.
    """

    kind: str
    partial_pressure_atm: float
    path_length_cm: float
    temperature_K: float = 296.0
    air_pressure_atm: float = 1.0
    in_background: bool = False  # in the beam for the background measurement, not the sample

    def __post_init__(self) -> None:
        if self.kind not in INTERFERENT_KINDS:
            raise ValueError(f"unknown interferent {self.kind!r}; choose from {', '.join(INTERFERENT_KINDS)}")
        if not (self.partial_pressure_atm >= 0 and self.path_length_cm >= 0 and self.temperature_K > 0):
            raise ValueError("interferent pressure and path must be >= 0 and temperature > 0")


# Room-air defaults for a poor purge: ~400 ppm CO2-like gas and ~0.6% water-like vapour over a
# 20 cm unpurged beam path (invented scenario values).
DEFAULT_INTERFERENTS: dict[str, Interferent] = {
    "co2": Interferent("co2", 4.0e-4, 20.0),
    "water": Interferent("water", 6.0e-3, 20.0),
}


@dataclass(frozen=True)
class InterferentLines:
    """Lines of one interferent model at one temperature."""

    kind: str
    position_cm1: np.ndarray
    strength_cm_per_molecule: np.ndarray
    branch: tuple[str, ...]  # "P"/"R" for the CO2-like band, "" for water-like lines
    J_lower: np.ndarray  # -1 where not defined
    mass_u: float
    broadening_hwhm_cm1_per_atm: float


def co2_like_lines(temperature_K: float) -> InterferentLines:
    """P(J'') and R(J'') lines, even J'' only; strengths share the band strength by
    Hoenl-London factor x Boltzmann population, summing to CO2_LIKE_BAND_STRENGTH."""
    J = np.arange(0, CO2_LIKE_J_MAX + 1, 2)
    lower = CO2_LIKE_B_LOWER_CM1 * J * (J + 1)
    population = np.exp(-C2_CM_K * lower / temperature_K)
    population = population / np.sum((2 * J + 1) * population)
    J_r = J
    J_p = J[J >= 2]
    pos_r = CO2_LIKE_ORIGIN_CM1 + CO2_LIKE_B_UPPER_CM1 * (J_r + 1) * (J_r + 2) - CO2_LIKE_B_LOWER_CM1 * J_r * (J_r + 1)
    pos_p = CO2_LIKE_ORIGIN_CM1 + CO2_LIKE_B_UPPER_CM1 * (J_p - 1) * J_p - CO2_LIKE_B_LOWER_CM1 * J_p * (J_p + 1)
    s_r = CO2_LIKE_BAND_STRENGTH * (J_r + 1) * population
    s_p = CO2_LIKE_BAND_STRENGTH * J_p * population[J >= 2]
    position = np.concatenate([pos_p, pos_r])
    strength = np.concatenate([s_p, s_r])
    order = np.argsort(position, kind="stable")
    branch = np.array(["P"] * pos_p.size + ["R"] * pos_r.size)[order]
    J_lower = np.concatenate([J_p, J_r])[order]
    return InterferentLines(
        kind="co2",
        position_cm1=position[order],
        strength_cm_per_molecule=strength[order],
        branch=tuple(str(b) for b in branch),
        J_lower=J_lower,
        mass_u=CO2_LIKE_MASS_U,
        broadening_hwhm_cm1_per_atm=CO2_LIKE_BROADENING_HWHM_CM1_PER_ATM,
    )


def water_like_lines(temperature_K: float = WATER_LIKE_REFERENCE_K) -> InterferentLines:
    """The fixed seeded set of water-like lines (independent of the run's seed) at
    `temperature_K`: S(T) = S(296 K) (296/T)^1.5 exp(-c2 E'' (1/T - 1/296)), a rigid
    nonlinear rotor's partition function (T^1.5) and the Boltzmann factor of each line's
    invented lower-state energy E''."""
    rng = np.random.default_rng(WATER_LIKE_MODEL_SEED)
    low, high = np.log10(WATER_LIKE_STRENGTH_RANGE[0]), np.log10(WATER_LIKE_STRENGTH_RANGE[1])
    positions, strengths = [], []
    for first, last, count in WATER_LIKE_REGIONS_CM1:
        positions.append(rng.uniform(first, last, count))
        # Squaring a uniform deviate skews toward weak lines: many weak, a few strong.
        strengths.append(10.0 ** (low + (high - low) * rng.uniform(0.0, 1.0, count) ** 2))
    position = np.concatenate(positions)
    strength = np.concatenate(strengths)
    # drawn from their own stream so the positions and 296 K strengths above never change
    lower_energy = np.random.default_rng(WATER_LIKE_MODEL_SEED + 1).uniform(*WATER_LIKE_LOWER_ENERGY_CM1, position.size)
    if temperature_K != WATER_LIKE_REFERENCE_K:
        strength = strength * (WATER_LIKE_REFERENCE_K / temperature_K) ** 1.5 * np.exp(
            -C2_CM_K * lower_energy * (1.0 / temperature_K - 1.0 / WATER_LIKE_REFERENCE_K))
    order = np.argsort(position, kind="stable")
    return InterferentLines(
        kind="water",
        position_cm1=position[order],
        strength_cm_per_molecule=strength[order],
        branch=("",) * position.size,
        J_lower=np.full(position.size, -1),
        mass_u=WATER_LIKE_MASS_U,
        broadening_hwhm_cm1_per_atm=WATER_LIKE_BROADENING_HWHM_CM1_PER_ATM,
    )


def interferent_lines(interferent: Interferent) -> InterferentLines:
    """The line list of an interferent's model at its temperature."""
    if interferent.kind == "co2":
        return co2_like_lines(interferent.temperature_K)
    return water_like_lines(interferent.temperature_K)


def parse_interferent(text: str, in_background: bool = False) -> Interferent:
    """`KIND[:PRESSURE_ATM[:TEMPERATURE_K]]` (e.g. `water`, `water:0.006:303`) -> Interferent;
    the defaults are the room-air values of DEFAULT_INTERFERENTS. ValueError on bad input."""
    from dataclasses import replace

    parts = [p.strip() for p in text.split(":")]
    kind = parts[0].lower()
    if kind not in DEFAULT_INTERFERENTS:
        raise ValueError(f"unknown interferent {kind!r}; choose from {', '.join(INTERFERENT_KINDS)}")
    if len(parts) > 3:
        raise ValueError(f"interferent {text!r} is not KIND[:PRESSURE_ATM[:TEMPERATURE_K]]")
    try:
        numbers = [float(p) for p in parts[1:]]
    except ValueError:
        raise ValueError(f"interferent {text!r}: pressure and temperature must be numbers") from None
    interferent = replace(DEFAULT_INTERFERENTS[kind], in_background=in_background)
    if numbers:
        interferent = replace(interferent, partial_pressure_atm=numbers[0])
    if len(numbers) > 1:
        interferent = replace(interferent, temperature_K=numbers[1])
    return interferent
