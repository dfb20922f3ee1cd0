"""The 'what changed' report: a library correction shows as one clean shift per quantity."""
from __future__ import annotations

import math
from pathlib import Path

from reprocess_support import write_archive
from test_reprocess_local import reprocess

from processing.pipeline import ProcessSettings
from processing.reprocess import plan
from processing.species import shipped_library_path

# AME2020 isotopic masses (u), as the shipped library holds them
MASS_1H = 1.00782503223
MASS_35CL = 34.968852682
CHANGED_35CL = MASS_35CL + 0.1  # a deliberately wrong mass: the "correction" under test
# H35Cl r_e and B_e, Huber & Herzberg 1979 via the NIST Chemistry WebBook (values recalled from memory)
R_E_ANGSTROM = 1.27455
B_E_CM1 = 10.5934


def _reduced_mass(heavy: float) -> float:
    return MASS_1H * heavy / (MASS_1H + heavy)


def test_a_library_mass_change_shows_as_one_clean_shift_and_r_e_moves_as_mu_and_b_e_say(tmp_path: Path) -> None:
    # 1 cm-1: the 35Cl and 37Cl lines are resolved, so the measured positions do not depend on
    # the library (at 4 cm-1 each line is measured beside its modelled partner, whose position
    # follows the masses: the origin would move with the noise of each file's ratio model)
    archive, data = tmp_path / "archive", tmp_path / "data"
    write_archive(archive, 12, resolution_cm1=1.0)
    first = reprocess(data, archive)
    assert first.recorded == 12 and first.quantity_shifts == ()  # nothing to compare yet

    library = tmp_path / "lab-library.toml"
    shipped = shipped_library_path().read_text(encoding="utf-8")
    assert f"mass_u = {MASS_35CL}\n" in shipped
    library.write_text(shipped.replace(f"mass_u = {MASS_35CL}\n", f"mass_u = {CHANGED_35CL!r}\n"), encoding="utf-8")
    summary = reprocess(data, archive, settings=ProcessSettings(library_file=str(library)))
    assert summary.reasons == {plan.LIBRARY_CHANGED: 12} and summary.recorded == 12

    shifts = {(s.isotopologue, s.band, s.quantity): s for s in summary.quantity_shifts}
    r_e = shifts[("H35Cl", "", "r_e")]
    assert r_e.count == 12 and r_e.unit == "angstrom"
    assert r_e.median != 0.0
    # one clean shift: the quartiles sit within 0.1% of the median's size around it
    assert r_e.upper_quartile - r_e.lower_quartile < 1e-3 * abs(r_e.median)
    assert r_e.lower_quartile <= r_e.median <= r_e.upper_quartile
    # the measured band is the library's business only through the comparison: unmoved
    origin = shifts.get(("H35Cl", "1-0", "origin"))
    assert origin is None or max(abs(origin.smallest), abs(origin.largest)) < 1e-6
    b_e = shifts.get(("H35Cl", "", "B_e"))
    b_e_shift = b_e.median if b_e is not None else 0.0
    # r_e = sqrt(h / (8 pi^2 c mu B_e)): to first order dr/r = -(dmu/mu + dB_e/B_e) / 2 (common practice)
    relative_mu = _reduced_mass(CHANGED_35CL) / _reduced_mass(MASS_35CL) - 1
    predicted = -0.5 * R_E_ANGSTROM * (relative_mu + b_e_shift / B_E_CM1)
    # the runs' own r_e and B_e differ from the handbook's by < 0.5%: so may the prediction
    assert math.isclose(r_e.median, predicted, rel_tol=5e-3), (r_e.median, predicted)
