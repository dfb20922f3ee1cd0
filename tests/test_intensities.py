"""Line intensities and partition functions against CODATA constants, textbook partition-function
expansions and Boltzmann figures of the trade."""
from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import constants as sc

from processing.intensities import (
    C2_CM_K,
    boltzmann_factor,
    boltzmann_population_fraction,
    herman_wallis_factor,
    hoenl_london,
    line_strengths,
    lines_for,
    rotational_partition_function,
    total_partition_function,
    vibrational_partition_function,
)
from processing.levels import band_lines, band_origin, centrifugal_constant, rotational_constant
from processing.species import load_library


@pytest.fixture(scope="module")
def library():
    return load_library()


# ------------------------------------------------------------------ constants and Boltzmann
def test_second_radiation_constant_is_codata() -> None:
    # c2 = hc/k = 1.4387768775 cm K [pub: CODATA 2018, exact h, c, k; scipy.constants].
    assert C2_CM_K == pytest.approx(1.4387768775, rel=1e-10)
    assert C2_CM_K == pytest.approx(sc.physical_constants["second radiation constant"][0] * 100, rel=1e-12)


def test_vibrational_boltzmann_factor() -> None:
    # exp(-c2 * 2170 / 298) = 2.818e-5 [calc]; "about 2.8e-5 of CO-like molecules in v=1 at
    # room temperature" [common practice]. 1e-8 absolute = rounding of the written figure.
    assert boltzmann_factor(2170.0, 298.0) == pytest.approx(2.8177e-5, abs=1e-8)
    assert boltzmann_factor(2170.0, 298.0) == pytest.approx(2.8e-5, rel=0.02)
    # 2143.27 cm-1 at 296 K -> 2.99e-5 [calc]
    assert boltzmann_factor(2143.27, 296.0) == pytest.approx(2.99e-5, abs=5e-8)


def test_rotational_boltzmann_factor() -> None:
    # A 3.86 cm-1 gap (CO J=0 -> 1) at 296 K: 0.9814 before the 2J+1 degeneracy [calc, cp].
    assert boltzmann_factor(3.86, 296.0) == pytest.approx(0.9814, abs=5e-5)


def test_bad_temperature_is_rejected(library) -> None:
    with pytest.raises(ValueError, match="temperature"):
        total_partition_function(library.isotopologue("H35Cl"), -5.0)
    with pytest.raises(ValueError, match="temperature"):
        boltzmann_factor(100.0, 0.0)


# ------------------------------------------------------------------ partition functions
@pytest.mark.parametrize("label", ["H35Cl", "12C16O", "D35Cl", "H19F"])
@pytest.mark.parametrize("temperature_K", [296.0, 1000.0])
def test_rotational_partition_function_matches_high_temperature_expansion(library, label, temperature_K) -> None:
    # Textbook expansion for a non-rigid rotor [common practice]:
    # Q = (1/x + 1/3 + x/15 + 4x^2/315) (1 + 2 D kT/(hc B^2)), x = c2 B / T.
    # The next terms are ~x^3/315 and (D kT/hcB^2)^2 ~ 1e-5 relative here; 2e-4 leaves margin.
    entry = library.isotopologue(label)
    B0 = rotational_constant(entry.dunham, 0)
    D0 = centrifugal_constant(entry.dunham, 0)
    x = C2_CM_K * B0 / temperature_K
    expansion = (1 / x + 1 / 3 + x / 15 + 4 * x**2 / 315) * (1 + 2 * D0 * temperature_K / (C2_CM_K * B0**2))
    assert rotational_partition_function(entry, temperature_K) == pytest.approx(expansion, rel=2e-4)


def test_vibrational_partition_function_near_harmonic(library) -> None:
    # Harmonic oscillator Q = 1/(1 - exp(-c2 nu0/T)) [common practice] with nu0 = 2143.27.
    # Anharmonicity brings higher levels down, so the direct sum is larger, by ~0.15 % at
    # 2000 K (2 omega_e x_e / nu0 ~ 1.2 % per quantum, times the small v >= 2 population).
    entry = library.isotopologue("12C16O")
    harmonic = 1 / (1 - math.exp(-C2_CM_K * 2143.27 / 2000.0))
    q_vib = vibrational_partition_function(entry, 2000.0)
    assert harmonic < q_vib < harmonic * 1.005
    assert vibrational_partition_function(entry, 296.0) == pytest.approx(1 + 2.99e-5, rel=1e-7)


def test_total_partition_function_is_rotation_times_vibration_at_room_temperature(library) -> None:
    # At 296 K only v=0 counts (v=1 weight ~3e-5 for CO, [calc] above): Q ~ Q_rot(0) Q_vib.
    entry = library.isotopologue("12C16O")
    expected = rotational_partition_function(entry, 296.0) * vibrational_partition_function(entry, 296.0)
    assert total_partition_function(entry, 296.0) == pytest.approx(expected, rel=1e-6)


def test_most_populated_rotational_level(library) -> None:
    # J of maximum population = sqrt(kT / (2 hc B)) - 1/2 [common practice]:
    # HCl at 296 K -> 2.6 (J=3); CO -> 6.8 (J=7).
    J = np.arange(0, 40)
    for label, expected in (("H35Cl", 3), ("12C16O", 7)):
        fraction = boltzmann_population_fraction(library.isotopologue(label), 0, J, 296.0)
        assert int(J[np.argmax(fraction)]) == expected
    # Fractions over every level sum to 1 (v = 0 holds all but ~3e-5 of CO at 296 K).
    fraction = boltzmann_population_fraction(library.isotopologue("12C16O"), 0, np.arange(0, 120), 296.0)
    assert fraction.sum() == pytest.approx(1.0, abs=1e-4)


# ------------------------------------------------------------------ line strengths
def test_hoenl_london_factors(library) -> None:
    # 1Sigma-1Sigma: L = J''+1 for R(J''), J'' for P(J'') [common practice].
    band = band_lines(library.isotopologue("H35Cl").dunham, 1, 0, 3)
    factors = dict(zip(zip(band.branch, band.J_lower), hoenl_london(band)))
    assert factors[("R", 0)] == 1 and factors[("R", 3)] == 4
    assert factors[("P", 1)] == 1 and factors[("P", 3)] == 3


def test_line_strength_formula_for_one_line(library) -> None:
    # Ratio R(3)/P(3) from the intensity formula, written out by hand: same lower level, so
    # only L (4 vs 3), nu and the stimulated-emission factor differ.
    entry = library.isotopologue("H35Cl")
    band = band_lines(entry.dunham, 1, 0, 6)
    s = line_strengths(entry, band, 296.0)
    r3 = band.wavenumber_cm1[(band.branch == "R") & (band.J_lower == 3)][0]
    p3 = band.wavenumber_cm1[(band.branch == "P") & (band.J_lower == 3)][0]
    expected = (4 * r3 * -math.expm1(-C2_CM_K * r3 / 296)) / (3 * p3 * -math.expm1(-C2_CM_K * p3 / 296))
    got = s[(band.branch == "R") & (band.J_lower == 3)][0] / s[(band.branch == "P") & (band.J_lower == 3)][0]
    assert got == pytest.approx(expected, rel=1e-12)


@pytest.mark.parametrize("label", ["H35Cl", "12C16O", "D35Cl", "H127I"])
def test_cold_band_sums_to_band_strength_at_296K(library, label) -> None:
    # By definition of the band strength; lines_for drops lines < 1e-4 of the strongest, at
    # most a few dozen of them, so the sum may fall short by < 1e-3.
    entry = library.isotopologue(label)
    result = lines_for(entry, 1, 0, 296.0)
    expected = entry.abundance * entry.band_strength_cm_per_molecule
    assert result.strength_cm_per_molecule.sum() == pytest.approx(expected, rel=1e-3)
    overtone = lines_for(entry, 2, 0, 296.0)
    assert overtone.strength_cm_per_molecule.sum() == pytest.approx(expected * entry.overtone_ratio, rel=1e-3)


def test_chlorine_isotopologue_line_ratio(library) -> None:
    # Same J, same branch: the H35Cl/H37Cl ratio is the abundance ratio 3.125 [IUPAC 2013
    # abundances] apart from nu (ratio ~1.0007), slightly different Boltzmann factors and
    # partition functions (B differs by 0.15 %): < 1 % up to J'' = 10; 2 % is the stated bound.
    h35, h37 = library.isotopologue("H35Cl"), library.isotopologue("H37Cl")
    s35 = line_strengths(h35, band_lines(h35.dunham, 1, 0, 10), 296.0)
    s37 = line_strengths(h37, band_lines(h37.dunham, 1, 0, 10), 296.0)
    ratio = s35 / s37
    assert np.all(np.abs(ratio / (0.7576 / 0.2424) - 1) < 0.02)
    assert np.all(np.abs(ratio / 3.13 - 1) < 0.02)


def test_per_molecule_strength_without_abundance(library) -> None:
    entry = library.isotopologue("D35Cl")
    band = band_lines(entry.dunham, 1, 0, 10)
    with_abundance = line_strengths(entry, band, 296.0)
    per_molecule = line_strengths(entry, band, 296.0, include_abundance=False)
    assert np.allclose(with_abundance, per_molecule * entry.abundance, rtol=1e-14)


def test_hot_band_relative_to_fundamental(library) -> None:
    # Harmonic oscillator: |<v+1|x|v>|^2 = (v+1)|<1|x|0>|^2 [common practice]. So
    # S(2-1)/S(1-0) ~ 2 exp(-c2 nu0/T) (nu(2-1)/nu(1-0)) (Q_rot(1)/Q_rot(0)) x stimulated
    # factors. The estimate uses band origins instead of each line's nu: <= 1 % apart.
    entry = library.isotopologue("H35Cl")
    n10, n21 = band_origin(entry.dunham, 1, 0), band_origin(entry.dunham, 2, 1)
    for T in (296.0, 1000.0, 2000.0):
        fundamental = lines_for(entry, 1, 0, T).strength_cm_per_molecule.sum()
        hot = lines_for(entry, 2, 1, T).strength_cm_per_molecule.sum()
        estimate = (
            2 * math.exp(-C2_CM_K * n10 / T) * (n21 / n10)
            * rotational_partition_function(entry, T, v=1) / rotational_partition_function(entry, T, v=0)
            * math.expm1(-C2_CM_K * n21 / T) / math.expm1(-C2_CM_K * n10 / T)
        )
        assert hot / fundamental == pytest.approx(estimate, rel=0.01), T


def test_band_strength_override_scales_lines(library) -> None:
    entry = library.isotopologue("12C16O")
    band = band_lines(entry.dunham, 1, 0, 20)
    default = line_strengths(entry, band, 296.0)
    relative = line_strengths(entry, band, 296.0, band_strength=1.0, include_abundance=False)
    assert np.allclose(default, relative * entry.band_strength_cm_per_molecule * entry.abundance, rtol=1e-12)
    with pytest.raises(ValueError, match="band_strength"):
        line_strengths(entry, band_lines(entry.dunham, 3, 0, 5), 296.0)


def test_herman_wallis_factor(library) -> None:
    # F = (1 + C1 m + C2 m^2)^2 per line; the band total stays the band strength.
    m = np.array([-3, -1, 1, 3])
    assert np.allclose(herman_wallis_factor(m, (0.01, 0.001)), (1 + 0.01 * m + 0.001 * m**2) ** 2, rtol=1e-15)
    entry = library.isotopologue("H35Cl")
    band = band_lines(entry.dunham, 1, 0, 25)
    plain = line_strengths(entry, band, 296.0)
    tilted = line_strengths(entry, band, 296.0, herman_wallis=(0.02, 0.0))
    per_line = (tilted / plain) / herman_wallis_factor(band.m, (0.02, 0.0))
    assert np.allclose(per_line, per_line[0], rtol=1e-12)  # only a common normalisation differs
    assert tilted.sum() == pytest.approx(plain.sum(), rel=1e-6)
    # positive C1 strengthens R relative to P
    assert tilted[band.m == 3][0] / tilted[band.m == -3][0] > plain[band.m == 3][0] / plain[band.m == -3][0]


@pytest.mark.parametrize(("label", "temperature_K"), [("H35Cl", 296.0), ("12C16O", 296.0), ("12C16O", 1500.0)])
def test_lines_for_drops_only_weak_lines(library, label, temperature_K) -> None:
    entry = library.isotopologue(label)
    result = lines_for(entry, 1, 0, temperature_K, min_relative=1e-3)
    strengths = result.strength_cm_per_molecule
    assert strengths.shape == result.lines.wavenumber_cm1.shape
    J_max = int(result.lines.J_lower.max())
    wide = band_lines(entry.dunham, 1, 0, J_max + 30)
    wide_strengths = line_strengths(entry, wide, temperature_K)
    threshold = 1e-3 * wide_strengths.max()
    assert np.all(wide_strengths[wide.J_lower > J_max] < threshold)
    assert np.any(strengths[result.lines.J_lower == J_max] >= threshold)
    # Hotter gas populates higher J: the CO band at 1500 K reaches further.
    if label == "12C16O" and temperature_K > 1000:
        cold = lines_for(entry, 1, 0, 296.0, min_relative=1e-3)
        assert J_max > cold.lines.J_lower.max()
