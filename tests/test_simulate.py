"""The simulator against outside numbers: scipy.constants, isotopic masses, ILS widths,
Beer-Lambert, natural abundances, handbook line positions."""
from __future__ import annotations

import json
import math
from dataclasses import replace

import numpy as np
import pytest
from scipy import constants
from scipy.signal import find_peaks

from processing.instrument import (
    APODIZATIONS,
    FineGrid,
    Instrument,
    apply_line_shape,
    ils_fwhm_times_l,
)
from processing.interferents import (
    CO2_LIKE_BAND_STRENGTH,
    Interferent,
    co2_like_lines,
    water_like_lines,
)
from processing.simulate import (
    Cell,
    LineTable,
    SampleGas,
    SimulationSettings,
    doppler_fwhm_cm1,
    optical_depth_on_grid,
    simulate,
)

# AME2020 isotopic masses, u (Wang et al., Chinese Physics C 45, 030003, 2021)
MASS_1H_U = 1.00782503223
MASS_35CL_U = 34.968852682
# Natural chlorine: 35Cl 75.76 %, 37Cl 24.24 % (IUPAC representative composition)
ABUNDANCE_RATIO_35_37 = 0.7576 / 0.2424


def _fwhm(x: np.ndarray, y: np.ndarray) -> float:
    """Full width at half maximum of a single peak, by linear interpolation of the crossings."""
    peak = int(np.argmax(y))
    half = y[peak] / 2.0
    left = peak
    while y[left] > half:
        left -= 1
    right = peak
    while y[right] > half:
        right += 1
    x_left = x[left] + (half - y[left]) * (x[left + 1] - x[left]) / (y[left + 1] - y[left])
    x_right = x[right - 1] + (half - y[right - 1]) * (x[right] - x[right - 1]) / (y[right] - y[right - 1])
    return float(x_right - x_left)


def _single_line(position: float, area: float, doppler: float, lorentz: float) -> LineTable:
    one = np.ones(1)
    return LineTable(
        source=("test",), v_upper=np.array([1]), v_lower=np.array([0]), branch=("R",),
        J_lower=np.array([0]), true_position_cm1=one * position, position_cm1=one * position,
        strength_cm_per_molecule=one * area, column_density_per_cm2=one,
        doppler_fwhm_cm1=one * doppler, lorentz_hwhm_cm1=one * lorentz,
    )


def _hcl(pressure_atm: float, resolution: float = 0.5, **instrument: object) -> SimulationSettings:
    settings = dict(resolution_cm1=resolution, first_cm1=2650.0, last_cm1=3100.0, snr=None)
    settings.update(instrument)
    return SimulationSettings(
        gases=(SampleGas("HCl", pressure_atm),),
        cell=Cell(path_length_cm=10.0, temperature_K=296.0),
        instrument=Instrument(**settings),
    )


def _peak_positions(x: np.ndarray, y: np.ndarray, height: float) -> np.ndarray:
    """Local maxima refined by a parabola through the top three points."""
    peaks, _ = find_peaks(y, height=height)
    a, b, c = y[peaks - 1], y[peaks], y[peaks + 1]
    return x[peaks] + 0.5 * (a - c) / (a - 2 * b + c) * (x[1] - x[0])


# ------------------------------------------------------------------------- line widths
def test_doppler_fwhm_of_hcl_matches_the_formula_from_scipy_constants() -> None:
    # FWHM = nu sqrt(8 k T ln2 / (m c^2)) with CODATA constants (scipy.constants) and the
    # AME2020 mass of H35Cl; about 0.0059 cm-1 at 2886 cm-1 and 296 K [calc].
    mass_kg = (MASS_1H_U + MASS_35CL_U) * constants.atomic_mass
    expected = 2886.0 * math.sqrt(8 * constants.k * 296.0 * math.log(2) / (mass_kg * constants.c**2))
    assert 0.0055 < expected < 0.0062
    assert float(doppler_fwhm_cm1(2886.0, MASS_1H_U + MASS_35CL_U, 296.0)) == pytest.approx(expected, rel=1e-9)
    # The profile actually drawn on the fine grid has that width (grid step 1/40 of the FWHM:
    # interpolated half-maximum crossings good to ~0.5 %).
    step = expected / 40.0
    first = 2886.0 - 0.1
    tau = optical_depth_on_grid(first, step, int(0.2 / step), _single_line(2886.0, 1e-3, expected, 0.0))
    x = first + np.arange(tau.size) * step
    assert _fwhm(x, tau) == pytest.approx(expected, rel=0.01)


# ------------------------------------------------------------------------- instrument line shape
def _ils_through_simulator(apodization: str, opd_cm: float = 2.0) -> tuple[np.ndarray, np.ndarray]:
    """Depth 1 - T of one very weak, very narrow line after the instrument, finely sampled."""
    instrument = Instrument(resolution_cm1=1.0 / opd_cm, apodization=apodization, zero_fill=32,
                            first_cm1=2000.0, last_cm1=2100.0, snr=None)
    spacing = instrument.spacing_cm1
    grid = FineGrid(k0=int(1900 / spacing), oversample=8, output_points=int(300 / spacing),
                    step_cm1=spacing / 8)
    # A line narrower than the grid step holding 1e-4 cm-1 of integrated optical depth.
    tau = optical_depth_on_grid(grid.first_cm1, grid.step_cm1, grid.points,
                                _single_line(2050.0, 1e-4, 2e-4, 1e-5))
    out = 1.0 - apply_line_shape(np.exp(-tau), grid, instrument)
    x = (grid.k0 + np.arange(out.size)) * spacing
    keep = (x > 2030) & (x < 2070)
    return x[keep], out[keep]


@pytest.mark.parametrize(
    ("apodization", "fwhm_times_l"),
    # FWHM x max OPD of the ILS (calc; common practice)
    [("boxcar", 0.603), ("triangular", 0.886), ("happ-genzel", 0.908)],
)
def test_ils_fwhm_matches_the_known_value_for_each_apodization(apodization: str, fwhm_times_l: float) -> None:
    opd = 2.0
    x, depth = _ils_through_simulator(apodization, opd)
    # 2 %: the stated factors are rounded to 3 digits; the sampling is 1/64 of 1/L.
    assert _fwhm(x, depth) == pytest.approx(fwhm_times_l / opd, rel=0.02)
    assert ils_fwhm_times_l(apodization) == pytest.approx(fwhm_times_l, rel=0.02)


def test_boxcar_first_sidelobe_is_minus_21_7_percent() -> None:
    # sinc first minimum -0.2172 of the peak (calc, common practice)
    x, depth = _ils_through_simulator("boxcar")
    assert depth.min() / depth.max() == pytest.approx(-0.217, abs=0.003)


def test_norton_beer_and_blackman_harris_widths_relative_to_boxcar() -> None:
    # Norton-Beer weak/medium/strong ~1.2/1.4/1.6 x boxcar; Blackman-Harris 3-term 1.137/L (calc)
    boxcar = ils_fwhm_times_l("boxcar")
    for name, factor in [("norton-beer-weak", 1.2), ("norton-beer-medium", 1.4), ("norton-beer-strong", 1.6)]:
        assert ils_fwhm_times_l(name) / boxcar == pytest.approx(factor, rel=0.02)
    assert ils_fwhm_times_l("blackman-harris-3") == pytest.approx(1.137, rel=0.01)
    assert set(APODIZATIONS) >= {"boxcar", "triangular", "happ-genzel"}


def test_unknown_apodization_is_a_clear_error() -> None:
    with pytest.raises(ValueError, match="unknown apodization 'hann'"):
        Instrument(apodization="hann")


# ------------------------------------------------------------------------- Beer-Lambert
def test_weak_line_integrated_absorbance_equals_s_n_l() -> None:
    result = simulate(_hcl(1e-6))
    truth = result.truth.lines
    # R(3) of H35Cl near 2963.3 cm-1 (handbook position, see below); neighbours >= 2 cm-1 away.
    index = int(np.argmin(np.abs(truth.position_cm1 - 2963.29)))
    assert truth.source[index] == "H35Cl"
    # N from the ideal gas law with scipy.constants; 75.76 % of natural HCl is H35Cl (IUPAC).
    n = 1e-6 * 0.7576 * constants.atm / (constants.k * 296.0) * 1e-6
    expected = truth.strength_cm_per_molecule[index] * n * 10.0
    x = result.spectrum.wavenumber_cm1
    window = np.abs(x - truth.position_cm1[index]) < 1.0  # H37Cl partner is 2.1 cm-1 below
    integrated = float(np.sum(np.log(10) * result.spectrum.absorbance[window]) * (x[1] - x[0]))
    # 1 %: peak optical depth << 1 so -ln T ~ 1 - T; Happ-Genzel sidelobes beyond +-1 cm-1 hold
    # < 0.5 % of the area; the library's 35Cl share equals the IUPAC 0.7576 to < 1e-4.
    assert integrated == pytest.approx(expected, rel=0.01)


# ------------------------------------------------------------------------- isotopes, saturation
def _ratio_35_37(pressure_atm: float, r_line_35: float = 2963.29) -> float:
    result = simulate(_hcl(pressure_atm))
    x, a = result.spectrum.wavenumber_cm1, result.spectrum.absorbance
    near_35 = np.abs(x - r_line_35) < 0.5
    near_37 = np.abs(x - (r_line_35 - 2.13)) < 0.5  # H37Cl lies ~2.0-2.2 cm-1 lower [calc]
    return float(a[near_35].max() / a[near_37].max())


def test_weak_resolved_pair_shows_the_natural_abundance_ratio() -> None:
    # Abundance 75.76 : 24.24 (IUPAC) -> 3.125. Tolerance 5 %: the two isotopologues' per-molecule
    # line strengths differ by ~1 % (partition function, Boltzmann factor, nu), and the Happ-Genzel
    # sampling at 0.125 cm-1 catches each peak top within ~1 %.
    assert _ratio_35_37(1e-6) == pytest.approx(ABUNDANCE_RATIO_35_37, rel=0.05)


def test_saturated_pair_ratio_falls_well_below_the_abundance_ratio() -> None:
    # At 0.2 atm in 10 cm the R(3) cores are black: apparent peak ratio far below 3.1.
    assert _ratio_35_37(0.2) < 2.0


# ------------------------------------------------------------------------- positions
def test_hcl_fundamental_peaks_sit_at_handbook_positions() -> None:
    # H35Cl 1-0 line positions predicted from Huber & Herzberg 1979 constants via NIST WebBook
    # (values recalled from memory, calc), cm-1.
    handbook = {"R(0)": 2906.248, "R(1)": 2925.898, "R(2)": 2944.917, "R(3)": 2963.291,
                "R(4)": 2981.009, "P(1)": 2865.098, "P(2)": 2843.625, "P(3)": 2821.570,
                "P(4)": 2798.946, "P(5)": 2775.766}
    result = simulate(_hcl(1e-4, resolution=0.1, zero_fill=4))
    x, a = result.spectrum.wavenumber_cm1, result.spectrum.absorbance
    peaks = _peak_positions(x, a, height=0.2 * a.max())
    spacing = x[1] - x[0]
    for name, position in handbook.items():
        nearest = peaks[np.argmin(np.abs(peaks - position))]
        # A quarter of the point spacing (0.003 cm-1) plus 0.01 cm-1 for the recalled constants.
        assert abs(nearest - position) < 0.25 * spacing + 0.01, name
    band = next(b for b in result.truth.bands if b.isotopologue == "H35Cl")
    assert band.origin_cm1 == pytest.approx(2885.98, abs=0.01)  # H&H via NIST WebBook [mem]
    # Spacing near the centre ~ 2B ~ 20.6-20.9 cm-1 (H&H B_0 ~ 10.44 cm-1 [mem]).
    r0 = peaks[np.argmin(np.abs(peaks - 2906.2))]
    p1 = peaks[np.argmin(np.abs(peaks - 2865.1))]
    assert (r0 - p1) / 2.0 == pytest.approx(20.6, abs=0.2)


def test_calibration_shift_moves_every_peak_by_the_shift() -> None:
    plain = simulate(_hcl(1e-4))
    shifted = simulate(_hcl(1e-4, calibration_shift_cm1=0.24))
    x = plain.spectrum.wavenumber_cm1
    before = _peak_positions(x, plain.spectrum.absorbance, 0.1 * plain.spectrum.absorbance.max())
    after = _peak_positions(x, shifted.spectrum.absorbance, 0.1 * plain.spectrum.absorbance.max())
    assert before.size == after.size > 20
    # 0.01 cm-1: parabolic peak interpolation on a 0.125 cm-1 grid of a Happ-Genzel ILS.
    np.testing.assert_allclose(after - before, 0.24, atol=0.01)


# ------------------------------------------------------------------------- noise, seeds
def _noise_only(snr: float, seed: int) -> np.ndarray:
    settings = SimulationSettings(
        gases=(), instrument=Instrument(first_cm1=2000.0, last_cm1=3000.0, snr=snr, seed=seed)
    )
    return simulate(settings).transmittance


def test_noise_level_matches_the_requested_snr() -> None:
    # SNR of the 100 % line: sigma(T) = 1/snr. 8000 points: the sample std is good to ~1 %;
    # 10 % is the stated requirement.
    transmittance = _noise_only(200.0, seed=7)
    assert np.std(transmittance) == pytest.approx(1 / 200.0, rel=0.10)
    assert np.mean(transmittance) == pytest.approx(1.0, abs=5 * (1 / 200.0) / math.sqrt(transmittance.size))


def test_same_seed_gives_identical_arrays_and_another_seed_does_not() -> None:
    assert np.array_equal(_noise_only(300.0, 1), _noise_only(300.0, 1))
    assert not np.array_equal(_noise_only(300.0, 1), _noise_only(300.0, 2))
    settings = _hcl(0.01, snr=500.0, seed=3)
    assert simulate(settings).transmittance.tobytes() == simulate(settings).transmittance.tobytes()


def test_baseline_offset_is_added_as_decadic_absorbance() -> None:
    settings = SimulationSettings(gases=(), instrument=Instrument(snr=None, baseline_offset=0.5))
    absorbance = simulate(settings).spectrum.absorbance
    np.testing.assert_allclose(absorbance, 0.5, atol=1e-9)


# ------------------------------------------------------------------------- grid, truth, interferents
def test_output_grid_spacing_follows_resolution_and_zero_fill() -> None:
    # spacing = 1/(2 L zero_fill), L = 1/R (module convention)
    result = simulate(replace(_hcl(0.001), instrument=Instrument(resolution_cm1=0.5, zero_fill=2,
                                                                 first_cm1=2700, last_cm1=2800, snr=None)))
    x = result.spectrum.wavenumber_cm1
    np.testing.assert_allclose(np.diff(x), 0.125, rtol=1e-9)
    assert x[0] == pytest.approx(2700.0) and x[-1] == pytest.approx(2800.0)


def test_truth_record_serialises_to_json_with_bands_and_lines() -> None:
    result = simulate(_hcl(0.01))
    data = json.loads(result.truth.to_json())
    labels = {band["isotopologue"] for band in data["bands"]}
    assert labels == {"H35Cl", "H37Cl"}
    band = next(b for b in data["bands"] if b["isotopologue"] == "H35Cl")
    # B_0 ~ 10.44 and B_1 ~ 10.14 cm-1 for H35Cl (H&H via NIST WebBook, recalled from memory)
    assert band["B_lower_cm1"] == pytest.approx(10.440, abs=0.005)
    assert band["B_upper_cm1"] == pytest.approx(10.136, abs=0.005)
    assert any(line["branch"] == "P" and line["J_lower"] == 1 for line in data["lines"])
    assert data["settings"]["instrument"]["apodization"] == "happ-genzel"


def test_co2_like_band_sums_to_its_band_strength_and_has_even_j_only() -> None:
    lines = co2_like_lines(296.0)
    assert float(np.sum(lines.strength_cm_per_molecule)) == pytest.approx(CO2_LIKE_BAND_STRENGTH, rel=1e-9)
    assert np.all(lines.J_lower % 2 == 0)
    # CO2 nu3 band region 2280-2390 cm-1 (common practice): the strong lines fall inside it
    strong = lines.position_cm1[lines.strength_cm_per_molecule > 0.01 * lines.strength_cm_per_molecule.max()]
    assert strong.min() > 2280 and strong.max() < 2390


def test_water_like_lines_are_fixed_and_in_their_regions() -> None:
    first, second = water_like_lines(), water_like_lines()
    assert np.array_equal(first.position_cm1, second.position_cm1)
    x = first.position_cm1
    assert np.all(((x >= 1300) & (x <= 2000)) | ((x >= 3450) & (x <= 4000)))


def test_poor_purge_puts_absorption_only_where_the_interferents_are() -> None:
    settings = SimulationSettings(
        gases=(),
        instrument=Instrument(first_cm1=2200.0, last_cm1=2500.0, snr=None),
        interferents=(Interferent("co2", 4e-4, 20.0),),
    )
    result = simulate(settings)
    x, a = result.spectrum.wavenumber_cm1, result.spectrum.absorbance
    assert a[(x > 2300) & (x < 2380)].max() > 0.1
    assert np.abs(a[(x < 2250) | (x > 2420)]).max() < 1e-3


# ------------------------------------------------------------------------- command line
def test_simulate_command_writes_a_readable_csv_and_truth(tmp_path, capsys) -> None:  # type: ignore[no-untyped-def]
    from processing.readers.delimited import parse
    from tui.cli import main

    output, truth = tmp_path / "co.csv", tmp_path / "co.json"
    code = main(["simulate", "--species", "CO", "--pressure-atm", "0.05", "--resolution", "1",
                 "--range", "2050:2250", "--format", "csv", "--y", "transmittance", "--seed", "4",
                 "-o", str(output), "--truth", str(truth)])
    assert code == 0
    spectrum = parse(output.read_bytes(), str(output))
    assert spectrum.first_cm1 == pytest.approx(2050.0) and spectrum.last_cm1 == pytest.approx(2250.0)
    bands = json.loads(truth.read_text())["bands"]
    # 12C16O nu0(1-0) = 2143.2711 cm-1 (Maki & Wells 1991 band fit, calc)
    main_band = next(b for b in bands if b["isotopologue"] == "12C16O")
    assert main_band["origin_cm1"] == pytest.approx(2143.271, abs=0.01)


@pytest.mark.parametrize(
    ("option", "value", "message"),
    [("--bands", "1-x", "not of the form"), ("--species", "XCl", "unknown species"),
     ("--apodization", "hann", "unknown apodization"), ("--range", "3000", "FIRST:LAST")],
)
def test_simulate_command_rejects_bad_options_with_one_clear_line(tmp_path, capsys, option, value, message) -> None:  # type: ignore[no-untyped-def]
    from tui.cli import main

    code = main(["simulate", option, value, "-o", str(tmp_path / "x.csv"), "--format", "csv"])
    assert code == 2
    error = capsys.readouterr().err
    assert message in error and error.count("\n") == 1 and "Traceback" not in error


def test_saturated_demo_run_shows_saturation_signatures() -> None:
    # Saturation signatures (common practice): peak A > ~1.5 (T < 3 %) and flat, black tops.
    # An unsaturated Happ-Genzel line at 0.5 cm-1 (FWHM 0.454 cm-1, calc) keeps its minimum
    # at one point: one 0.125 cm-1 step away its depth has fallen ~20 %. A black line has
    # T < 1 % over >= 3 consecutive points.
    from processing.sample_scenario import demo_runs

    run = next(r for r in demo_runs() if r.name == "1040_hcl_saturated")
    result = simulate(replace(run.settings, instrument=replace(run.settings.instrument, snr=None)))
    x, t = result.spectrum.wavenumber_cm1, result.transmittance
    assert t.min() < 10**-1.5
    depth = 1.0 - t
    peaks, _ = find_peaks(depth, height=0.05)
    strongest = peaks[np.argsort(depth[peaks])[-6:]]
    for peak in strongest:
        assert np.all(t[peak - 1 : peak + 2] < 0.01), x[peak]


def test_fringes_have_the_requested_period_and_amplitude() -> None:
    from processing.instrument import Fringes

    settings = SimulationSettings(gases=(), instrument=Instrument(
        first_cm1=2000.0, last_cm1=2400.0, snr=None, fringes=Fringes(0.02, 0.82)))
    transmittance = simulate(settings).transmittance
    # period 1/(2 n t): 0.82 cm-1 for a 4 mm KBr window (n ~1.53) (calc)
    spectrum = np.abs(np.fft.rfft(transmittance - transmittance.mean()))
    frequency = np.fft.rfftfreq(transmittance.size, d=0.125)
    assert 1.0 / frequency[np.argmax(spectrum)] == pytest.approx(0.82, rel=0.01)
    assert (transmittance.max() - transmittance.min()) / 2 == pytest.approx(0.02, rel=0.02)
