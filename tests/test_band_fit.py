"""Band fits and combination differences against published line positions and handbook constants."""
from __future__ import annotations

import numpy as np
import pytest

from processing.fit import combination_difference_pairs, fit_band
from processing.levels import band_lines, dunham_from_constants, rotational_constant
from processing.linear_fit import weighted_least_squares
from processing.pipeline import ProcessSettings, analyse
from processing.spectrum import LineList

# 12C16O 1-0 wavenumber standards (cm-1): A. Maki and J. Wells, NIST Special Publication 821
# (1991), heterodyne-based calibration tables, as reproduced in the CRC Handbook table
# "Infrared and far-infrared absorption frequency standards".
CO_R = {0: 2147.081132, 1: 2150.856006, 2: 2154.595581, 3: 2158.299710, 4: 2161.968245}
CO_P = {1: 2139.426071, 2: 2135.546178, 3: 2131.631574, 4: 2127.682404}
# A four-parameter fit of these nine lines (D' = D''): nu0 2143.271104, B0 1.9225289,
# B1 1.9050260, D 6.119e-6 (calc); the issue asks for 1e-5 agreement.
CO_ORIGIN, CO_B0, CO_B1 = 2143.27110, 1.922529, 1.905026


def _co_arrays() -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    branch = np.array(["R"] * len(CO_R) + ["P"] * len(CO_P))
    J = np.array(list(CO_R) + list(CO_P))
    positions = np.array(list(CO_R.values()) + list(CO_P.values()))
    return branch, J, positions


def test_co_standard_lines_give_published_band_constants() -> None:
    branch, J, positions = _co_arrays()
    fit = fit_band("12C16O", 1, 0, branch, J, positions, np.full(positions.size, 1e-6))
    assert fit.origin.value == pytest.approx(CO_ORIGIN, abs=1e-5)
    assert fit.B_lower.value == pytest.approx(CO_B0, abs=1e-5)
    assert fit.B_upper.value == pytest.approx(CO_B1, abs=1e-5)
    # the tables are given to 1e-6 cm-1; a correct model leaves residuals at that level
    assert fit.rms < 1e-6
    assert fit.d_model == "common D"
    assert fit.D_lower is not None and fit.D_lower.value == pytest.approx(6.119e-6, rel=0.01)


def test_co_standard_lines_as_a_line_list_are_assigned_and_fitted() -> None:
    # The same nine lines as a bare line list, no J given: bandwatch must number them itself.
    _, _, positions = _co_arrays()
    lines = LineList(positions, np.ones(positions.size))
    analysis = analyse(lines, ProcessSettings())
    bands = {f.isotopologue: f for f in analysis.assignment.bands}
    assert set(bands) == {"12C16O"}
    fit = bands["12C16O"]
    assert fit.n_lines == 9
    assert fit.origin.value == pytest.approx(CO_ORIGIN, abs=1e-5)
    assert fit.B_lower.value == pytest.approx(CO_B0, abs=1e-5)
    assert fit.B_upper.value == pytest.approx(CO_B1, abs=1e-5)
    labels = {(a.branch, a.J_lower) for a in analysis.assignment.per_line if a}
    assert labels == {("R", j) for j in CO_R} | {("P", j) for j in CO_P}


# H35Cl ground-state constants, Huber & Herzberg 1979 via NIST Chemistry WebBook, recalled
# from memory: omega_e 2990.946, omega_e x_e 52.8186, B_e 10.593416, alpha_e 0.307181,
# D_e 5.3194e-4 (cm-1).
HCL = {"omega_e": 2990.946, "omega_e_x_e": 52.8186, "B_e": 10.593416, "alpha_e": 0.307181, "D_e": 5.3194e-4}


def test_hcl_lines_predicted_from_handbook_constants_give_them_back() -> None:
    dunham = dunham_from_constants(HCL)
    lines = band_lines(dunham, 1, 0, 12)
    fit = fit_band("H35Cl", 1, 0, lines.branch, lines.J_lower, lines.wavenumber_cm1, np.full(lines.m.size, 1e-4))
    # B_v = B_e - alpha_e (v + 1/2): B0 = 10.4398255, B1 = 10.1326445 (calc)
    assert fit.B_lower.value == pytest.approx(HCL["B_e"] - 0.5 * HCL["alpha_e"], abs=1e-7)
    assert fit.B_upper.value == pytest.approx(HCL["B_e"] - 1.5 * HCL["alpha_e"], abs=1e-7)
    assert fit.B_lower.value == pytest.approx(rotational_constant(dunham, 0), abs=1e-7)
    # nu0 = omega_e - 2 omega_e x_e = 2885.3088 (calc from the constants above)
    assert fit.origin.value == pytest.approx(HCL["omega_e"] - 2 * HCL["omega_e_x_e"], abs=1e-6)
    assert fit.D_lower is not None and fit.D_lower.value == pytest.approx(HCL["D_e"], rel=1e-4)
    # the combination differences see one state each and agree with the band fit
    assert fit.lower_combination is not None and fit.upper_combination is not None
    assert fit.lower_combination.B.value == pytest.approx(fit.B_lower.value, abs=1e-6)
    assert fit.upper_combination.B.value == pytest.approx(fit.B_upper.value, abs=1e-6)


def test_combination_difference_pairs_follow_the_definitions() -> None:
    # Delta2F''(J) = R(J-1) - P(J+1); Delta2F'(J) = R(J) - P(J) (definitions, common practice)
    branch, J, positions = _co_arrays()
    sigma = np.full(positions.size, 1e-6)
    J_low, diff_low, _ = combination_difference_pairs("lower", branch, J, positions, sigma)
    assert J_low.tolist() == [1, 2, 3]
    assert diff_low[0] == pytest.approx(CO_R[0] - CO_P[2], abs=1e-12)
    J_up, diff_up, _ = combination_difference_pairs("upper", branch, J, positions, sigma)
    assert J_up.tolist() == [1, 2, 3, 4]
    assert diff_up[3] == pytest.approx(CO_R[4] - CO_P[4], abs=1e-12)
    # 4 B (J + 1/2) for the lower state at J=1 with B0 = 1.92253: 11.535 cm-1, less D (calc)
    assert diff_low[0] == pytest.approx(4 * CO_B0 * 1.5, abs=2e-3)


def test_centrifugal_terms_are_dropped_when_the_data_do_not_determine_them() -> None:
    # Only J'' <= 3 of a light D: the D terms (~6e-6 x 144 = 1e-3 cm-1) sit far below a
    # 0.01 cm-1 scatter, so the model must fall back to "no D".
    rng = np.random.default_rng(4)
    dunham = dunham_from_constants({"omega_e": 2169.81358, "omega_e_x_e": 13.28831, "B_e": 1.93128087, "alpha_e": 0.01750441, "D_e": 6.12147e-6})
    lines = band_lines(dunham, 1, 0, 3)
    noisy = lines.wavenumber_cm1 + rng.normal(0, 0.01, lines.m.size)
    fit = fit_band("12C16O", 1, 0, lines.branch, lines.J_lower, noisy, np.full(lines.m.size, 0.01))
    assert fit.d_model == "no D"
    assert fit.D_upper is None and fit.D_lower is None


def test_outlier_rule_removes_a_misplaced_line_and_says_so() -> None:
    dunham = dunham_from_constants(HCL)
    lines = band_lines(dunham, 1, 0, 8)
    rng = np.random.default_rng(7)
    observed = lines.wavenumber_cm1 + rng.normal(0, 0.002, lines.m.size)
    observed[5] += 0.5  # a misread line, 250 sigma off
    fit = fit_band("H35Cl", 1, 0, lines.branch, lines.J_lower, observed, np.full(lines.m.size, 0.002))
    assert not fit.used[5]
    assert fit.used.sum() == lines.m.size - 1
    assert "4 x max" in fit.rejection_rule
    assert fit.B_lower.value == pytest.approx(rotational_constant(dunham, 0), abs=5 * fit.B_lower.sigma + 1e-4)


def test_standard_errors_match_the_scatter_of_repeated_fits() -> None:
    # Seeded Monte Carlo: the reported sigma of nu0 must match the spread of nu0 over
    # 300 noisy realisations within 15% (the sampling error of a 300-sample std is ~4%).
    dunham = dunham_from_constants(HCL)
    lines = band_lines(dunham, 1, 0, 9)
    rng = np.random.default_rng(11)
    origins, sigmas = [], []
    for _ in range(300):
        noisy = lines.wavenumber_cm1 + rng.normal(0, 0.01, lines.m.size)
        fit = fit_band("H35Cl", 1, 0, lines.branch, lines.J_lower, noisy, np.full(lines.m.size, 0.01))
        origins.append(fit.origin.value)
        sigmas.append(fit.origin.sigma)
    assert np.std(origins) == pytest.approx(np.median(sigmas), rel=0.15)


def test_weighted_least_squares_reproduces_a_straight_line_exactly() -> None:
    x = np.arange(10.0)
    y = 3.0 + 2.0 * x
    fit = weighted_least_squares(np.column_stack([np.ones_like(x), x]), y, np.ones_like(x), ("a", "b"))
    assert fit.value("a") == pytest.approx(3.0, abs=1e-12)
    assert fit.value("b") == pytest.approx(2.0, abs=1e-12)
    assert fit.rms < 1e-12


def test_a_band_with_a_held_sextic_difference_predicts_the_lines_it_was_fitted_to() -> None:
    """With H'' fitted and H' - H'' held, `predict` must add the held difference once: the
    positions it gives are the band's own within the line noise (before the fix it added the
    difference twice: 7.8 noise sigmas off at J'' = 25). Common practice: a fitted model
    reproduces its data; the lines come from a Dunham expansion with a sextic term large enough
    to be fitted and an upper-lower difference too small to be."""
    from processing.fit import H_DIFFERENCE_HELD, fit_band
    from processing.levels import band_lines

    h_difference_per_v, noise = 1e-10, 1e-3  # cm-1
    dunham = {(1, 0): 2990.9, (2, 0): -52.8, (0, 1): 10.59, (1, 1): -0.307, (0, 2): -5.3e-4, (0, 3): 1.7e-8,
              (1, 3): h_difference_per_v}
    band = band_lines(dunham, 1, 0, 25)
    observed = band.wavenumber_cm1 + np.random.default_rng(1).normal(0.0, noise, band.m.size)
    library = (-5.3e-4, -5.3e-4, 1.7e-8 + 1.5 * h_difference_per_v, 1.7e-8 + 0.5 * h_difference_per_v)
    fit = fit_band("H35Cl", 1, 0, band.branch, band.J_lower, observed, np.full(observed.size, noise),
                   library_centrifugal=library)
    assert fit.h_model == H_DIFFERENCE_HELD
    predicted, _ = fit.predict(band.branch, band.J_lower)
    assert np.max(np.abs(predicted - band.wavenumber_cm1)) < 2.0 * noise
