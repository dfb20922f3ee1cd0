"""The noise estimate: per-point sigma from the residual, its correlation, rounding grids,
traces with no measurable noise, and the simulator's instrument-like noise it is tested on."""
from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import pytest

from processing.apodization import apodization_window
from processing.baseline import estimate_baseline
from processing.instrument import Instrument, instrument_noise, noise_correlation_points
from processing.lines import gaussian_tail_sigmas
from processing.noise import clipped_sigma, derived_correlation, quantization_step
from processing.pipeline import ProcessSettings, analyse, process_file
from processing.simulate import Cell, SampleGas, SimulationSettings, simulate, write_spectrum
from processing.spectrum import FileMetadata, Spectrum

SAMPLES = Path(__file__).resolve().parents[1] / "sample_runs"


def _noise_only(instrument: Instrument, points: int = 40_000, seed: int = 7) -> np.ndarray:
    return instrument_noise(instrument, points, np.random.default_rng(seed))


# ------------------------------------------------------------------ the simulator's noise
@pytest.mark.parametrize("zero_fill", [1, 2, 4])
def test_boxcar_interferogram_noise_spans_one_point_per_zero_fill(zero_fill: int) -> None:
    # Zero filling by f interpolates f points per independent one: tau = f (calc: the sum of
    # sinc(k/f) over all k is f). Per-point sigma is 1/snr by construction.
    instrument = Instrument(apodization="boxcar", zero_fill=zero_fill, snr=1000.0)
    noise = _noise_only(instrument)
    assert noise.std() == pytest.approx(1e-3, rel=0.03)  # 40k points: sampling error ~1%
    assert noise_correlation_points(instrument) == pytest.approx(zero_fill, rel=1e-3)
    # neighbours on a zero-filled boxcar grid: rho(1) = sinc(1/f) (calc)
    rho1 = np.corrcoef(noise[:-1], noise[1:])[0, 1]
    expected = 0.0 if zero_fill == 1 else math.sin(math.pi / zero_fill) / (math.pi / zero_fill)
    assert rho1 == pytest.approx(expected, abs=0.02)


def test_happ_genzel_noise_fools_first_differences_as_real_exports_do() -> None:
    # Seen in real exports (common practice): with Happ-Genzel and zero fill 2 the
    # first-difference estimate std(diff)/sqrt(2) reads ~1/3 of the per-point sigma, ~1/6 with
    # zero fill 4. tau = zero fill / mean(w^2) (calc, mean(w^2) = 0.54^2 + 0.46^2 / 2).
    mean_w2 = 0.54**2 + 0.46**2 / 2
    for zero_fill, ratio in ((2, 1 / 3), (4, 1 / 6)):
        instrument = Instrument(apodization="happ-genzel", zero_fill=zero_fill, snr=1000.0)
        noise = _noise_only(instrument)
        assert np.std(np.diff(noise)) / math.sqrt(2) / noise.std() == pytest.approx(ratio, rel=0.1)
        assert noise_correlation_points(instrument) == pytest.approx(zero_fill / mean_w2, rel=0.01)


def test_points_noise_is_independent() -> None:
    instrument = Instrument(noise_domain="points", snr=500.0)
    noise = _noise_only(instrument)
    assert abs(np.corrcoef(noise[:-1], noise[1:])[0, 1]) < 0.02  # 40k points: ~0.005 scatter
    assert noise.std() == pytest.approx(2e-3, rel=0.03)


def test_truth_records_the_per_point_noise_and_its_correlation(tmp_path: Path) -> None:
    settings = SimulationSettings((SampleGas("HCl", 0.01),), Cell(10.0),
                                  Instrument(first_cm1=2600, last_cm1=3150, zero_fill=4, snr=1500.0, baseline_offset=0.1))
    truth = simulate(settings).truth.to_dict(include_lines=False)
    assert truth["noise_sigma_transmittance"] == pytest.approx(1 / 1500)
    # sigma_A = sigma_T / (T ln 10) at the baseline T = 10^-0.1 (calc)
    assert truth["noise_sigma_absorbance_at_baseline"] == pytest.approx((1 / 1500) / (10**-0.1 * math.log(10)), rel=1e-5)
    assert truth["noise_domain"] == "interferogram"
    assert truth["noise_correlation_points"] == pytest.approx(4 / (0.54**2 + 0.46**2 / 2), rel=0.01)


# ------------------------------------------------------------------ pieces of the estimate
def test_rounding_grids_are_found_and_full_precision_is_not() -> None:
    rng = np.random.default_rng(1)
    values = rng.normal(0.02, 0.001, 5000)
    assert quantization_step(np.round(values, 4)) == pytest.approx(1e-4)
    assert quantization_step(np.round(100 * 10**-values, 2)) == pytest.approx(0.01)  # %T, 2 decimals
    assert quantization_step(np.rint(values / 3.7e-6) * 3.7e-6) == pytest.approx(3.7e-6, rel=1e-6)  # counts x YFACTOR
    assert quantization_step(values) is None


def test_clipped_sigma_on_rounded_data_includes_the_rounding_variance() -> None:
    # Sheppard: rounding to a step adds step^2 / 12 to the variance (common practice).
    rng = np.random.default_rng(2)
    sigma, step = 2e-4, 1e-4
    values = np.round(rng.normal(0.0, sigma, 50_000) / step) * step
    expected = math.sqrt(sigma**2 + step**2 / 12)
    assert clipped_sigma(values) == pytest.approx(expected, rel=0.03)
    # started from an earlier estimate above it, the iteration settles on the same value
    assert clipped_sigma(values, 2 * expected) == pytest.approx(expected, rel=0.03)


def test_derived_correlation_of_a_zero_filled_boxcar() -> None:
    # boxcar, zero fill 2: rho(1) = sinc(1/2) = 2/pi, rho(2) = 0, tau = 2 (calc)
    derived = derived_correlation("BOXCAR", 0.5, 0.125)
    assert derived is not None
    assert derived.rho[1] == pytest.approx(2 / math.pi, abs=1e-3)
    assert derived.rho[2] == pytest.approx(0.0, abs=1e-3)
    assert derived.tau == pytest.approx(2.0, rel=1e-3)
    assert derived_correlation("some vendor window", 0.5, 0.125) is None


def test_gaussian_tail() -> None:
    # P(z > 5) = 2.867e-7 and P(z > 3) = 1.350e-3 for a unit Gaussian (standard normal tables)
    assert gaussian_tail_sigmas(2.867e-7) == pytest.approx(5.0, abs=1e-3)
    assert gaussian_tail_sigmas(1.350e-3) == pytest.approx(3.0, abs=1e-3)


def test_window_values() -> None:
    # Happ-Genzel 0.54 + 0.46 cos(pi u): 1 at zero path difference, 0.08 at L (common practice)
    assert apodization_window("happ-genzel", np.array([0.0, 1.0])) == pytest.approx([1.0, 0.08])


# ------------------------------------------------------------------ the estimate on spectra
def _empty_cell(zero_fill: int, apodization: str = "happ-genzel", stated: bool = True, **changes: object) -> Spectrum:
    instrument = Instrument(resolution_cm1=0.5, apodization=apodization, zero_fill=zero_fill, first_cm1=2000.0,
                            last_cm1=4000.0, snr=2000.0, seed=11, **changes)
    spectrum = simulate(SimulationSettings((), Cell(10.0), instrument)).spectrum
    if not stated:
        spectrum = spectrum.with_meta(FileMetadata(title="no instrument details"))
    return spectrum


@pytest.mark.parametrize("zero_fill", [2, 4])
@pytest.mark.parametrize("stated", [True, False])
def test_noise_and_its_correlation_from_an_empty_cell(zero_fill: int, stated: bool) -> None:
    spectrum = _empty_cell(zero_fill, stated=stated)
    noise = estimate_baseline(spectrum).noise
    true_sigma = (1 / 2000) / math.log(10)
    assert noise.measurable
    assert noise.sigma == pytest.approx(true_sigma, rel=0.05)  # 8000 points / tau: ~2% scatter
    true_tau = zero_fill / (0.54**2 + 0.46**2 / 2)  # calc, as above
    # measured from the residual alone: within 25% (the baseline takes some low-frequency noise)
    assert noise.correlation_points == pytest.approx(true_tau, rel=0.01 if stated else 0.25)


def test_a_rounded_export_keeps_its_noise_and_names_the_grid(tmp_path: Path) -> None:
    settings = SimulationSettings((SampleGas("HCl", 0.01),), Cell(10.0),
                                  Instrument(first_cm1=2600, last_cm1=3150, zero_fill=2, snr=3000.0, seed=5))
    result = simulate(settings)
    path = tmp_path / "export.csv"
    write_spectrum(str(path), result, "csv", "absorbance", decimals=4)
    processed = process_file(path)
    baseline = processed.baseline
    truth = result.truth.noise_sigma_absorbance_at_baseline()
    rounding = 1e-4 / math.sqrt(12)
    assert baseline.quantization_step == pytest.approx(1e-4)
    # the noise plus the rounding's own step/sqrt(12), within 25% (the bound)
    assert baseline.noise_sigma == pytest.approx(math.hypot(truth, rounding), rel=0.25)
    assert baseline.noise_correlation_points > 2  # Happ-Genzel, zero fill 2: ~5
    snr = next(c.to_dict() for c in processed.checks if c.name == "signal_to_noise")
    assert snr["status"] == "pass" and 100 < snr["value"] < 1000  # strongest line ~0.13 A


def test_a_digitised_trace_has_no_measurable_noise() -> None:
    result = process_file(SAMPLES / "1700_hcl_archive_trace.csv")
    baseline = result.baseline
    assert baseline.noise_measurable is False
    assert baseline.quantization_step == pytest.approx(1e-3)
    # the rounding floor, never a near-zero sigma
    assert baseline.noise_sigma == pytest.approx(1e-3 / math.sqrt(12), rel=1e-6)
    snr = next(c.to_dict() for c in result.checks if c.name == "signal_to_noise")
    assert snr["status"] == "not_assessed" and snr["value"] is None
    assert "no measurable noise" in snr["detail"]


def test_a_smoothed_trace_is_not_noise() -> None:
    # A noisy spectrum smoothed over ~60 points: what is left varies slowly from point to
    # point, which no FTIR noise does.
    spectrum = _empty_cell(2, noise_domain="points", stated=False)
    kernel = np.hanning(61) / np.hanning(61).sum()
    smooth = np.convolve(spectrum.absorbance, kernel, mode="same")
    smoothed = Spectrum.from_y(spectrum.wavenumber_cm1, smooth, "absorbance", spectrum.meta)
    noise = estimate_baseline(smoothed).noise
    assert not noise.measurable and "smooth" in noise.description


# ------------------------------------------------------------------ line profiles
def test_lines_on_a_coarse_grid_get_the_conservative_sigma_and_a_flag() -> None:
    # Happ-Genzel without zero filling: the line FWHM spans ~1.8 points, so unless a line sits
    # between two grid points its top holds fewer than 4 points for a 3-parameter fit (calc).
    settings = SimulationSettings((SampleGas("HCl", 0.01),), Cell(10.0),
                                  Instrument(first_cm1=2600, last_cm1=3150, zero_fill=1, snr=1000.0, seed=2))
    analysis = analyse(simulate(settings).spectrum, ProcessSettings(species=("HCl",)))
    lines = analysis.lines
    assert 0.3 < lines.few_points.mean() < 0.9
    noise = analysis.baseline.noise
    spacing = 0.25
    flagged = np.flatnonzero(lines.few_points & ~lines.saturated)
    snr = np.maximum(lines.height[flagged] / (noise.sigma * 10 ** np.clip(0.5 * lines.height[flagged], 0, 3)), 1.0)
    independent = np.maximum(1.0, lines.width_cm1[flagged] / spacing / noise.correlation_points)
    expected = lines.width_cm1[flagged] / (snr * np.sqrt(independent))
    assert np.allclose(np.maximum(expected, 0.01 * spacing), lines.position_sigma_cm1[flagged], rtol=1e-9)


def test_line_flags_grow_with_their_own_width() -> None:
    from processing.baseline import grow_flags

    def plain(flagged: np.ndarray) -> np.ndarray:
        grown = np.zeros_like(flagged)
        i = 0
        while i < flagged.size:
            if not flagged[i]:
                i += 1
                continue
            j = i
            while j < flagged.size and flagged[j]:
                j += 1
            reach = max(3, int(np.rint(0.75 * (j - i))))
            grown[max(0, i - reach) : j + reach] = True
            i = j
        return grown

    rng = np.random.default_rng(4)
    for _ in range(300):
        flagged = rng.random(int(rng.integers(1, 300))) < rng.random() * 0.4
        assert np.array_equal(grow_flags(flagged), plain(flagged))
