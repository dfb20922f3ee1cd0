"""Term values, J/m bookkeeping and line positions against published and computed line lists."""
from __future__ import annotations

import numpy as np
import pytest

from processing.levels import (
    P_BRANCH,
    R_BRANCH,
    band_lines,
    band_origin,
    band_position_from_constants,
    branch_from_m,
    centrifugal_constant,
    m_from_branch,
    rotational_constant,
    term_value,
    upper_J,
)
from processing.species import load_library


@pytest.fixture(scope="module")
def library():
    return load_library()


def position(band, branch: str, J_lower: int) -> float:
    (index,) = np.nonzero((band.branch == branch) & (band.J_lower == J_lower))[0]
    return float(band.wavenumber_cm1[index])


# ------------------------------------------------------------------ J and m bookkeeping
def test_m_numbering_of_branches() -> None:
    # common practice: R(J'') has m = J''+1, P(J'') has m = -J''; no line at m = 0.
    assert m_from_branch(R_BRANCH, 0) == 1
    assert m_from_branch(R_BRANCH, 4) == 5
    assert m_from_branch(P_BRANCH, 1) == -1
    assert m_from_branch(P_BRANCH, 4) == -4
    branch, J = branch_from_m(np.array([-3, -1, 1, 3]))
    assert list(branch) == ["P", "P", "R", "R"]
    assert list(J) == [3, 1, 0, 2]
    with pytest.raises(ValueError, match="m = 0"):
        branch_from_m(np.array([1, 0]))


def test_upper_J_follows_branch() -> None:
    # common practice: R raises J by one, P lowers it by one.
    assert list(upper_J(np.array(["R", "P", "R"]), np.array([0, 1, 5]))) == [1, 0, 6]


def test_band_lines_layout(library) -> None:
    band = band_lines(library.isotopologue("H35Cl").dunham, 1, 0, J_max=5)
    assert list(band.m) == [-5, -4, -3, -2, -1, 1, 2, 3, 4, 5, 6]
    assert 0 not in band.m
    assert list(band.J_lower[band.branch == "P"]) == [5, 4, 3, 2, 1]  # P(0) does not exist
    assert list(band.J_lower[band.branch == "R"]) == [0, 1, 2, 3, 4, 5]
    assert np.all(band.J_upper - band.J_lower == np.where(band.branch == "R", 1, -1))
    assert np.all(np.diff(band.wavenumber_cm1) > 0)  # ascending near the origin
    assert band.lower_energy_cm1[band.m == 1][0] == 0.0  # R(0) starts in the ground level
    with pytest.raises(ValueError):
        band_lines(library.isotopologue("H35Cl").dunham, 0, 1, 5)


def test_band_model_formula_equals_term_differences(library) -> None:
    # For a Dunham set with l <= 2 the band formula with B_v, D_v is exact algebra (common
    # practice); 1e-9 cm-1 is far above float rounding (~1e-12 at 3000 cm-1).
    dunham = {term: y for term, y in library.isotopologue("H35Cl").dunham.items() if term[1] <= 2}
    for v_up, v_low in ((1, 0), (2, 0), (2, 1)):
        band = band_lines(dunham, v_up, v_low, J_max=25)
        model = band_position_from_constants(
            band_origin(dunham, v_up, v_low),
            rotational_constant(dunham, v_up), rotational_constant(dunham, v_low),
            centrifugal_constant(dunham, v_up), centrifugal_constant(dunham, v_low),
            band.m,
        )
        assert np.max(np.abs(model - band.wavenumber_cm1)) < 1e-9


def test_combination_difference_depends_on_lower_state_only(library) -> None:
    # Delta2F''(J) = R(J-1) - P(J+1) = F''(J+1) - F''(J-1) [common practice].
    dunham = library.isotopologue("12C16O").dunham
    for v_up in (1, 2):
        band = band_lines(dunham, v_up, 0, J_max=12)
        for J in range(1, 11):
            difference = position(band, "R", J - 1) - position(band, "P", J + 1)
            expected = float(term_value(dunham, 0, J + 1) - term_value(dunham, 0, J - 1))
            assert difference == pytest.approx(expected, abs=1e-9)


# ------------------------------------------------------------------ CO against the standards
# 12C16O 1-0 lines from heterodyne calibration tables: A. Maki and J. Wells, NIST Special
# Publication 821 (1991), reproduced in the CRC Handbook [pub].
CO_LINES = [("R", 0, 2147.081132), ("R", 1, 2150.856006), ("R", 2, 2154.595581),
            ("R", 3, 2158.299710), ("R", 4, 2161.968245), ("P", 1, 2139.426071),
            ("P", 2, 2135.546178), ("P", 3, 2131.631574), ("P", 4, 2127.682404)]


@pytest.mark.parametrize(("branch", "J_lower", "measured"), CO_LINES)
def test_co_positions_from_handbook_constants(library, branch, J_lower, measured) -> None:
    # The library's H&H set (omega_e .. omega_e y_e, B_e, alpha_e, D_e; no gamma_e, beta_e)
    # gives nu0 within 2e-5 cm-1 and B0, B1 within 2e-6 cm-1 of a fit to these lines [calc], so
    # at |m| <= 5 the error is <= 2e-5 + 2 * 5 * 2e-6 + |m|^2 terms ~ 5e-5 cm-1; 1e-4 allows it.
    band = band_lines(library.isotopologue("12C16O").dunham, 1, 0, J_max=6)
    assert position(band, branch, J_lower) == pytest.approx(measured, abs=1e-4)


def test_co_band_constants_match_fit_of_standard_lines(library) -> None:
    # 4-parameter fit of the nine lines above: nu0 = 2143.271104, B0 = 1.9225289,
    # B1 = 1.9050260 [calc from Maki & Wells]. Tolerances: a few units of the fit's last digit
    # plus the missing gamma_e (~1e-6 cm-1 in B_v).
    dunham = library.isotopologue("12C16O").dunham
    assert band_origin(dunham, 1, 0) == pytest.approx(2143.271104, abs=5e-5)
    assert rotational_constant(dunham, 0) == pytest.approx(1.9225289, abs=5e-6)
    assert rotational_constant(dunham, 1) == pytest.approx(1.9050260, abs=5e-6)


def test_co_lower_state_combination_difference_from_standards(library) -> None:
    # R(0) - P(2) = F''(2) - F''(0) = 2147.081132 - 2135.546178 = 11.534954 cm-1 (Maki & Wells
    # lines [pub]); B0 correct to 2e-6 gives 6 B0 correct to ~1e-5.
    band = band_lines(library.isotopologue("12C16O").dunham, 1, 0, J_max=3)
    assert position(band, "R", 0) - position(band, "P", 2) == pytest.approx(11.534954, abs=2e-5)


# ------------------------------------------------------------------ HCl predictions
# H35Cl 1-0 positions predicted from the H&H constants (with omega_e z_e = -0.0122, recalled
# from memory) [calc].
HCL_LINES = [("R", 0, 2906.248), ("R", 1, 2925.898), ("R", 2, 2944.917), ("R", 3, 2963.291),
             ("R", 4, 2981.009), ("P", 1, 2865.098), ("P", 2, 2843.625), ("P", 3, 2821.570),
             ("P", 4, 2798.946)]


@pytest.mark.parametrize(("branch", "J_lower", "predicted"), HCL_LINES)
def test_hcl_positions_from_handbook_constants(library, branch, J_lower, predicted) -> None:
    # The library's gamma_e (~0.0017, recalled to two digits) moves R(4) by 62.5 * d(gamma_e):
    # an error of 3e-4 in gamma_e is 0.02 cm-1 there; the predictions are rounded to 1e-3.
    # Measured agreement is <= 0.01 cm-1; 0.02 cm-1 is the justified bound.
    band = band_lines(library.isotopologue("H35Cl").dunham, 1, 0, J_max=6)
    assert position(band, branch, J_lower) == pytest.approx(predicted, abs=0.02)


def test_hcl_band_origins(library) -> None:
    dunham = library.isotopologue("H35Cl").dunham
    # nu0(1-0) = 2885.977 [H&H via NIST WebBook, recalled; calc from omega_e..omega_e z_e];
    # 2e-3 = its last printed digit plus rounding.
    assert band_origin(dunham, 1, 0) == pytest.approx(2885.977, abs=2e-3)
    # nu0(2-0) = 5667.98 [recalled from memory, calc]; 0.01 = its last digit.
    assert band_origin(dunham, 2, 0) == pytest.approx(5667.98, abs=0.01)


def test_chlorine_isotope_shift(library) -> None:
    # Textbook isotope shift (common practice): with rho = sqrt(mu35/mu37),
    # nu0(35) - nu0(37) ~ omega_e (1 - rho) - 2 omega_e x_e (1 - rho^2) = 2.10 cm-1; the
    # omega_e y_e/z_e terms add < 0.002 cm-1. Every H37Cl line lies 1.8-2.4 cm-1 lower for
    # J'' <= 8 (splitting 2.0-2.2 cm-1 near the origin [calc]).
    h35, h37 = library.isotopologue("H35Cl"), library.isotopologue("H37Cl")
    rho = np.sqrt(h35.reduced_mass_u / h37.reduced_mass_u)
    expected = 2990.946 * (1 - rho) - 2 * 52.8186 * (1 - rho**2)
    shift = band_origin(h35.dunham, 1, 0) - band_origin(h37.dunham, 1, 0)
    assert shift == pytest.approx(expected, abs=0.003)
    a = band_lines(h35.dunham, 1, 0, J_max=8)
    b = band_lines(h37.dunham, 1, 0, J_max=8)
    splitting = a.wavenumber_cm1 - b.wavenumber_cm1
    assert np.all((splitting > 1.8) & (splitting < 2.4))
    near_origin = splitting[np.abs(a.m) <= 2]
    assert np.all((near_origin > 2.0) & (near_origin < 2.2))


def test_m_of_one_line_matches_the_array_form() -> None:
    # m = J''+1 for R, -J'' for P (common practice)
    from processing.levels import m_from_branch, m_of_line

    for branch in ("P", "R"):
        for J in range(0, 60):
            assert m_of_line(branch, J) == int(m_from_branch(branch, J))
    assert (m_of_line("R", 0), m_of_line("P", 1), m_of_line("R", 9)) == (1, -1, 10)
