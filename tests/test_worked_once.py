"""Numbers the constants and intensities stage works out once and shares (a band's library
rows, design columns of a selection, all equivalent-width windows in one pass) against the
same numbers worked out directly, one by one."""
from __future__ import annotations

import numpy as np
import pytest

from processing.dunham_fit import AssignedLines
from processing.levels import upper_J
from processing.library_uncertainty import predicted_lines, term_column
from processing.line_intensities import _integrated_depth
from processing.line_shape import transmittance_depth
from processing.molecular_constants import _band_rows
from processing.species import load_library


@pytest.fixture(scope="module")
def library():
    return load_library()


def test_integrated_depth_of_every_window_is_its_own_trapezoid_integral() -> None:
    # numpy.trapezoid on each window's own points (common practice); the windows include
    # touching and empty ones and ones reaching past either end of the spectrum
    rng = np.random.default_rng(3)
    x = np.linspace(2000.0, 2100.0, 20001)
    absorbance = 0.02 * rng.standard_normal(x.size) + sum(
        h / (1 + ((x - c) / 0.05) ** 2) for c, h in ((2010.0, 0.8), (2010.3, 0.4), (2050.0, 2.0), (2099.99, 0.3))
    )
    left = np.array([1990.0, 2009.5, 2010.15, 2030.0, 2049.0, 2060.0, 2099.0])
    right = np.array([2001.0, 2010.15, 2011.0, 2030.0, 2051.0, 2059.0, 2200.0])
    got = _integrated_depth(x, absorbance, left, right)
    for k, (a, b) in enumerate(zip(left, right)):
        lo = min(max(int(np.searchsorted(x, a)), 0), x.size - 1)
        hi = min(max(int(np.searchsorted(x, b)), 0), x.size - 1)
        expected = float(np.trapezoid(transmittance_depth(absorbance[lo : hi + 1]), x[lo : hi + 1])) if hi > lo else 0.0
        # summation order differs (one pass over all windows): rounding only
        assert got[k] == pytest.approx(expected, rel=1e-12, abs=1e-15), k
    assert got[3] == 0.0 and got[5] == 0.0  # empty and reversed windows


@pytest.mark.parametrize("label, v_upper, v_lower", [("H35Cl", 1, 0), ("D37Cl", 2, 0), ("H35Cl", 2, 1)])
def test_band_rows_from_the_table_are_the_library_lines_one_by_one(library, label, v_upper, v_lower) -> None:
    # P and R lines up to J'' = 45 (past the first table of 32) against predicted_lines
    J_lower = np.array([1, 2, 45, 0, 7, 31, 32, 33, 3])
    branch = np.array(["P", "P", "R", "R", "R", "P", "R", "P", "R"])
    J_up = upper_J(branch, J_lower)
    got_positions, got_jacobian = _band_rows(library, label, v_upper, v_lower, J_up, J_lower)
    for k in range(J_lower.size):
        position, jacobian = predicted_lines(library, label, np.array([v_upper]), J_up[k : k + 1], np.array([v_lower]), J_lower[k : k + 1])
        np.testing.assert_allclose(got_positions[k], position[0], rtol=1e-15, atol=0)
        np.testing.assert_allclose(got_jacobian[k], jacobian[0], rtol=1e-15, atol=0)


def test_band_rows_outside_a_p_or_r_branch_are_computed_directly(library) -> None:
    # J' = J'' (no P or R line) has no row in the table: computed as predicted_lines does
    J_lower = np.array([3, 4])
    J_up = np.array([3, 5])
    positions, jacobian = _band_rows(library, "H35Cl", 1, 0, J_up, J_lower)
    expected_positions, expected_jacobian = predicted_lines(library, "H35Cl", np.array([1, 1]), J_up, np.array([0, 0]), J_lower)
    np.testing.assert_array_equal(positions, expected_positions)
    np.testing.assert_array_equal(jacobian, expected_jacobian)


def test_columns_of_a_selection_are_those_of_its_own_lines(library) -> None:
    masses = {label: library.isotopologue(label).reduced_mass_u for label in ("H35Cl", "D35Cl")}
    labels = np.array(["H35Cl"] * 4 + ["D35Cl"] * 3, dtype=object)
    v_upper = np.array([1, 1, 2, 2, 1, 1, 1])
    J_lower = np.array([0, 3, 5, 9, 2, 4, 6])
    J_upper = J_lower + np.array([1, -1, 1, -1, 1, 1, -1])
    lines = AssignedLines(labels, np.array([masses[label] for label in labels]), v_upper, np.zeros(7, dtype=np.int64),
                          J_upper, J_lower, np.zeros(7), np.full(7, 1e-3))
    mine = lines.select(labels == "D35Cl")
    for k, l in ((1, 0), (2, 0), (0, 1), (1, 1), (0, 2), (0, 3)):
        direct = term_column(mine.v_upper, mine.J_upper, mine.v_lower, mine.J_lower, k, l)
        np.testing.assert_array_equal(mine.column(k, l, False), direct)
        np.testing.assert_array_equal(mine.column(k, l, True), direct * mine.reduced_mass_u ** (-(k / 2.0 + l)))
