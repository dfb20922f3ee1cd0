"""The isotopologue library against outside references: handbook constants, AME2020 masses via
the periodictable package, CODATA constants via scipy, and isotope mass-scaling relations."""
from __future__ import annotations

import math
from pathlib import Path

import periodictable
import pytest
from scipy import constants as sc

from processing.errors import LibraryFileError, UnknownSpeciesError
from processing.species import (
    Isotopologue,
    equilibrium_bond_length_angstrom,
    equilibrium_bond_length_sigma_angstrom,
    load_library,
    shipped_library_path,
)


@pytest.fixture(scope="module")
def library():
    return load_library()


# ------------------------------------------------------------------ handbook constants
# Huber & Herzberg 1979, Constants of Diatomic Molecules, via the NIST Chemistry WebBook;
# values recalled from memory (not re-read from the printed table), compared at their stated
# digits: the library must hold exactly these numbers.
HANDBOOK = [
    ("H35Cl", "omega_e", 2990.946), ("H35Cl", "omega_e_x_e", 52.8186),
    ("H35Cl", "B_e", 10.593416), ("H35Cl", "alpha_e", 0.307181),
    ("H35Cl", "D_e", 5.3194e-4), ("H35Cl", "r_e", 1.27455),
    ("H35Cl", "omega_e_y_e", 0.2243),
    ("D35Cl", "omega_e", 2145.163), ("D35Cl", "omega_e_x_e", 27.1825),
    ("D35Cl", "B_e", 5.448794), ("D35Cl", "alpha_e", 0.113291), ("D35Cl", "r_e", 1.274581),
    ("H79Br", "omega_e", 2648.975), ("H79Br", "omega_e_x_e", 45.2175),
    ("H79Br", "B_e", 8.464884), ("H79Br", "alpha_e", 0.23328),
    ("H19F", "omega_e", 4138.32), ("H19F", "omega_e_x_e", 89.88), ("H19F", "B_e", 20.9557),
    ("H19F", "alpha_e", 0.798), ("H19F", "D_e", 2.151e-3), ("H19F", "r_e", 0.916808),
    ("D19F", "omega_e", 2998.192), ("D19F", "omega_e_x_e", 45.761), ("D19F", "B_e", 11.0102),
    ("D19F", "alpha_e", 0.3017), ("D19F", "D_e", 5.94e-4), ("D19F", "r_e", 0.91694),
    ("H127I", "omega_e", 2309.014), ("H127I", "omega_e_x_e", 39.6435),
    ("H127I", "alpha_e", 0.16886), ("H127I", "r_e", 1.60916),
    ("12C16O", "omega_e", 2169.81358), ("12C16O", "omega_e_x_e", 13.28831),
    ("12C16O", "B_e", 1.93128087), ("12C16O", "alpha_e", 0.01750441),
    ("12C16O", "D_e", 6.12147e-6), ("12C16O", "r_e", 1.128323),
]


@pytest.mark.parametrize(("label", "name", "handbook_value"), HANDBOOK)
def test_tabulated_constants_equal_handbook_values(library, label, name, handbook_value) -> None:
    value = library.isotopologue(label).constant(name)
    # Same number at the handbook's stated digits: only float representation may differ.
    assert value == pytest.approx(handbook_value, rel=1e-12)


def test_every_tabulated_value_names_a_source(library) -> None:
    for entry in library.isotopologues():
        assert entry.reference, entry.label
        for name, ref in entry.reference.items():
            assert ref.source.strip(), (entry.label, name)
            assert isinstance(ref.recalled, bool)


def test_unknown_constants_are_absent_not_zero(library) -> None:
    # Not in the library for DF/CO: must read as unknown, never as 0.0.
    assert library.isotopologue("D19F").constant("gamma_e") is None
    assert library.isotopologue("12C16O").constant("gamma_e") is None
    assert (2, 1) not in library.isotopologue("D19F").dunham
    # ...and stay absent after mass scaling.
    assert library.isotopologue("13C16O").constant("gamma_e") is None


# ------------------------------------------------------------------ r_e from B_e and masses
# H&H tabulated r_e (NIST WebBook, recalled from memory). The copies agree with
# r_e = sqrt(h / (8 pi^2 c mu B_e)) from AME2020 masses to <= 2 ppm for these [calc]; 5 ppm
# leaves room for the last printed digit of r_e (1e-6 A of ~1 A is 1 ppm) and of B_e.
@pytest.mark.parametrize(
    ("label", "tabulated_r_e"),
    [("H35Cl", 1.27455), ("D35Cl", 1.274581), ("12C16O", 1.128323),
     ("H19F", 0.916808), ("D19F", 0.91694)],
)
def test_bond_length_from_B_e_matches_tabulated(library, label, tabulated_r_e) -> None:
    entry = library.isotopologue(label)
    r_e = equilibrium_bond_length_angstrom(entry.constant("B_e"), entry.reduced_mass_u)
    assert r_e == pytest.approx(tabulated_r_e, rel=5e-6)


def test_hbr_bond_length_loosely(library) -> None:
    # H&H via NIST WebBook (recalled): the B_e and r_e copies seen disagree by ~159 ppm, so
    # nothing tighter than 3e-4 A can be asserted honestly.
    entry = library.isotopologue("H79Br")
    r_e = equilibrium_bond_length_angstrom(entry.constant("B_e"), entry.reduced_mass_u)
    assert abs(r_e - 1.41443) < 3e-4


def test_hi_B_e_is_not_the_B0_value(library) -> None:
    # The library's HI B_e is computed from r_e (so an r_e test would be circular). Check
    # instead that B0 = B_e - alpha_e/2 reproduces the 6.426 cm-1 that some copies list as
    # "B_e" (it is B0) [H&H via NIST WebBook, recalled from memory]; 1e-3 = its last digit.
    entry = library.isotopologue("H127I")
    B0 = entry.constant("B_e") - entry.constant("alpha_e") / 2.0
    assert abs(B0 - 6.426) < 1e-3


def test_bond_length_constant_from_codata() -> None:
    # r_e^2 mu B_e = h / (8 pi^2 c u) = 16.857629 A^2 u cm-1 [calc from CODATA 2018 constants]
    r_e = equilibrium_bond_length_angstrom(1.0, 1.0)
    assert r_e**2 == pytest.approx(16.857629, rel=1e-7)
    # Independent path with scipy.constants (CODATA 2018), SI units throughout.
    mu_kg = 0.979592539 * sc.physical_constants["atomic mass constant"][0]
    B_per_m = 10.593416 * 100.0
    r_m = math.sqrt(sc.h / (8 * math.pi**2 * sc.c * mu_kg * B_per_m))
    assert equilibrium_bond_length_angstrom(10.593416, 0.979592539) == pytest.approx(r_m * 1e10, rel=1e-12)


def test_bond_length_uncertainty_matches_finite_differences() -> None:
    # Linear propagation must equal numerical derivatives of r_e(B, mu) combined in quadrature.
    B, sigma_B, mu, sigma_mu = 10.5934, 0.002, 0.9795925, 1e-4
    sigma = equilibrium_bond_length_sigma_angstrom(B, sigma_B, mu, sigma_mu)
    h_B, h_mu = 1e-6, 1e-8
    dr_dB = (equilibrium_bond_length_angstrom(B + h_B, mu) - equilibrium_bond_length_angstrom(B - h_B, mu)) / (2 * h_B)
    dr_dmu = (equilibrium_bond_length_angstrom(B, mu + h_mu) - equilibrium_bond_length_angstrom(B, mu - h_mu)) / (2 * h_mu)
    expected = math.hypot(dr_dB * sigma_B, dr_dmu * sigma_mu)
    assert sigma == pytest.approx(expected, rel=1e-6)  # finite-difference error ~1e-10


# ------------------------------------------------------------------ masses and abundances
NUCLIDES = [("H", 1, "1H"), ("H", 2, "2H"), ("C", 12, "12C"), ("C", 13, "13C"),
            ("O", 16, "16O"), ("O", 18, "18O"), ("F", 19, "19F"), ("Cl", 35, "35Cl"),
            ("Cl", 37, "37Cl"), ("Br", 79, "79Br"), ("Br", 81, "81Br"), ("I", 127, "127I")]


@pytest.mark.parametrize(("symbol", "mass_number", "label"), NUCLIDES)
def test_isotopic_masses_match_periodictable(library, symbol, mass_number, label) -> None:
    # periodictable package (isotope masses from an older mass evaluation): differs from AME2020
    # by < 2e-8 relative [calc]; an average atomic weight would be off by > 1e-3.
    reference = getattr(periodictable, symbol)[mass_number]
    assert library.nuclides[label].mass_u == pytest.approx(reference.mass, rel=1e-7)


@pytest.mark.parametrize(("symbol", "mass_number", "label"), NUCLIDES)
def test_abundances_match_periodictable(library, symbol, mass_number, label) -> None:
    # periodictable lists percent from an older IUPAC table (e.g. 35Cl 75.8, 79Br 50.65); the
    # editions and natural variation (IUPAC 35Cl interval ~0.755-0.761) differ by < 1e-3.
    reference = getattr(periodictable, symbol)[mass_number]
    assert abs(library.nuclides[label].abundance - reference.abundance / 100.0) < 1e-3


def test_chlorine_isotopologue_abundance_ratio(library) -> None:
    # IUPAC 2013 representative composition 35Cl 0.7576, 37Cl 0.2424: ratio 3.1254 [pub].
    ratio = library.isotopologue("H35Cl").abundance / library.isotopologue("H37Cl").abundance
    assert ratio == pytest.approx(0.7576 / 0.2424, rel=1e-12)
    assert library.isotopologue("H35Cl").abundance == pytest.approx(0.999885 * 0.7576, rel=1e-12)


def test_reduced_mass_uses_isotopic_masses(library) -> None:
    # AME2020 masses [pub]: mu(H35Cl) = 1.00782503223 * 34.968852682 / 35.97667771423 u.
    expected = 1.00782503223 * 34.968852682 / (1.00782503223 + 34.968852682)
    entry = library.isotopologue("H35Cl")
    assert entry.reduced_mass_u == pytest.approx(expected, rel=1e-13)
    assert entry.mass_u == pytest.approx(35.97667771423, rel=1e-13)


# ------------------------------------------------------------------ mass scaling
def test_h37cl_B_e_from_mass_scaling(library) -> None:
    # B_e ~ 1/mu (r_e unchanged): B_e(H37Cl) = 10.593416 * mu35/mu37 = 10.577384 cm-1
    # [calc from H&H B_e and AME2020 masses]; 1e-6 is the rounding of the written number.
    derived = library.isotopologue("H37Cl")
    assert derived.constant("B_e") == pytest.approx(10.577384, abs=1e-6)
    assert derived.derived_from == "H35Cl"
    assert "mu/mu'" in derived.derivation and "H35Cl" in derived.derivation


def test_d35cl_from_h35cl_scaling_agrees_with_its_own_table(library) -> None:
    # Scaling H35Cl to D35Cl and comparing with H&H's separately measured D35Cl constants tests
    # both tables and the scaling law. Born-Oppenheimer breakdown leaves ~0.05-0.3 cm-1 in
    # omega_e and ~3e-4 cm-1 in B_e for H/D swaps [calc], so those are the tolerances.
    h, d = library.isotopologue("H35Cl"), library.isotopologue("D35Cl")
    rho2 = h.reduced_mass_u / d.reduced_mass_u
    assert abs(h.constant("omega_e") * math.sqrt(rho2) - d.constant("omega_e")) < 0.3
    assert abs(h.constant("B_e") * rho2 - d.constant("B_e")) < 3e-4
    assert abs(h.constant("omega_e_x_e") * rho2 - d.constant("omega_e_x_e")) < 0.05
    assert abs(h.constant("alpha_e") * rho2**1.5 - d.constant("alpha_e")) < 1e-4


def test_scaling_exponents_per_dunham_coefficient(library) -> None:
    # Y_kl ~ mu^-(k/2+l) [pub: Dunham mass scaling]: omega_e^2/B_e and D_e omega_e^2/B_e^3 are
    # mass-independent combinations, r_e is unchanged.
    parent, child = library.isotopologue("12C16O"), library.isotopologue("13C16O")
    for name in ("omega_e", "B_e", "D_e"):
        assert child.constant(name) < parent.constant(name)
    assert child.constant("omega_e") ** 2 / child.constant("B_e") == pytest.approx(
        parent.constant("omega_e") ** 2 / parent.constant("B_e"), rel=1e-12)
    assert child.constant("D_e") * child.constant("omega_e") ** 2 / child.constant("B_e") ** 3 == pytest.approx(
        parent.constant("D_e") * parent.constant("omega_e") ** 2 / parent.constant("B_e") ** 3, rel=1e-12)
    assert child.constant("r_e") == parent.constant("r_e")
    # r_e recomputed from the scaled B_e and the 13C16O masses is the parent's (mass-independent).
    assert equilibrium_bond_length_angstrom(child.constant("B_e"), child.reduced_mass_u) == pytest.approx(
        1.128323, rel=5e-6)  # H&H r_e of 12C16O, recalled from memory


def test_kratzer_relation_holds_for_tabulated_sets(library) -> None:
    # Kratzer: D_e ~ 4 B_e^3 / omega_e^2, within 0.2 % for HCl, HF, CO [calc]; a wrong digit or
    # exponent in a D_e or B_e would break it.
    for label in ("H35Cl", "H19F", "12C16O"):
        entry = library.isotopologue(label)
        kratzer = 4 * entry.constant("B_e") ** 3 / entry.constant("omega_e") ** 2
        assert entry.constant("D_e") == pytest.approx(kratzer, rel=2e-3), label


# ------------------------------------------------------------------ names and lookup
def test_all_expected_isotopologue_labels(library) -> None:
    labels = {entry.label for entry in library.isotopologues()}
    assert labels == {"H35Cl", "H37Cl", "D35Cl", "D37Cl", "H79Br", "H81Br", "D79Br", "D81Br",
                      "H19F", "D19F", "H127I", "D127I", "12C16O", "13C16O", "12C18O"}
    assert set(library.molecules()) == {"HF", "DF", "HCl", "DCl", "HBr", "DBr", "HI", "DI", "CO"}


def test_resolve_molecules_and_labels(library) -> None:
    assert [e.label for e in library.resolve(["HCl"])] == ["H35Cl", "H37Cl"]
    assert [e.label for e in library.resolve(["dcl"])] == ["D35Cl", "D37Cl"]
    assert [e.label for e in library.resolve(["h37cl", "CO"])] == ["H37Cl", "12C16O", "13C16O", "12C18O"]
    assert [e.label for e in library.resolve(["HCl", "H35Cl"])] == ["H35Cl", "H37Cl"]  # no duplicates
    assert library.isotopologue("d19f").label == "D19F"


def test_unknown_species_is_one_clear_error(library) -> None:
    with pytest.raises(UnknownSpeciesError, match="'XeF'"):
        library.resolve(["XeF"])
    with pytest.raises(UnknownSpeciesError):
        library.isotopologue("H36Cl")
    with pytest.raises(UnknownSpeciesError):
        library.molecule("NO")


def test_isotopologues_are_hashable_values(library) -> None:
    entry = library.isotopologue("H35Cl")
    assert isinstance(entry, Isotopologue)
    assert {entry: 1}[library.isotopologue("H35Cl")] == 1
    with pytest.raises(AttributeError):
        entry.abundance = 1.0  # type: ignore[misc]


def test_shipped_file_names_its_sources() -> None:
    text = shipped_library_path().read_text(encoding="utf-8")
    assert "AME2020" in text and "IUPAC" in text and "recalled" in text


# ------------------------------------------------------------------ user files
def write(tmp_path: Path, text: str) -> Path:
    path = tmp_path / "my_species.toml"
    path.write_text(text, encoding="utf-8")
    return path


NITRIC_OXIDE = """
[nuclides.14N]
element = "N"
mass_number = 14
mass_u = 14.00307400443
abundance = 0.99636
source = "AME2020 / IUPAC"

[molecules.NO]
band_strength_cm_per_molecule = 3e-18
overtone_ratio = 0.01
broadening_hwhm_cm1_per_atm = 0.06

[isotopologues.14N16O]
molecule = "NO"
nuclides = ["14N", "16O"]
[isotopologues.14N16O.constants]
omega_e = { value = 1904.2, source = "user lab notebook" }
B_e = { value = 1.67195, source = "user lab notebook", recalled = true }
"""


def test_scaled_constants_carry_their_parent_and_their_own_sigma(library) -> None:
    # D35Cl omega_e y_e = H35Cl's x (mu_H/mu_D)^(3/2) [Dunham mass scaling]; its sigma adds the
    # scaling's own (stated in the file) to the parent's, scaled.
    h, d = library.isotopologue("H35Cl"), library.isotopologue("D35Cl")
    ref = d.reference["omega_e_y_e"]
    factor = (h.reduced_mass_u / d.reduced_mass_u) ** 1.5
    assert ref.scaled_from == "H35Cl" and ref.value == pytest.approx(0.2243 * factor, rel=1e-12)
    assert ref.sigma == pytest.approx(math.hypot(h.reference["omega_e_y_e"].sigma * factor, ref.scaling_sigma), rel=1e-12)
    # derived H/D isotopologues state the Born-Oppenheimer size of their scaled omega_e, B_e
    assert library.isotopologue("D79Br").reference["omega_e"].scaling_sigma == 0.3


def test_user_file_adds_a_molecule(tmp_path) -> None:
    library = load_library(write(tmp_path, NITRIC_OXIDE))
    (entry,) = library.resolve(["no"])
    assert entry.label == "14N16O"
    # Periodictable (AME masses) agree with the user's 14N mass to < 1e-7 relative.
    assert entry.masses_u[0] == pytest.approx(periodictable.N[14].mass, rel=1e-7)
    assert entry.dunham == {(1, 0): 1904.2, (0, 1): 1.67195}
    assert entry.constant("alpha_e") is None
    assert len(library.isotopologues()) == 16  # the shipped ones are still there


def test_user_override_propagates_to_derived_isotopologues(tmp_path) -> None:
    path = write(tmp_path, """
[isotopologues.H35Cl.constants]
B_e = { value = 10.6, source = "test override" }
[molecules.HCl]
broadening_hwhm_cm1_per_atm = 0.15
""")
    library = load_library(path)
    assert library.isotopologue("H35Cl").constant("B_e") == 10.6
    assert library.isotopologue("H35Cl").constant("omega_e") == 2990.946  # others kept
    # Derived H37Cl follows its parent through mass scaling.
    mu35 = library.isotopologue("H35Cl").reduced_mass_u
    mu37 = library.isotopologue("H37Cl").reduced_mass_u
    assert library.isotopologue("H37Cl").constant("B_e") == pytest.approx(10.6 * mu35 / mu37, rel=1e-14)
    assert library.isotopologue("H37Cl").broadening_hwhm_cm1_per_atm == 0.15
    # The cached shipped library is untouched.
    assert load_library().isotopologue("H35Cl").constant("B_e") == 10.593416


@pytest.mark.parametrize(
    ("text", "expected_in_message"),
    [
        ('[nuclides.14N]\nelement = "N"\nmass_number = 14\nabundance = 0.99\nsource = "x"\n',
         "nuclides.14N.mass_u: missing"),
        ('[isotopologues.H35Cl.constants]\nB_e = { value = -10.6, source = "x" }\n',
         "isotopologues.H35Cl.constants.B_e.value: must be positive"),
        ('[isotopologues.H35Cl.constants]\nB_e = { value = "ten", source = "x" }\n',
         "isotopologues.H35Cl.constants.B_e.value: must be a number"),
        ('[isotopologues.H99Cl]\nmolecule = "HCl"\nnuclides = ["1H", "99Cl"]\nderived_from = "H35Cl"\n',
         "unknown nuclide '99Cl'"),
        ('[isotopologues.H35Cl.constants]\nomega_ee = { value = 1.0, source = "x" }\n',
         "isotopologues.H35Cl.constants.omega_ee: unknown constant"),
        ('[isotopologues.HCl37]\nmolecule = "HCl"\nnuclides = ["1H", "37Cl"]\nderived_from = "H35Cl"\n',
         "label must be 'H37Cl'"),
        ('[isotopologues.H37Cl]\nderived_from = "H38Cl"\n', "derived_from: unknown isotopologue"),
        ('[molecules.HCl]\novertone_ratio = true\n', "molecules.HCl.overtone_ratio: must be a number"),
        ('[nuclides.35Cl]\nmass_u = 35.453\n', "nuclides.35Cl.mass_u: 35.453 u is not an isotopic mass"),
        ("[isotopologues.H35Cl\nB_e = 1\n", "not valid TOML"),
        ("[species]\nx = 1\n", "species: unknown section"),
        ('[isotopologues.H35Cl.constants]\nB_e = { value = 10.6, sigma = -1e-6, source = "x" }\n',
         "isotopologues.H35Cl.constants.B_e.sigma: must not be negative"),
        ('[isotopologues.D35Cl.constants]\ngamma_e = { scaled_from = "H35Cl", value = 1e-4, source = "x" }\n',
         "isotopologues.D35Cl.constants.gamma_e: give either value or scaled_from"),
        ('[isotopologues.D35Cl.constants]\ngamma_e = { scaled_from = "H36Cl", source = "x" }\n',
         "gamma_e.scaled_from: unknown isotopologue 'H36Cl'"),
        ('[isotopologues.D35Cl.constants]\ngamma_e = { scaled_from = "D19F", source = "x" }\n',
         "'D19F' has no gamma_e"),
        ('[isotopologues.D79Br]\nmass_scaling_sigma = { omega_e = "big" }\n',
         "isotopologues.D79Br.mass_scaling_sigma.omega_e: must be a number"),
    ],
)
def test_malformed_user_file_names_file_and_key(tmp_path, text, expected_in_message) -> None:
    path = write(tmp_path, text)
    with pytest.raises(LibraryFileError) as caught:
        load_library(path)
    message = str(caught.value)
    assert message.startswith(str(path)), message
    assert expected_in_message in message
    assert "\n" not in message


def test_average_atomic_weight_is_rejected(tmp_path) -> None:
    # 79.904 is bromine's standard atomic weight (IUPAC) -- an average, never a nuclide mass.
    path = write(tmp_path, '[nuclides.79Br]\nmass_u = 79.904\n')
    with pytest.raises(LibraryFileError, match="nuclides.79Br.mass_u: 79.904 u is not an isotopic mass"):
        load_library(path)


def test_missing_user_file(tmp_path) -> None:
    with pytest.raises(LibraryFileError, match="file not found"):
        load_library(tmp_path / "absent.toml")


def test_interferent_regions_come_from_the_library_file_and_a_user_file_adds_one(tmp_path) -> None:
    from processing.species import load_library

    shipped = load_library()
    # CO2 asymmetric stretch near 2349 cm-1 and the water bend near 1595 cm-1 (common practice)
    assert shipped.interferent_region(2349.0).absorber == "CO2"
    assert shipped.interferent_region(1595.0).absorber == "water-vapour"
    assert shipped.interferent_region(2886.0) is None  # the HCl fundamental is no interferent region
    user = tmp_path / "extra.toml"
    user.write_text('[interferent_regions.methane]\nfirst_cm1 = 2900.0\nlast_cm1 = 3100.0\n'
                    'absorber = "methane"\ndescription = "methane-like stretch region"\n')
    extended = load_library(user)
    assert extended.interferent_region(3020.0).description == "methane-like stretch region"
    bad = tmp_path / "bad.toml"
    bad.write_text('[interferent_regions.backwards]\nfirst_cm1 = 3100.0\nlast_cm1 = 2900.0\n'
                   'absorber = "x"\ndescription = "y"\n')
    import pytest

    from processing.species import LibraryFileError

    with pytest.raises(LibraryFileError, match="interferent_regions.backwards"):
        load_library(bad)
