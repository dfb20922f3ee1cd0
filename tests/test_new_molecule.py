"""A molecule the shipped library does not know, added by a library file alone: the library
answers every molecule question about it (family, H/D partner, which isotopologues pair), and
the analysis finds, assigns, pairs and checks it with no code change. Also: no analysis module
names a molecule or a nuclide (that knowledge is the library's)."""
from __future__ import annotations

import ast
import re
from pathlib import Path

import pytest

from processing.instrument import Instrument
from processing.levels import band_origin
from processing.pipeline import ProcessSettings, analyse, result_from_analysis
from processing.simulate import Cell, SampleGas, SimulationSettings, simulate
from processing.species import load_library

# Lithium hydride, X 1Sigma+, 7LiH: Huber & Herzberg 1979 (via NIST Chemistry WebBook), values
# recalled from memory (cm-1; r_e in angstrom).
LIH = {"omega_e": 1405.65, "omega_e_x_e": 23.20, "B_e": 7.5131, "alpha_e": 0.2132, "D_e": 8.617e-4, "r_e": 1.5949}
# AME2020 isotopic masses (u) and IUPAC 2013 representative abundances of lithium, recalled.
LI6_MASS, LI7_MASS = 6.0151228874, 7.0160034366
LI6_ABUNDANCE, LI7_ABUNDANCE = 0.0759, 0.9241

LIBRARY_FILE = f"""
[nuclides.6Li]
element = "Li"
mass_number = 6
mass_u = {LI6_MASS}
abundance = {LI6_ABUNDANCE}
source = "mass: AME2020; abundance: IUPAC 2013 representative (recalled)"

[nuclides.7Li]
element = "Li"
mass_number = 7
mass_u = {LI7_MASS}
abundance = {LI7_ABUNDANCE}
source = "mass: AME2020; abundance: IUPAC 2013 representative (recalled)"

[molecules.LiH]
band_strength_cm_per_molecule = 1.0e-17
overtone_ratio = 0.02
broadening_hwhm_cm1_per_atm = 0.2
band_strength_source = "set for this test (strong enough to be seen; not a measured value)"

[molecules.LiD]
band_strength_cm_per_molecule = 5.0e-18
overtone_ratio = 0.02
broadening_hwhm_cm1_per_atm = 0.2
band_strength_source = "LiH value x 0.5 (rough harmonic estimate)"

[isotopologues.H7Li]
molecule = "LiH"
nuclides = ["1H", "7Li"]

[isotopologues.H7Li.constants]
omega_e = {{ value = {LIH["omega_e"]}, sigma = 0.05, source = "H&H 1979 via NIST WebBook", recalled = true }}
omega_e_x_e = {{ value = {LIH["omega_e_x_e"]}, sigma = 0.05, source = "H&H 1979 via NIST WebBook", recalled = true }}
B_e = {{ value = {LIH["B_e"]}, sigma = 0.0005, source = "H&H 1979 via NIST WebBook", recalled = true }}
alpha_e = {{ value = {LIH["alpha_e"]}, sigma = 0.0005, source = "H&H 1979 via NIST WebBook", recalled = true }}
D_e = {{ value = {LIH["D_e"]}, sigma = 5e-6, source = "H&H 1979 via NIST WebBook", recalled = true }}

[isotopologues.H6Li]
molecule = "LiH"
nuclides = ["1H", "6Li"]
derived_from = "H7Li"

[isotopologues.D7Li]
molecule = "LiD"
nuclides = ["2H", "7Li"]
derived_from = "H7Li"

[isotopologues.D6Li]
molecule = "LiD"
nuclides = ["2H", "6Li"]
derived_from = "H7Li"
"""


@pytest.fixture(scope="module")
def library_file(tmp_path_factory: pytest.TempPathFactory) -> Path:
    path = tmp_path_factory.mktemp("library") / "lithium.toml"
    path.write_text(LIBRARY_FILE, encoding="utf-8")
    return path


def test_the_library_answers_molecule_questions_about_an_added_molecule(library_file: Path) -> None:
    library = load_library(library_file)
    assert library.family("LiH") == library.family("D6Li") == "H-Li"  # elements, not isotopes
    assert (library.partner("LiH"), library.partner("LiD")) == ("LiD", "LiH")
    assert library.light_and_heavy("LiD") == ("LiH", "LiD")
    assert library.partner_isotopologue("H7Li") == "D7Li" and library.partner_isotopologue("D6Li") == "H6Li"
    # the shipped molecules are unchanged by the addition
    assert library.partner("HCl") == "DCl" and library.partner("CO") is None
    # natural abundance of the main form from the nuclides' (IUPAC values above)
    assert library.isotopologue("H7Li").abundance == pytest.approx(0.999885 * LI7_ABUNDANCE, rel=1e-12)


def test_an_added_molecule_is_found_assigned_paired_and_checked(library_file: Path) -> None:
    library = load_library(library_file)
    # A cell of LiH with some LiD (a vapour needs ~1000 K; drawn at 296 K: the point here is
    # the data path, not a real cell).
    settings = SimulationSettings(
        (SampleGas(("LiH",), 0.004), SampleGas(("LiD",), 0.004)), Cell(10.0, total_pressure_atm=1.0),
        Instrument(resolution_cm1=0.25, first_cm1=850.0, last_cm1=1750.0, snr=5000.0, seed=7),
    )
    spectrum = simulate(settings, library).spectrum
    analysis = analyse(spectrum, ProcessSettings(species=("LiD",), library_file=str(library_file)))
    result = result_from_analysis("lithium", analysis)

    bands = {(b.isotopologue, b.v_upper, b.v_lower): b for b in result.bands}
    assert {("H7Li", 1, 0), ("D7Li", 1, 0)} <= set(bands)
    for label in ("H7Li", "D7Li"):
        fit = bands[(label, 1, 0)]
        expected = band_origin(library.isotopologue(label).dunham, 1, 0)
        # the simulation draws the library's lines: the fitted origin is the library's to well
        # within a hundredth of the resolution
        assert abs(fit.origin.value - expected) < 0.0025, (label, fit.origin.value, expected)
        assert fit.n_lines >= 15
    # r_e from the term fit of H7Li against the handbook r_e (H&H: 1.5949 A; the B_e above gives
    # 1.5958 with these masses, calc)
    h7li = next(c for c in result.constants if c.isotopologue == "H7Li")
    assert h7li.constants["r_e"] is not None
    assert h7li.constants["r_e"].value == pytest.approx(LIH["r_e"], abs=0.002)
    # paired with its H/D partner: the hydrogen fraction (truth 0.5 by pressure; the library's
    # D band strength is a rough half of the hydride's, so within a generous 0.15)
    assert result.intensities is not None
    (fraction,) = result.intensities.hydrogen_fractions
    assert (fraction.molecule_h, fraction.molecule_d) == ("LiH", "LiD")
    assert "H7Li against D7Li" in fraction.basis
    assert fraction.fraction_h.value == pytest.approx(0.5, abs=0.15)
    # the molecules' family for the mass-reduced fit
    assert result.mass_reduced is not None and any(fit.molecule == "H-Li" for fit in result.mass_reduced)
    # and checked: the expected LiD is there, the LiH beside it is named as H/D exchange
    checks = {check.name: check for check in result.checks}
    assert "unexpected LiH present (H/D exchange?" in checks["isotopologues"].detail
    assert checks["calibration"].status == "pass"


# Analysis code holds no molecule names and no nuclide labels: the library file does.
ANALYSIS_MODULES = (
    "assign", "baseline", "checks", "contour", "doublets", "dunham_fit", "fit", "fringes", "intensities", "levels",
    "library_uncertainty", "line_intensities", "line_shape", "linear_fit", "lines", "model_reference",
    "molecular_constants", "noise", "pipeline", "result_text", "results",
)
PROCESSING = Path(__file__).resolve().parents[1] / "processing"


def _string_constants(tree: ast.AST) -> list[str]:
    """String literals other than docstrings."""
    docstrings = {
        id(node.body[0].value) for node in ast.walk(tree)
        if isinstance(node, (ast.Module, ast.ClassDef, ast.FunctionDef, ast.AsyncFunctionDef)) and node.body
        and isinstance(node.body[0], ast.Expr) and isinstance(node.body[0].value, ast.Constant)
    }
    return [node.value for node in ast.walk(tree)
            if isinstance(node, ast.Constant) and isinstance(node.value, str) and id(node) not in docstrings]


def test_no_molecule_names_or_nuclide_labels_in_analysis_code() -> None:
    library = load_library()
    names = set(library.molecules()) | {iso.label for iso in library.isotopologues()} | set(library.nuclides)
    pattern = re.compile(r"(?<![A-Za-z0-9_])(" + "|".join(sorted(map(re.escape, names), key=len, reverse=True)) + r")(?![A-Za-z0-9_])")
    found = []
    for module in ANALYSIS_MODULES:
        tree = ast.parse((PROCESSING / f"{module}.py").read_text(encoding="utf-8"))
        for text in _string_constants(tree):
            for match in pattern.finditer(text):
                found.append(f"{module}.py: {match.group(0)!r} in {text[:60]!r}")
    assert found == []
