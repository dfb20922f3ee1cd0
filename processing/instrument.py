"""The instrument part of the simulator: apodization, instrument line shape and output grid.

Conventions (used everywhere in bandwatch's simulator):
- The stated resolution is R = 1/L, with L the maximum optical path difference (OPD) in cm.
  It is NOT the FWHM of the instrument line shape (ILS); the FWHM depends on the apodization:
      boxcar 0.603/L, triangular 0.886/L, Happ-Genzel 0.908/L, Blackman-Harris 3-term 1.137/L,
      Norton-Beer weak / medium / strong ~1.2 / 1.4 / 1.6 x boxcar           (calc; common practice)
  (`ILS_FWHM_TIMES_L` holds the values computed from the windows below.)
- The ILS is applied to TRANSMITTANCE: the interferogram (Fourier transform of the fine-grid
  transmittance) is multiplied by the apodization window over |x| <= L and is zero beyond.
  This is an exact convolution with the ILS, so lines much narrower than R keep their
  integrated transmittance loss but not their depth: strong lines saturate in apparent
  absorbance, as on a real instrument.
- Output points lie on the instrument's grid nu_k = k * spacing, spacing = 1/(2 L zero_fill)
  (native spacing 1/(2L); zero filling by 2 halves it).
"""
from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
import scipy.fft

from processing.apodization import APODIZATIONS, apodization_window

NOISE_DOMAINS: tuple[str, ...] = ("interferogram", "points")


def instrument_line_shape(name: str, opd_max_cm: float, offset_cm1: np.ndarray) -> np.ndarray:
    """ILS(nu) = 2 * integral_0^L w(x/L) cos(2 pi nu x) dx, normalised to unit area (cm).

    Computed by numerical quadrature of the window (used by tests and for documentation; the
    simulator itself applies the window in the interferogram domain).
    """
    offsets = np.asarray(offset_cm1, dtype=np.float64)
    x = np.linspace(0.0, opd_max_cm, 4001)
    weights = apodization_window(name, x / opd_max_cm)
    # Trapezoid weights over x.
    dx = x[1] - x[0]
    trap = np.full(x.size, dx)
    trap[0] = trap[-1] = dx / 2.0
    kernel = np.cos(2.0 * np.pi * np.outer(offsets, x)) @ (weights * trap)
    return 2.0 * kernel  # area = w(0) = 1 for every window here


def ils_fwhm_cm1(name: str, opd_max_cm: float) -> float:
    """FWHM of the ILS found numerically: the half-maximum crossing, bracketed on a coarse grid
    of offsets and then solved (Brent's method) on the quadrature itself."""
    from scipy.optimize import brentq

    def above_half(offset: float) -> float:
        return float(instrument_line_shape(name, opd_max_cm, np.array([offset]))[0]) - half

    half = float(instrument_line_shape(name, opd_max_cm, np.array([0.0]))[0]) / 2.0
    offsets = np.linspace(0.0, 1.5 / opd_max_cm, 61)
    below = int(np.flatnonzero(instrument_line_shape(name, opd_max_cm, offsets) < half)[0])
    return 2.0 * float(brentq(above_half, offsets[below - 1], offsets[below], xtol=1e-12 / opd_max_cm))


# FWHM x L of each ILS, computed once from the windows above (calc).
ILS_FWHM_TIMES_L: dict[str, float] = {}


def ils_fwhm_times_l(name: str) -> float:
    """FWHM * L for an apodization (cached; e.g. boxcar ~0.603)."""
    if name not in ILS_FWHM_TIMES_L:
        ILS_FWHM_TIMES_L[name] = ils_fwhm_cm1(name, 1.0)
    return ILS_FWHM_TIMES_L[name]


@dataclass(frozen=True)
class Fringes:
    """Channel spectrum from a window: T *= 1 + amplitude * cos(2 pi nu / period + phase).

    period_cm1 = 1 / (2 n t) for a window of index n and thickness t in cm (e.g. KBr n~1.53,
    4 mm: ~0.82 cm-1). Applied after the ILS, so `amplitude` is what the output shows.
    """

    amplitude: float = 0.02
    period_cm1: float = 0.82
    phase_rad: float = 0.0


@dataclass(frozen=True)
class Instrument:
    """The spectrometer's settings.

    resolution_cm1: R = 1/L (L = max OPD), see module docstring.
    zero_fill: output spacing = 1/(2 L zero_fill); an integer >= 1.
    snr: signal-to-noise ratio of the 100% line: Gaussian noise of standard deviation 1/snr per
        output point (transmittance units) is added to the transmittance. None = no noise.
    noise_domain: where the noise is made. "interferogram" (default; what an FTIR does): white
        noise on the interferogram samples |x| <= L, apodized with the same window and
        zero-filled with the spectrum, so neighbouring output points are correlated exactly as
        the apodization and zero filling make them. "points": independent per output point.
    baseline_offset / baseline_tilt: a smooth decadic absorbance added to the output,
        offset + tilt * (nu - centre) / (half width of the range).
    calibration_shift_cm1 / calibration_scale: the instrument's axis error: a feature at true
        wavenumber nu appears at nu * scale + shift.
    """

    resolution_cm1: float = 0.5
    apodization: str = "happ-genzel"
    zero_fill: int = 2
    first_cm1: float = 2600.0
    last_cm1: float = 3100.0
    snr: float | None = 1000.0
    noise_domain: str = "interferogram"
    baseline_offset: float = 0.0
    baseline_tilt: float = 0.0
    fringes: Fringes | None = None
    calibration_shift_cm1: float = 0.0
    calibration_scale: float = 1.0
    seed: int = 0

    def __post_init__(self) -> None:
        if not self.resolution_cm1 > 0:
            raise ValueError(f"resolution must be positive, got {self.resolution_cm1}")
        if self.apodization not in APODIZATIONS:
            raise ValueError(
                f"unknown apodization {self.apodization!r}; choose one of {', '.join(APODIZATIONS)}"
            )
        if int(self.zero_fill) != self.zero_fill or self.zero_fill < 1:
            raise ValueError(f"zero fill must be a whole number >= 1, got {self.zero_fill}")
        if not (0 < self.first_cm1 < self.last_cm1):
            raise ValueError(f"range must satisfy 0 < first < last, got {self.first_cm1}:{self.last_cm1}")
        if self.snr is not None and not self.snr > 0:
            raise ValueError(f"SNR must be positive, got {self.snr}")
        if self.noise_domain not in NOISE_DOMAINS:
            raise ValueError(f"unknown noise domain {self.noise_domain!r}; choose one of {', '.join(NOISE_DOMAINS)}")
        if not self.calibration_scale > 0:
            raise ValueError(f"calibration scale must be positive, got {self.calibration_scale}")

    @property
    def opd_max_cm(self) -> float:
        """L = 1/R, cm."""
        return 1.0 / self.resolution_cm1

    @property
    def spacing_cm1(self) -> float:
        """Output point spacing 1/(2 L zero_fill), cm-1."""
        return self.resolution_cm1 / (2.0 * self.zero_fill)

    @property
    def ils_fwhm_cm1(self) -> float:
        return ils_fwhm_times_l(self.apodization) / self.opd_max_cm

    def output_indices(self) -> tuple[int, int]:
        """First and last k of the output grid nu_k = k * spacing inside [first, last]."""
        step = self.spacing_cm1
        return int(math.ceil(self.first_cm1 / step - 1e-9)), int(math.floor(self.last_cm1 / step + 1e-9))


def _smooth_size(n: int) -> int:
    """Smallest 2-3-5 smooth integer >= n (fast FFT length)."""
    best = 1 << max(0, (n - 1).bit_length())
    p5 = 1
    while p5 < best:
        p35 = p5
        while p35 < best:
            value = p35
            while value < n:
                value *= 2
            best = min(best, value)
            p35 *= 3
        p5 *= 5
    return best


@dataclass(frozen=True)
class FineGrid:
    """The uniform grid the transmittance is computed on before the instrument is applied.

    nu_j = (k0 * oversample + j) * step, j = 0..points-1, step = output spacing / oversample,
    so every `oversample`-th fine point is an output-grid point.
    """

    k0: int  # output-grid index of the first fine point
    oversample: int
    output_points: int  # points of the (margin-padded) output grid; fine points = this * oversample
    step_cm1: float

    @property
    def points(self) -> int:
        return self.output_points * self.oversample

    @property
    def first_cm1(self) -> float:
        return self.k0 * self.oversample * self.step_cm1

    def wavenumber_cm1(self) -> np.ndarray:
        return (self.k0 * self.oversample + np.arange(self.points)) * self.step_cm1


def plan_fine_grid(instrument: Instrument, narrowest_hwhm_cm1: float, margin_cm1: float) -> FineGrid:
    """Choose the fine grid: spacing <= narrowest line HWHM / 4 (saturated cores make
    1 - exp(-tau) steep-edged; HWHM/2 left errors ~7e-4 in T, HWHM/4 ~3e-5, by comparison
    with a 4x finer grid), an integer fraction of the output spacing, covering the range plus
    `margin_cm1` each side (so the circular convolution's wrap-around falls outside the
    range), with an FFT-friendly length.

    A uniform grid is simple and exact for the ILS step; the price is that the fine spacing is
    set by the narrowest line everywhere (a few million points for a 0.01 cm-1 Doppler width
    over 4000 cm-1, which one real FFT handles in well under a second).
    """
    spacing = instrument.spacing_cm1
    target = max(narrowest_hwhm_cm1 / 4.0, 1e-6)
    oversample = _smooth_size(max(1, math.ceil(spacing / target)))
    k_first, k_last = instrument.output_indices()
    pad = int(math.ceil(margin_cm1 / spacing))
    k0 = max(1, k_first - pad)
    output_points = _smooth_size(k_last + pad - k0 + 1)
    return FineGrid(k0=k0, oversample=oversample, output_points=output_points, step_cm1=spacing / oversample)


def apply_line_shape(
    transmittance_fine: np.ndarray, grid: FineGrid, instrument: Instrument, workers: int | None = None
) -> np.ndarray:
    """Convolve the fine-grid transmittance with the ILS and sample it on the output grid.

    Returns the transmittance at output indices k0 .. k0 + output_points - 1 (the padded
    output grid). One real FFT of the fine grid, the window applied to the bins with
    |x| <= L, then a small inverse FFT of the output length: sampling every `oversample`-th
    fine point of a signal band-limited to |x| <= L <= 1/(2 spacing) loses nothing.
    """
    n_fine = grid.points
    n_out = grid.output_points
    # Work on the absorption depth 1 - T: it is ~0 far from lines, so the periodic extension
    # has no step at the ends.
    depth = 1.0 - transmittance_fine
    spectrum = scipy.fft.rfft(depth, workers=workers)
    opd_step = 1.0 / (n_fine * grid.step_cm1)  # OPD of bin q is q * opd_step, cm
    opd_max = instrument.opd_max_cm
    bins = min(int(math.floor(opd_max / opd_step + 1e-9)) + 1, n_out // 2 + 1)
    window = apodization_window(instrument.apodization, np.arange(bins) * opd_step / opd_max)
    kept = np.zeros(n_out // 2 + 1, dtype=np.complex128)
    kept[:bins] = spectrum[:bins] * window
    last = bins - 1
    if abs(last * opd_step - opd_max) < 1e-9 * opd_max and 2 * last != n_out:
        # A bin exactly at |x| = L is the end point of the window integral: half weight
        # (trapezoid). At the Nyquist bin (zero_fill 1) irfft already counts it once, not twice.
        kept[last] *= 0.5
    depth_out = scipy.fft.irfft(kept, n=n_out, workers=workers) * (n_out / n_fine)
    return 1.0 - depth_out


def _noise_filter(instrument: Instrument, points: int) -> tuple[int, np.ndarray]:
    """FFT length and the amplitude of each kept interferogram bin for noise made on the
    output grid: bin q has path difference q / (n spacing); bins with |x| <= L carry the
    apodization window, the rest (zero filling) nothing."""
    n = _smooth_size(max(points, 2))
    opd = np.arange(n // 2 + 1) / (n * instrument.spacing_cm1)
    return n, apodization_window(instrument.apodization, opd / instrument.opd_max_cm)


def _filter_power(window: np.ndarray, n: int) -> tuple[float, float]:
    """(sum of the squared window over the Hermitian spectrum, squared window at x = 0)."""
    power = window**2
    total = power[0] + 2.0 * power[1:].sum()
    if n % 2 == 0:  # the Nyquist bin is its own mirror
        total -= power[-1]
    return float(total), float(power[0])


def noise_correlation_points(instrument: Instrument) -> float:
    """Integrated autocorrelation of the instrument's noise in output points,
    tau = sum over all lags of rho(k): how many output points one independent sample spans.
    1 for independent points; zero_fill / mean(window^2) for interferogram noise (boxcar: the
    zero-fill factor; Happ-Genzel: ~2.5 x the zero-fill factor), calc."""
    if instrument.noise_domain == "points":
        return 1.0
    n, window = _noise_filter(instrument, 1 << 16)
    total, at_zero = _filter_power(window, n)
    return n * at_zero / total


def instrument_noise(instrument: Instrument, points: int, rng: np.random.Generator) -> np.ndarray:
    """Zero-mean Gaussian noise for `points` output points with standard deviation 1/snr per
    point (in expectation), made in the instrument's noise domain (see `Instrument`)."""
    if instrument.snr is None:
        return np.zeros(points)
    sigma = 1.0 / instrument.snr
    if instrument.noise_domain == "points":
        return rng.normal(0.0, sigma, points)
    # White complex noise on every interferogram bin, shaped by the window; the circular
    # series is stationary, so its first `points` values have the right statistics.
    n, window = _noise_filter(instrument, points)
    white = rng.normal(0.0, 1.0, window.size) + 1j * rng.normal(0.0, 1.0, window.size)
    white[0] = white[0].real * np.sqrt(2.0)
    if n % 2 == 0:
        white[-1] = white[-1].real * np.sqrt(2.0)
    total, _ = _filter_power(window, n)
    # var(irfft) per point = 2 * total / n^2 for unit-variance real and imaginary parts
    scale = sigma * n / np.sqrt(2.0 * total)
    return scipy.fft.irfft(white * window, n=n)[:points] * scale
