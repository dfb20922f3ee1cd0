"""The assignment survives what real runs throw at it: calibration offsets, interferents,
boxcar ringing, saturation, export quirks, a wrong species setting and an unknown species.

Spectra come from bandwatch's own simulator (invented data; the truth is its input).
"""
from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest

from processing.instrument import Instrument
from processing.interferents import Interferent
from processing.pipeline import ProcessSettings, analyse, process_file
from processing.simulate import Cell, SampleGas, SimulationSettings, auto_range, simulate
from processing.species import load_library


def _simulate(gases: tuple[SampleGas, ...], resolution: float = 0.5, path_cm: float = 10.0, library=None, interferents=(), first=None, last=None, **instrument):
    base = SimulationSettings(gases, Cell(path_cm), Instrument(resolution_cm1=resolution), interferents)
    lo, hi = auto_range(base) if first is None else (first, last)
    settings = SimulationSettings(
        gases, Cell(path_cm), Instrument(resolution_cm1=resolution, first_cm1=lo, last_cm1=hi, **instrument), interferents
    )
    return simulate(settings, library=library)


def _bands(analysis) -> dict[tuple[str, int, int], object]:
    return {(f.isotopologue, f.v_upper, f.v_lower): f for f in analysis.assignment.bands}


def _truth(sim) -> dict[tuple[str, int, int], object]:
    return {(b.isotopologue, b.v_upper, b.v_lower): b for b in sim.truth.bands}


def _numbering_errors(sim, analysis, shift: float = 0.0) -> int:
    """Assigned lines whose branch/J differ from the nearest true line of that isotopologue."""
    truth = sim.truth.lines
    wrong = 0
    for i, assigned in enumerate(analysis.assignment.per_line):
        if assigned is None:
            continue
        mine = np.flatnonzero(np.array([s == assigned.isotopologue for s in truth.source]))
        if mine.size == 0:
            wrong += 1
            continue
        k = mine[int(np.argmin(np.abs(truth.position_cm1[mine] - analysis.lines.position_cm1[i])))]
        wrong += int(truth.branch[k] != assigned.branch or int(truth.J_lower[k]) != assigned.J_lower)
    return wrong


def test_calibration_offset_of_1_5_cm1_is_absorbed_and_measured() -> None:
    sim = _simulate((SampleGas(("HCl",), 0.05),), calibration_shift_cm1=1.5, seed=5)
    analysis = analyse(sim.spectrum, ProcessSettings())
    bands = _bands(analysis)
    truth = _truth(sim)
    fit = bands[("H35Cl", 1, 0)]
    # the fitted origin carries the offset: truth + 1.5 within 5 sigma (offset is the input)
    assert abs(fit.origin.value - (truth[("H35Cl", 1, 0)].origin_cm1 + 1.5)) < 5 * fit.origin.sigma + 1e-3
    assert ("H37Cl", 1, 0) in bands
    assert _numbering_errors(sim, analysis) == 0


@pytest.mark.parametrize("shift", [-3.0, 3.0])
def test_larger_offsets_within_the_search_window_are_still_numbered_right(shift: float) -> None:
    sim = _simulate((SampleGas(("HCl",), 0.05),), calibration_shift_cm1=shift, seed=6)
    analysis = analyse(sim.spectrum, ProcessSettings())
    assert ("H35Cl", 1, 0) in _bands(analysis)
    assert _numbering_errors(sim, analysis) == 0


def test_co2_like_interferent_lines_are_left_unassigned_with_a_cause() -> None:
    # CO band beside a strong CO2-like band (an unpurged 2 m beam path).
    co2 = Interferent("co2", 4.0e-4, 200.0)
    sim = _simulate((SampleGas(("CO",), 0.05),), interferents=(co2,), first=2000.0, last=2400.0, seed=7)
    analysis = analyse(sim.spectrum, ProcessSettings())
    bands = _bands(analysis)
    assert ("12C16O", 1, 0) in bands
    assert set(k[0] for k in bands) <= {"12C16O", "13C16O"}
    in_co2 = (analysis.lines.position_cm1 > 2300) & (analysis.lines.position_cm1 < 2380)
    assert in_co2.sum() >= 10  # the interferent is really there
    causes = [analysis.assignment.likely_cause[i] for i in np.flatnonzero(in_co2)]
    assert all(c is not None and "interferent" in c for c in causes)
    truth = _truth(sim)[("12C16O", 1, 0)]
    assert abs(bands[("12C16O", 1, 0)].origin.value - truth.origin_cm1) < 0.01


def test_boxcar_ringing_is_not_assigned() -> None:
    # Unapodized (boxcar) spectrum with strong lines: sidelobes of -21.7% and +12.8% (calc)
    # stand beside every strong line; none may be taken for a line of the band.
    sim = _simulate((SampleGas(("HCl",), 0.1),), apodization="boxcar", seed=8)
    analysis = analyse(sim.spectrum, ProcessSettings())
    assert analysis.lines.ringing.sum() >= 10
    # a flagged feature may still be claimed by a refined prediction (a weak real line inside a
    # strong one's lobe envelope); then it must be that real line, not a lobe
    true_positions = sim.truth.lines.position_cm1
    for i in np.flatnonzero(analysis.lines.ringing):
        if analysis.assignment.per_line[i] is not None:
            assert np.min(np.abs(true_positions - analysis.lines.position_cm1[i])) < 0.3 * analysis.lines.typical_width_cm1
    bands = _bands(analysis)
    truth = _truth(sim)
    for key in (("H35Cl", 1, 0), ("H37Cl", 1, 0)):
        assert abs(bands[key].origin.value - truth[key].origin_cm1) < 5 * bands[key].origin.sigma + 0.005
    assert _numbering_errors(sim, analysis) == 0


def test_saturated_lines_are_flagged_and_the_band_still_fits() -> None:
    # 0.3 atm HCl over 10 cm: the strongest lines bottom out (T < 3%).
    sim = _simulate((SampleGas(("HCl",), 0.3),), seed=9)
    analysis = analyse(sim.spectrum, ProcessSettings())
    assert analysis.baseline.saturated_regions
    assert analysis.lines.saturated.sum() >= 6
    bands = _bands(analysis)
    truth = _truth(sim)
    fit = bands[("H35Cl", 1, 0)]
    assert abs(fit.origin.value - truth[("H35Cl", 1, 0)].origin_cm1) < 0.03  # ~5% of the 0.5 cm-1 resolution
    assert abs(fit.B_lower.value - truth[("H35Cl", 1, 0)].B_lower_cm1) < 2e-3
    assert _numbering_errors(sim, analysis) == 0


def _write_quirky_csv(path: Path, x: np.ndarray, absorbance: np.ndarray) -> None:
    """A text export as instruments write them: UTF-8 BOM, a free-text first line, a header,
    descending x with 4 decimals, a trailing comma on every row (DOMAIN pitfalls, seen in practice)."""
    rows = [f"{xi:.4f},{yi:.6f}," for xi, yi in zip(x[::-1], absorbance[::-1])]
    text = "Teaching lab bench 2 export\ncm-1,A,\n" + "\n".join(rows) + "\n"
    path.write_bytes(b"\xef\xbb\xbf" + text.encode())


def test_quirky_text_export_with_offset_and_saturation_is_assigned(tmp_path: Path) -> None:
    sim = _simulate((SampleGas(("HCl",), 0.2),), baseline_offset=0.5, seed=10)
    path = tmp_path / "hcl_export.csv"
    _write_quirky_csv(path, sim.spectrum.wavenumber_cm1, sim.spectrum.absorbance)
    result = process_file(path, ProcessSettings())
    assert result.status == "processed", result.error
    bands = {(b.isotopologue, b.v_upper, b.v_lower): b for b in result.bands}
    truth = _truth(sim)
    assert abs(bands[("H35Cl", 1, 0)].origin.value - truth[("H35Cl", 1, 0)].origin_cm1) < 0.03
    assert abs(bands[("H37Cl", 1, 0)].origin.value - truth[("H37Cl", 1, 0)].origin_cm1) < 0.03
    # the 0.5 absorbance offset is seen as baseline (common practice: an empty-cell offset)
    assert result.baseline.offset_median == pytest.approx(0.5, abs=0.02)


def test_wrong_species_setting_still_gets_numbered_lines() -> None:
    # The operator says HBr; the cell holds HCl. The P/R pattern route numbers the band and
    # the library recognises it from its origin and B''.
    sim = _simulate((SampleGas(("HCl",), 0.05),), seed=11)
    analysis = analyse(sim.spectrum, ProcessSettings(species=("HBr",)))
    bands = _bands(analysis)
    assert ("H35Cl", 1, 0) in bands
    assert _numbering_errors(sim, analysis) == 0
    assert any("pattern" in note for note in analysis.assignment.notes)


def test_species_missing_from_the_library_is_numbered_by_its_pattern(tmp_path: Path) -> None:
    # A fictional closed-shell diatomic (invented constants), added through a user library file
    # for the simulator only; the analysis uses the shipped library, which lacks it.
    user = tmp_path / "extra.toml"
    user.write_text(
        """
[nuclides.14N]
element = "N"
mass_number = 14
mass_u = 14.00307400443
abundance = 0.99636
source = "AME2020 mass, IUPAC abundance (recalled from memory)"

[molecules.NX]
band_strength_cm_per_molecule = 5e-18
overtone_ratio = 0.01
broadening_hwhm_cm1_per_atm = 0.1

[isotopologues.14N16O]
molecule = "NX"
nuclides = ["14N", "16O"]
[isotopologues.14N16O.constants]
omega_e = { value = 1750.0, source = "invented for a test" }
omega_e_x_e = { value = 12.0, source = "invented for a test" }
B_e = { value = 1.55, source = "invented for a test" }
alpha_e = { value = 0.016, source = "invented for a test" }
D_e = { value = 5.0e-6, source = "invented for a test" }
"""
    )
    library = load_library(user)
    sim = _simulate((SampleGas(("14N16O",), 0.05),), library=library, first=1580.0, last=1800.0, seed=12)
    analysis = analyse(sim.spectrum, ProcessSettings())
    assert len(analysis.assignment.bands) == 1
    fit = analysis.assignment.bands[0]
    assert fit.isotopologue.startswith("unidentified")
    truth = sim.truth.bands[0]
    assert abs(fit.origin.value - truth.origin_cm1) < 0.01
    assert abs(fit.B_lower.value - truth.B_lower_cm1) < 1e-3
    # every line numbered like the truth (compare by position)
    lines = sim.truth.lines
    for i, assigned in enumerate(analysis.assignment.per_line):
        if assigned:
            k = int(np.argmin(np.abs(lines.position_cm1 - analysis.lines.position_cm1[i])))
            assert (lines.branch[k], int(lines.J_lower[k])) == (assigned.branch, assigned.J_lower)


def test_overtone_at_long_path_is_found_as_a_2_0_band() -> None:
    sim = _simulate((SampleGas(("HCl",), 0.2, bands=((2, 0),)),), path_cm=1000.0, seed=13)
    analysis = analyse(sim.spectrum, ProcessSettings())
    bands = _bands(analysis)
    truth = _truth(sim)
    fit = bands[("H35Cl", 2, 0)]
    assert abs(fit.origin.value - truth[("H35Cl", 2, 0)].origin_cm1) < 5 * fit.origin.sigma + 0.002


def test_dcl_cell_partly_exchanged_to_hcl_shows_both() -> None:
    sim = _simulate((SampleGas(("DCl",), 0.05), SampleGas(("HCl",), 0.01)), first=1850.0, last=3100.0, seed=14)
    analysis = analyse(sim.spectrum, ProcessSettings(species=("DCl",)))
    found = set(_bands(analysis))
    assert {("D35Cl", 1, 0), ("D37Cl", 1, 0), ("H35Cl", 1, 0)} <= found
    assert _numbering_errors(sim, analysis) == 0


def test_noise_only_run_assigns_nothing() -> None:
    sim = _simulate((SampleGas(("HCl",), 0.0),), first=2600.0, last=3100.0, seed=15)
    analysis = analyse(sim.spectrum, ProcessSettings())
    assert analysis.assignment.bands == ()
    assert analysis.assignment.assigned_count == 0


@pytest.mark.parametrize("resolution", [2.0])
def test_merged_chlorine_doublets_at_low_resolution_are_measured_as_doublets(resolution: float) -> None:
    # At 2 cm-1 the H35Cl/H37Cl pairs (~2 cm-1 apart, DOMAIN: merged at 2-4 cm-1) show as one
    # peak each; the band origin must still come out for H35Cl, not pulled toward H37Cl by
    # ~0.5 cm-1 (0.24 x 2 cm-1, calc). Tolerance: 5 sigma and 1% of the resolution.
    sim = _simulate((SampleGas(("HCl",), 0.05),), resolution=resolution, seed=16)
    analysis = analyse(sim.spectrum, ProcessSettings())
    fit = _bands(analysis)[("H35Cl", 1, 0)]
    truth = _truth(sim)[("H35Cl", 1, 0)]
    assert abs(fit.origin.value - truth.origin_cm1) < min(5 * fit.origin.sigma + 0.002, 0.01 * resolution)
    assert any("unresolved" in note for note in analysis.assignment.notes)


def test_operator_can_shift_a_branch_numbering_and_exclude_a_line() -> None:
    # Redo settings from the interface: shift the H35Cl R branch's J'' by +1 and leave out one
    # line. Shifting one branch by one J breaks the band model: the rms must grow by orders of
    # magnitude and the note must say what was asked (J/m bookkeeping in levels.py).
    sim = _simulate((SampleGas(("HCl",), 0.05),), seed=17)
    plain = analyse(sim.spectrum, ProcessSettings())
    good = _bands(plain)[("H35Cl", 1, 0)]
    r3 = next(i for i, a in enumerate(plain.assignment.per_line) if a and a.isotopologue == "H35Cl" and a.branch == "R" and a.J_lower == 3)
    position = float(plain.lines.position_cm1[r3])
    shifted = analyse(sim.spectrum, ProcessSettings(j_offsets=(("H35Cl", 1, 0, "R", 1),)))
    assert shifted.assignment.per_line[r3].J_lower == 4
    assert _bands(shifted)[("H35Cl", 1, 0)].rms > 20 * good.rms
    assert any("shifted by +1" in note for note in shifted.assignment.notes)
    excluded = analyse(sim.spectrum, ProcessSettings(excluded_positions_cm1=(position,)))
    assert excluded.assignment.per_line[r3] is None
    assert excluded.assignment.likely_cause[r3] == "excluded by the operator"  # not "noise"
    assert _bands(excluded)[("H35Cl", 1, 0)].n_lines == good.n_lines - 1
