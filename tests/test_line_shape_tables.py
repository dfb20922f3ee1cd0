"""The shipped start of each line-shape table is the FFT's own (the reference: the full table
computed here, one FFT of the window), and a line shape gives the same numbers from either."""
from __future__ import annotations

import numpy as np
import pytest

from processing import line_shape_tables as tables
from processing.apodization import APODIZATIONS
from processing.line_shape import LineShapeModel


@pytest.mark.parametrize("window", APODIZATIONS)
def test_shipped_near_table_is_the_start_of_the_full_table(window: str) -> None:
    assert (tables.NEAR_FOLDER / f"{window}.npy").is_file(), "run `python -m processing.line_shape_tables`"
    s_full, f_full = tables.full_table(window)
    s_near, f_near = tables.near_table(window)
    assert s_near[-1] == tables.NEAR_S and np.array_equal(s_near, s_full[: s_near.size])
    # another numpy build may round its FFT differently in the last bits; a stale file (a
    # window changed, not written again) differs by far more
    assert np.max(np.abs(f_near - f_full[: f_near.size])) <= 1e-12 * f_full[0]


@pytest.mark.parametrize("window", APODIZATIONS)
def test_a_line_shape_is_the_same_from_the_near_and_the_full_table(window: str) -> None:
    model = LineShapeModel(window, 2.0, "test")
    near_offsets = np.linspace(-tables.NEAR_S / 2.0, tables.NEAR_S / 2.0, 2001)  # s up to NEAR_S
    s, f = tables.full_table(window)
    expected = np.interp(np.abs(near_offsets) * 2.0, s, f, right=0.0) * 2.0
    np.testing.assert_allclose(model.shape(near_offsets), expected, rtol=0, atol=1e-12 * f[0] * 2.0)
    far = np.array([0.0, 100.0, 400.0])  # s up to 800: from the full table
    np.testing.assert_array_equal(model.shape(far), np.interp(far * 2.0, s, f, right=0.0) * 2.0)
    # the sinc line shape of an unapodized interferogram of maximum path difference L has a
    # FWHM of 1.2067 / (2L) (common practice); the table's 1/32 steps give it to ~1e-3
    if window == "boxcar":
        assert model.fwhm_cm1 * 2.0 == pytest.approx(1.2067 / 2.0, abs=1e-3)
