"""Assignment on spectra that behave as real ones do: boxcar ringing at high resolution,
sidelobes beside black lines, hot cells, window fringes, inverted axes, another absorber's line
on a predicted position, thick doublets, unresolvable bands, and very large files. Each case is
simulated with bandwatch's simulator and judged against its stated truth; the bounds are the
acceptance figures of the work that added these (fractions of the resolution, sigma counts)."""
from __future__ import annotations

from dataclasses import replace

import numpy as np
import pytest

from processing.instrument import Fringes, Instrument
from processing.levels import band_lines
from processing.line_shape import LineShapeModel, lobe_positions
from processing.pipeline import ProcessSettings, analyse
from processing.simulate import Cell, SampleGas, SimulationSettings, simulate
from processing.species import load_library
from processing.spectrum import Spectrum


def _run(gases, first, last, resolution=0.5, apodization="happ-genzel", temperature=296.0, path=10.0, total=None, seed=1, snr=2000.0):
    settings = SimulationSettings(tuple(gases), Cell(path, temperature_K=temperature, total_pressure_atm=total),
                                  Instrument(resolution_cm1=resolution, apodization=apodization, first_cm1=first,
                                             last_cm1=last, snr=snr, seed=seed))
    sim = simulate(settings)
    return sim, analyse(sim.spectrum, ProcessSettings())


def _truth(sim):
    return {(b.isotopologue, b.v_upper, b.v_lower): b for b in sim.truth.bands}


def _bands(analysis):
    return {(f.isotopologue, f.v_upper, f.v_lower): f for f in analysis.assignment.bands}


def _true_position(sim, assigned) -> float:
    lines = sim.truth.lines
    for j in range(lines.count):
        if (lines.source[j], int(lines.v_upper[j]), int(lines.v_lower[j]), lines.branch[j], int(lines.J_lower[j])) == (
                assigned.isotopologue, assigned.v_upper, assigned.v_lower, assigned.branch, assigned.J_lower):
            return float(lines.position_cm1[j])
    return float("nan")


def _lines_above(sim, sigmas: float) -> dict[tuple[str, int, int, str], int]:
    """Highest J'' per (isotopologue, band, branch) whose true line tops the noise-free
    spectrum above `sigmas` x the per-point noise."""
    settings = sim.truth.settings
    clean = simulate(replace(settings, instrument=replace(settings.instrument, snr=None))).spectrum
    x, absorbance = clean.wavenumber_cm1, clean.absorbance
    noise = sim.truth.noise_sigma_absorbance_at_baseline()
    lines = sim.truth.lines
    index = np.clip(np.searchsorted(x, lines.position_cm1), 0, x.size - 1)
    top: dict[tuple[str, int, int, str], int] = {}
    for j in range(lines.count):
        if lines.v_upper[j] < 0 or not (x[0] < lines.position_cm1[j] < x[-1]) or absorbance[index[j]] <= sigmas * noise:
            continue
        key = (lines.source[j], int(lines.v_upper[j]), int(lines.v_lower[j]), lines.branch[j])
        top[key] = max(top.get(key, -1), int(lines.J_lower[j]))
    return top


# ------------------------------------------------------------------ the line shape itself
def test_line_shape_lobes() -> None:
    # boxcar ILS = 2L sinc(2 pi L d): first lobes -21.72% and +12.83% of the peak (calc, the
    # extrema of sin(u)/u); Happ-Genzel's first lobe ~ -0.6% (calc)
    boxcar = LineShapeModel("boxcar", 2.0, "")
    lobes = boxcar.relative(lobe_positions(boxcar, 2))
    assert lobes == pytest.approx([-0.2172, 0.1283], abs=5e-4)  # the ILS is tabulated in steps of 1/(32 L)
    assert abs(LineShapeModel("happ-genzel", 2.0, "").relative(lobe_positions(LineShapeModel("happ-genzel", 2.0, ""), 1))[0]) < 0.01
    # FWHM x L: boxcar 0.603, Happ-Genzel 0.908 (calc, common practice)
    assert boxcar.fwhm_cm1 * 2.0 == pytest.approx(0.6034, abs=1e-3)
    assert LineShapeModel("happ-genzel", 1.0, "").fwhm_cm1 == pytest.approx(0.9076, abs=1e-3)


# ------------------------------------------------------------------ ringing and sidelobes
def test_hbr_with_boxcar_ringing_keeps_its_isotopologues_apart() -> None:
    sim, analysis = _run([SampleGas("HBr", 0.02)], 2350.0, 2750.0, resolution=0.125, apodization="boxcar")
    truth, bands = _truth(sim), _bands(analysis)
    for key in (("H79Br", 1, 0), ("H81Br", 1, 0)):
        assert key in bands
        assert abs(bands[key].origin.value - truth[key].origin_cm1) <= 0.04 * 0.125
    # no swapped label: every assigned line sits on the true line it is named for
    width = analysis.lines.typical_width_cm1
    for i, assigned in enumerate(analysis.assignment.per_line):
        if assigned is not None:
            assert abs(analysis.lines.position_cm1[i] - _true_position(sim, assigned)) < 0.3 * width
    assert analysis.verdict != "fail"
    interferents = next(c for c in analysis.checks if c.name == "interferents")
    assert "purge" not in interferents.detail and interferents.status == "pass"


def test_sidelobes_of_black_lines_are_not_taken_for_them() -> None:
    sim, analysis = _run([SampleGas("HCl", 0.01)], 2600.0, 3150.0, resolution=0.02, apodization="boxcar")
    width = analysis.lines.typical_width_cm1
    assigned = [(i, a) for i, a in enumerate(analysis.assignment.per_line) if a is not None]
    assert len(assigned) >= 40
    for i, a in assigned:
        assert abs(analysis.lines.position_cm1[i] - _true_position(sim, a)) <= 0.3 * width, a
    fit = _bands(analysis)[("H35Cl", 1, 0)]
    assert abs(fit.origin.value - _truth(sim)[("H35Cl", 1, 0)].origin_cm1) / fit.origin.sigma < 3


def test_weak_isotopologue_beside_strong_lines_at_high_resolution() -> None:
    # CO at 0.02 cm-1, boxcar, natural 13C: 13C16O lines sit among 12C16O's lobes
    sim, analysis = _run([SampleGas("CO", 0.02)], 2000.0, 2300.0, resolution=0.02, apodization="boxcar")
    bands = _bands(analysis)
    assert ("13C16O", 1, 0) in bands and ("12C16O", 1, 0) in bands
    assert not any(label.startswith("unidentified") for label in analysis.assignment.species_found)
    truth = _truth(sim)
    for key in (("12C16O", 1, 0), ("13C16O", 1, 0)):
        assert abs(bands[key].origin.value - truth[key].origin_cm1) / bands[key].origin.sigma < 3


# ------------------------------------------------------------------ temperature
@pytest.mark.parametrize("molecule, first, last, resolution, pressure, total", [
    ("HCl", 2400.0, 3250.0, 0.5, 0.05, 0.1),
    ("CO", 1900.0, 2350.0, 0.25, 0.2, 0.3),
])
def test_hot_cell_hot_band_and_high_J(molecule, first, last, resolution, pressure, total) -> None:
    sim, analysis = _run([SampleGas(molecule, pressure, ((1, 0), (2, 1)))], first, last, resolution=resolution,
                         temperature=700.0, path=50.0, total=total)
    main = max(load_library().molecule(molecule), key=lambda iso: iso.abundance).label
    bands, truth = _bands(analysis), _truth(sim)
    hot = bands[(main, 2, 1)]
    assert abs(hot.origin.value - truth[(main, 2, 1)].origin_cm1) <= 0.04 * resolution
    top = _lines_above(sim, 10.0)
    for branch in ("P", "R"):
        assigned = max(a.J_lower for a in analysis.assignment.per_line if a and (a.isotopologue, a.v_upper, a.v_lower, a.branch) == (main, 1, 0, branch))
        assert assigned >= top[(main, 1, 0, branch)], (branch, assigned, top[(main, 1, 0, branch)])


# ------------------------------------------------------------------ fringes and axes
def test_fringes_are_not_numbered_as_bands() -> None:
    settings = SimulationSettings((SampleGas("HCl", 0.01),), Cell(10.0),
                                  Instrument(first_cm1=2600.0, last_cm1=3150.0, snr=2000.0, seed=1,
                                             fringes=Fringes(0.10, 1.5), baseline_tilt=0.05))
    sim = simulate(settings)
    analysis = analyse(sim.spectrum)
    assert ("H35Cl", 1, 0) in _bands(analysis)
    assert not any(label.startswith("unidentified") for label in analysis.assignment.species_found)
    baseline = next(c for c in analysis.checks if c.name == "baseline")
    assert baseline.status != "pass" and "fringes" in baseline.detail and "1.50 cm-1" in baseline.detail
    assert analysis.baseline.fringes.period_cm1 == pytest.approx(1.5, rel=1e-3)


@pytest.mark.parametrize("how, words", [
    ("transmittance as absorbance", "transmittance written as absorbance"),
    ("negated absorbance", "inverted"),
])
def test_inverted_or_mislabelled_axis_fails_and_says_so(how, words) -> None:
    settings = SimulationSettings((SampleGas("HCl", 0.01),), Cell(10.0), Instrument(first_cm1=2600.0, last_cm1=3150.0, snr=2000.0, seed=2))
    sim = simulate(settings)
    x = sim.spectrum.wavenumber_cm1
    y = sim.transmittance if how == "transmittance as absorbance" else -sim.spectrum.absorbance
    analysis = analyse(Spectrum.from_y(x, y, "absorbance", sim.spectrum.meta))
    assert analysis.verdict == "fail"
    axis = next(c for c in analysis.checks if c.name == "y_axis")
    assert axis.status == "fail" and words in axis.detail
    assert not any("purge" in c.detail for c in analysis.checks)


# ------------------------------------------------------------------ intensity consistency
def test_another_absorbers_line_on_a_predicted_position_is_refused() -> None:
    sim, _ = _run([SampleGas("HCl", 0.01)], 2600.0, 3150.0)
    iso = load_library().isotopologue("H35Cl")
    lines = band_lines(iso.dunham, 1, 0, 20)
    r14 = float(lines.wavenumber_cm1[(lines.branch == "R") & (lines.J_lower == 14)][0])
    x = sim.spectrum.wavenumber_cm1
    # a strong line (0.05 A, ~40x what R(14) has at 296 K) right on R(14)
    absorbance = sim.spectrum.absorbance + 0.05 * np.exp(-4.0 * np.log(2.0) * ((x - r14) / 0.45) ** 2)
    analysis = analyse(Spectrum.from_y(x, absorbance, "absorbance", sim.spectrum.meta))
    i = int(np.argmin(np.abs(analysis.lines.position_cm1 - r14)))
    assigned = analysis.assignment.per_line[i]
    assert assigned is None or not assigned.used_in_fit
    if assigned is None:
        assert "intensity pattern" in analysis.assignment.likely_cause[i]
    fit = _bands(analysis)[("H35Cl", 1, 0)]
    assert abs(fit.origin.value - _truth(sim)[("H35Cl", 1, 0)].origin_cm1) < 3 * fit.origin.sigma + 0.002


# ------------------------------------------------------------------ thick doublets
def test_thick_chlorine_doublets_keep_their_separation() -> None:
    sim, analysis = _run([SampleGas("HCl", 0.3)], 2600.0, 3150.0, total=0.3)
    assert analysis.data.absorbance.max() > 1.5
    truth, bands = _truth(sim), _bands(analysis)
    measured = bands[("H35Cl", 1, 0)].origin.value - bands[("H37Cl", 1, 0)].origin.value
    true = truth[("H35Cl", 1, 0)].origin_cm1 - truth[("H37Cl", 1, 0)].origin_cm1
    assert measured == pytest.approx(true, abs=0.03)


# ------------------------------------------------------------------ resolution
def test_unresolvable_band_is_named_with_its_spacing_and_B_from_its_contour() -> None:
    sim, analysis = _run([SampleGas("CO", 0.1)], 1950.0, 2350.0, resolution=4.0)
    assert analysis.verdict == "fail"
    resolution = next(c for c in analysis.checks if c.name == "resolution")
    assert resolution.status == "fail"
    assert "3.85 cm-1 apart" in resolution.detail and "4 cm-1 stated" in resolution.detail
    (contour,) = analysis.contours
    true_B = _truth(sim)[("12C16O", 1, 0)].B_lower_cm1
    assert contour.B_lower.value == pytest.approx(true_B, rel=0.05)
    assert abs(contour.B_lower.value - true_B) < 2 * contour.B_lower.sigma


def test_resolved_bands_pass_the_resolution_check() -> None:
    _, analysis = _run([SampleGas("CO", 0.05)], 2000.0, 2300.0, resolution=1.0)
    assert next(c for c in analysis.checks if c.name == "resolution").status == "pass"


# ------------------------------------------------------------------ size
@pytest.mark.slow
def test_the_same_gas_at_every_size_gives_the_same_bands() -> None:
    found = {}
    for points in (1 << 14, 1 << 16, 1 << 20, 1 << 22):
        resolution = 4.0 * (3100.0 - 1850.0) / points
        _, analysis = _run([SampleGas("HCl", 0.01), SampleGas("DCl", 0.01)], 1850.0, 3100.0, resolution=resolution, seed=4)
        found[points] = _bands(analysis)
    keys = {frozenset(bands) for bands in found.values()}
    assert len(keys) == 1 and len(next(iter(keys))) == 4
    sizes = sorted(found)
    for key in found[sizes[0]]:
        for a in sizes:
            for b in sizes:
                if a < b:
                    fa, fb = found[a][key].origin, found[b][key].origin
                    assert abs(fa.value - fb.value) <= 2.0 * np.hypot(fa.sigma, fb.sigma), (key, a, b)


@pytest.mark.parametrize("resolution", [2.0, 4.0])
def test_hcl_at_a_coarse_resolution_gives_the_library_origin_beside_its_37cl_partners(resolution: float) -> None:
    # HCl in a 10 cm cell at 2-4 cm-1: every H35Cl line carries its H37Cl partner under one
    # profile, and the lines' cores are saturated far below the resolution, so the partner
    # looks ~0.57 as tall, not the abundance ratio 0.32 (IUPAC 0.2424/0.7576 = 0.320, recalled):
    # a centre corrected with 0.32 was off by ~0.2 cm-1, a false calibration warning
    origins, sigmas = [], []
    for seed in (100, 101, 102, 103):
        sim = simulate(SimulationSettings((SampleGas(("HCl",), 0.05),), Cell(10.0),
                                          Instrument(resolution_cm1=resolution, seed=seed, first_cm1=2500.0, last_cm1=3200.0)))
        analysis = analyse(sim.spectrum, ProcessSettings())
        band = next(f for f in analysis.assignment.bands if f.isotopologue == "H35Cl")
        truth = next(b for b in sim.truth.bands if b.isotopologue == "H35Cl" and (b.v_upper, b.v_lower) == (1, 0))
        origins.append(band.origin.value - truth.origin_cm1)
        sigmas.append(band.origin.sigma)
        calibration = next(c for c in analysis.checks if c.name == "calibration")
        assert calibration.status == "pass", calibration.detail
    z = np.array(origins) / np.array(sigmas)
    assert np.all(np.abs(z) < 3), (origins, sigmas)
    # no common offset: the mean of four runs within 3 standard errors of a mean of four
    assert abs(float(np.mean(origins))) < 3.0 * float(np.median(sigmas)) / 2.0, origins
