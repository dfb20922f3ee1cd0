"""Instrument-like synthetic spectra of diatomic gases in a cell, with known truth.

Steps (each a pure function on numpy arrays):
1. lines: positions from `levels` (Dunham), strengths from `intensities` (cm/molecule, per
   molecule of the isotopologue), widths: Doppler FWHM = nu sqrt(8 k T ln2 / (m c^2)) from the
   isotopologue's mass, Lorentz HWHM = broadening coefficient x total cell pressure.
2. fine-grid optical depth: tau(nu) = sum_i S_i N_i L g_i(nu) (natural; decadic A = tau/ln10),
   N_i from the partial pressure by the ideal gas law, g_i a unit-area Voigt profile evaluated
   in a window of +-50 Voigt HWHM (wider for strong lines, out to where the wing's optical depth
   is 1e-4) and renormalised to unit area inside it (so each line's integrated optical depth is
   exactly S N L). Transmittance T = exp(-tau) on a grid of step <= Voigt HWHM / 4.
3. instrument: the ILS applied to T (processing.instrument), sampled on the instrument grid;
   interferents present only when the background was measured divide it out (T_sample /
   T_background: inverted lines).
4. window fringes and baseline (a decadic absorbance offset/tilt), then noise on T, made in the
   interferogram (correlated as the apodization and zero filling make it) or per point.
5. on export, y values rounded to a number of decimals as instrument software does.
Reproducible bit-for-bit for the same settings and seed.
"""
from __future__ import annotations

import json
import math
from dataclasses import asdict, dataclass, field, replace
from typing import TYPE_CHECKING, Any

import numpy as np
from scipy import constants as _sc
from scipy.special import voigt_profile

from processing.instrument import (
    FineGrid,
    Instrument,
    apply_line_shape,
    instrument_noise,
    noise_correlation_points,
    plan_fine_grid,
)
from processing.interferents import Interferent, interferent_lines
from processing.levels import band_origin, centrifugal_constant, rotational_constant
from processing.spectrum import FileMetadata, Spectrum

if TYPE_CHECKING:
    from processing.species import Isotopologue, Library

STANDARD_ATMOSPHERE_PA = _sc.atm  # 101325 Pa (scipy.constants)
VOIGT_WINDOW_HWHM = 50.0  # each line is evaluated within +- this many Voigt HWHM (at least)
WING_OPTICAL_DEPTH = 1e-4  # ... and out to where its Lorentz wing's optical depth falls to this
MIN_RELATIVE_STRENGTH = 1e-5  # lines weaker than this x the band's strongest are left out
LN10 = math.log(10.0)


# ---------------------------------------------------------------------------- settings
@dataclass(frozen=True)
class SampleGas:
    """One gas in the cell: molecule names (all isotopologues, natural shares) or isotopologue
    labels (that isotopologue alone), its partial pressure, and the bands to draw."""

    species: tuple[str, ...]
    partial_pressure_atm: float
    bands: tuple[tuple[int, int], ...] = ((1, 0),)

    def __post_init__(self) -> None:
        species = (self.species,) if isinstance(self.species, str) else tuple(self.species)
        species = tuple(s.strip() for part in species for s in part.split(",") if s.strip())
        object.__setattr__(self, "species", species)
        object.__setattr__(self, "bands", tuple((int(u), int(l)) for u, l in self.bands))
        if not species:
            raise ValueError("a sample gas needs at least one species")
        if not self.partial_pressure_atm >= 0:
            raise ValueError(f"partial pressure must be >= 0 atm, got {self.partial_pressure_atm}")
        for upper, lower in self.bands:
            if upper <= lower or lower < 0:
                raise ValueError(f"band {upper}-{lower} is not an absorption band (need v' > v'' >= 0)")


@dataclass(frozen=True)
class Cell:
    """The gas cell. total_pressure_atm None means the sum of the gases' partial pressures."""

    path_length_cm: float = 10.0
    temperature_K: float = 296.0
    total_pressure_atm: float | None = None

    def __post_init__(self) -> None:
        if not self.path_length_cm > 0:
            raise ValueError(f"path length must be positive, got {self.path_length_cm} cm")
        if not self.temperature_K > 0:
            raise ValueError(f"temperature must be positive, got {self.temperature_K} K")
        if self.total_pressure_atm is not None and not self.total_pressure_atm >= 0:
            raise ValueError(f"total pressure must be >= 0 atm, got {self.total_pressure_atm}")


@dataclass(frozen=True)
class SimulationSettings:
    """Everything a simulated spectrum depends on (with the library's data)."""

    gases: tuple[SampleGas, ...]
    cell: Cell = field(default_factory=Cell)
    instrument: Instrument = field(default_factory=Instrument)
    interferents: tuple[Interferent, ...] = ()
    title: str = "bandwatch simulated spectrum"

    def total_pressure_atm(self) -> float:
        if self.cell.total_pressure_atm is not None:
            return self.cell.total_pressure_atm
        return float(sum(gas.partial_pressure_atm for gas in self.gases))


# ---------------------------------------------------------------------------- truth
@dataclass(frozen=True)
class BandTruth:
    """A band's constants as used (from the Dunham coefficients), cm-1."""

    isotopologue: str
    v_upper: int
    v_lower: int
    origin_cm1: float
    B_upper_cm1: float
    B_lower_cm1: float
    D_upper_cm1: float
    D_lower_cm1: float
    partial_pressure_atm: float
    lines: int


@dataclass(frozen=True)
class LineTable:
    """The lines used (column arrays, one entry per line)."""

    source: tuple[str, ...]  # isotopologue label, "co2-like" or "water-like"
    v_upper: np.ndarray  # -1 where not defined
    v_lower: np.ndarray
    branch: tuple[str, ...]  # "P", "R" or ""
    J_lower: np.ndarray  # -1 where not defined
    true_position_cm1: np.ndarray  # before the instrument's calibration error
    position_cm1: np.ndarray  # where the instrument shows it
    strength_cm_per_molecule: np.ndarray
    column_density_per_cm2: np.ndarray  # number density x path of the absorber
    doppler_fwhm_cm1: np.ndarray
    lorentz_hwhm_cm1: np.ndarray
    in_background: np.ndarray | None = None  # bool: the line was in the background's beam

    def __post_init__(self) -> None:
        if self.in_background is None:
            object.__setattr__(self, "in_background", np.zeros(self.position_cm1.size, dtype=bool))

    @property
    def count(self) -> int:
        return int(self.position_cm1.size)

    def select(self, keep: np.ndarray) -> LineTable:
        """The lines where `keep` is True."""
        index = np.flatnonzero(keep)
        return LineTable(
            source=tuple(self.source[i] for i in index),
            v_upper=self.v_upper[index], v_lower=self.v_lower[index],
            branch=tuple(self.branch[i] for i in index), J_lower=self.J_lower[index],
            true_position_cm1=self.true_position_cm1[index], position_cm1=self.position_cm1[index],
            strength_cm_per_molecule=self.strength_cm_per_molecule[index],
            column_density_per_cm2=self.column_density_per_cm2[index],
            doppler_fwhm_cm1=self.doppler_fwhm_cm1[index], lorentz_hwhm_cm1=self.lorentz_hwhm_cm1[index],
            in_background=self.in_background[index],
        )

    def integrated_optical_depth_cm1(self) -> np.ndarray:
        """S N L per line (natural optical depth integrated over wavenumber), cm-1."""
        return self.strength_cm_per_molecule * self.column_density_per_cm2

    def to_records(self) -> list[dict[str, Any]]:
        records = []
        for i in range(self.count):
            records.append(
                {
                    "source": self.source[i],
                    "band": f"{int(self.v_upper[i])}-{int(self.v_lower[i])}" if self.v_upper[i] >= 0 else "",
                    "branch": self.branch[i],
                    "J_lower": int(self.J_lower[i]),
                    "position_cm1": round(float(self.position_cm1[i]), 6),
                    "true_position_cm1": round(float(self.true_position_cm1[i]), 6),
                    "strength_cm_per_molecule": float(f"{self.strength_cm_per_molecule[i]:.6e}"),
                    "integrated_absorbance_cm1": float(
                        f"{self.strength_cm_per_molecule[i] * self.column_density_per_cm2[i] / LN10:.6e}"
                    ),
                    **({"in_background": True} if self.in_background[i] else {}),
                }
            )
        return records


@dataclass(frozen=True)
class SimulationTruth:
    """What went into a simulated spectrum: inputs, bands, lines, instrument numbers."""

    settings: SimulationSettings
    bands: tuple[BandTruth, ...]
    lines: LineTable
    output_spacing_cm1: float
    ils_fwhm_cm1: float
    noise_sigma_transmittance: float | None
    fine_grid_step_cm1: float
    conventions: tuple[str, ...]
    noise_correlation_points: float = 1.0  # tau of the noise: output points per independent sample

    def to_dict(self, include_lines: bool = True) -> dict[str, Any]:
        data: dict[str, Any] = {
            "settings": asdict(self.settings),
            "bands": [asdict(band) for band in self.bands],
            "output_spacing_cm1": self.output_spacing_cm1,
            "ils_fwhm_cm1": round(self.ils_fwhm_cm1, 6),
            "noise_sigma_transmittance": self.noise_sigma_transmittance,
            "noise_sigma_absorbance_at_baseline": self.noise_sigma_absorbance_at_baseline(),
            "noise_domain": self.settings.instrument.noise_domain,
            "noise_correlation_points": round(self.noise_correlation_points, 4),
            "fine_grid_step_cm1": self.fine_grid_step_cm1,
            "conventions": list(self.conventions),
        }
        if include_lines:
            data["lines"] = self.lines.to_records()
        return data

    def noise_sigma_absorbance_at_baseline(self) -> float | None:
        """The per-point noise in absorbance where nothing absorbs: sigma_T / (T ln 10), with T
        the baseline's transmittance at the range centre (10^-offset)."""
        if self.noise_sigma_transmittance is None:
            return None
        baseline_t = 10.0 ** -self.settings.instrument.baseline_offset
        return float(f"{self.noise_sigma_transmittance / (baseline_t * LN10):.6e}")

    def to_json(self, include_lines: bool = True) -> str:
        return json.dumps(self.to_dict(include_lines), indent=1, sort_keys=False) + "\n"


CONVENTIONS: tuple[str, ...] = (
    "wavenumbers in cm-1; absorbance decadic, A = tau / ln 10 with tau the natural optical depth",
    "resolution R = 1/L with L the maximum optical path difference; ILS FWHM depends on apodization",
    "ILS applied to transmittance (exact convolution via the interferogram, |x| <= L)",
    "output grid nu_k = k * R / (2 * zero_fill)",
    "snr is for the 100% line: noise standard deviation 1/snr in transmittance per output point; "
    "noise_domain interferogram: white on the interferogram, apodized and zero-filled with it (points "
    "correlated over noise_correlation_points); points: independent per output point",
    "interferents in_background were in the beam for the background: their lines appear inverted",
    "baseline: decadic absorbance offset + tilt * (nu - centre) / half-range; fringes multiply T after the ILS",
    "calibration error: a feature at true nu appears at nu * scale + shift",
    "line strengths per molecule of the isotopologue; integrated_absorbance_cm1 = S N L / ln 10",
    "co2-like and water-like interferents are invented models, not database data",
)


@dataclass(frozen=True)
class SimulationResult:
    """The spectrum (transmittance-based `Spectrum`), its transmittance, and the truth."""

    spectrum: Spectrum
    transmittance: np.ndarray
    truth: SimulationTruth


# ---------------------------------------------------------------------------- physics helpers
def number_density_per_cm3(partial_pressure_atm: float, temperature_K: float) -> float:
    """Ideal gas: N = p / (k T), molecules per cm3."""
    return partial_pressure_atm * STANDARD_ATMOSPHERE_PA / (_sc.k * temperature_K) * 1e-6


def doppler_fwhm_cm1(
    wavenumber_cm1: np.ndarray | float, mass_u: float, temperature_K: float
) -> np.ndarray:
    """Doppler FWHM = nu sqrt(8 k T ln2 / (m c^2)), cm-1 (m from the isotopic mass)."""
    mass_kg = mass_u * _sc.physical_constants["atomic mass constant"][0]
    factor = math.sqrt(8.0 * _sc.k * temperature_K * math.log(2.0) / (mass_kg * _sc.c**2))
    return np.asarray(wavenumber_cm1, dtype=np.float64) * factor


def voigt_hwhm_cm1(doppler_fwhm: np.ndarray, lorentz_hwhm: np.ndarray) -> np.ndarray:
    """Voigt HWHM (Olivero & Longbothum 1977 approximation, ~0.02% accurate)."""
    f_l = 2.0 * np.asarray(lorentz_hwhm)
    f_g = np.asarray(doppler_fwhm)
    return 0.5 * (0.5346 * f_l + np.sqrt(0.2166 * f_l**2 + f_g**2))


def optical_depth_on_grid(
    first_cm1: float, step_cm1: float, points: int, lines: LineTable
) -> np.ndarray:
    """Natural optical depth on the uniform grid first + j*step (j < points).

    Each line is a Voigt profile evaluated within +-VOIGT_WINDOW_HWHM of its centre and scaled
    to unit area on the grid, times S N L. Lines are vectorised in groups of equal window size.
    """
    tau = np.zeros(points, dtype=np.float64)
    if lines.count == 0:
        return tau
    centres = lines.position_cm1
    area = lines.integrated_optical_depth_cm1()
    sigma = lines.doppler_fwhm_cm1 / (2.0 * math.sqrt(2.0 * math.log(2.0)))
    gamma = lines.lorentz_hwhm_cm1
    hwhm = voigt_hwhm_cm1(lines.doppler_fwhm_cm1, gamma)
    # Window: +-50 HWHM, widened for strong lines until the Lorentz wing A gamma/(pi d^2)
    # falls below WING_OPTICAL_DEPTH (a saturated line's wings absorb far from its centre).
    wing = np.sqrt(area * gamma / (math.pi * WING_OPTICAL_DEPTH))
    half_points = np.ceil(np.maximum(VOIGT_WINDOW_HWHM * hwhm, wing) / step_cm1).astype(np.int64)
    # Round window sizes up to powers of two so a few groups cover all lines.
    group_half = 1 << np.ceil(np.log2(np.maximum(half_points, 2))).astype(np.int64)
    centre_index = np.rint((centres - first_cm1) / step_cm1).astype(np.int64)
    inside = (centre_index + group_half >= 0) & (centre_index - group_half < points) & (area > 0)
    for half in np.unique(group_half[inside]):
        chosen = np.flatnonzero(inside & (group_half == half))
        offsets = np.arange(-half, half + 1)
        index = centre_index[chosen, None] + offsets[None, :]
        detuning = first_cm1 + index * step_cm1 - centres[chosen, None]
        profile = voigt_profile(detuning, sigma[chosen, None], gamma[chosen, None])
        profile *= (area[chosen] / (profile.sum(axis=1) * step_cm1))[:, None]
        valid = (index >= 0) & (index < points)
        tau += np.bincount(index[valid], weights=profile[valid], minlength=points)
    return tau


# ---------------------------------------------------------------------------- line lists
def _isotopologue_shares(gas: SampleGas, library: Library) -> list[tuple[Isotopologue, float]]:
    """(isotopologue, share of the gas's partial pressure). A molecule name spreads the
    pressure over its isotopologues by their natural abundances (normalised within the
    molecule); an isotopologue label takes the pressure alone. Several names split it evenly."""
    result: list[tuple[Any, float]] = []
    names = gas.species
    for name in names:
        members = library.resolve([name])
        if len(members) == 1 and members[0].label.casefold() == name.casefold():
            shares = [(members[0], 1.0)]
        else:
            total = sum(member.abundance for member in members)
            shares = [(member, member.abundance / total) for member in members]
        result.extend((iso, share / len(names)) for iso, share in shares)
    return result


def build_line_table(settings: SimulationSettings, library: Library | None = None) -> tuple[LineTable, tuple[BandTruth, ...]]:
    """All lines (sample gases and interferents) with strengths, column densities and widths."""
    from processing import intensities
    from processing.species import load_library

    library = library or load_library()
    cell = settings.cell
    instrument = settings.instrument
    total_pressure = settings.total_pressure_atm()
    columns: dict[str, list[np.ndarray]] = {key: [] for key in (
        "v_upper", "v_lower", "J_lower", "true_position", "strength", "column", "doppler", "lorentz")}
    sources: list[str] = []
    branches: list[str] = []
    background: list[np.ndarray] = []
    bands: list[BandTruth] = []
    for gas in settings.gases:
        for iso, share in _isotopologue_shares(gas, library):
            pressure = gas.partial_pressure_atm * share
            column = number_density_per_cm3(pressure, cell.temperature_K) * cell.path_length_cm
            for v_upper, v_lower in gas.bands:
                band = intensities.lines_for(
                    iso, v_upper, v_lower, cell.temperature_K,
                    min_relative=MIN_RELATIVE_STRENGTH, include_abundance=False,
                )
                lines = band.lines
                n = lines.wavenumber_cm1.size
                bands.append(BandTruth(
                    isotopologue=iso.label, v_upper=v_upper, v_lower=v_lower,
                    origin_cm1=round(band_origin(iso.dunham, v_upper, v_lower), 6),
                    B_upper_cm1=round(rotational_constant(iso.dunham, v_upper), 8),
                    B_lower_cm1=round(rotational_constant(iso.dunham, v_lower), 8),
                    D_upper_cm1=float(f"{centrifugal_constant(iso.dunham, v_upper):.6e}"),
                    D_lower_cm1=float(f"{centrifugal_constant(iso.dunham, v_lower):.6e}"),
                    partial_pressure_atm=pressure, lines=n,
                ))
                columns["v_upper"].append(np.full(n, v_upper))
                columns["v_lower"].append(np.full(n, v_lower))
                columns["J_lower"].append(np.asarray(lines.J_lower, dtype=np.int64))
                columns["true_position"].append(np.asarray(lines.wavenumber_cm1, dtype=np.float64))
                columns["strength"].append(np.asarray(band.strength_cm_per_molecule, dtype=np.float64))
                columns["column"].append(np.full(n, column))
                columns["doppler"].append(doppler_fwhm_cm1(lines.wavenumber_cm1, iso.mass_u, cell.temperature_K))
                columns["lorentz"].append(np.full(n, iso.broadening_hwhm_cm1_per_atm * total_pressure))
                sources.extend([iso.label] * n)
                branches.extend(str(b) for b in lines.branch)
                background.append(np.zeros(n, dtype=bool))
    for interferent in settings.interferents:
        model = interferent_lines(interferent)
        n = model.position_cm1.size
        column = number_density_per_cm3(interferent.partial_pressure_atm, interferent.temperature_K)
        column *= interferent.path_length_cm
        columns["v_upper"].append(np.full(n, -1))
        columns["v_lower"].append(np.full(n, -1))
        columns["J_lower"].append(np.asarray(model.J_lower, dtype=np.int64))
        columns["true_position"].append(model.position_cm1)
        columns["strength"].append(model.strength_cm_per_molecule)
        columns["column"].append(np.full(n, column))
        columns["doppler"].append(doppler_fwhm_cm1(model.position_cm1, model.mass_u, interferent.temperature_K))
        columns["lorentz"].append(np.full(n, model.broadening_hwhm_cm1_per_atm * interferent.air_pressure_atm))
        sources.extend([f"{model.kind}-like"] * n)
        branches.extend(model.branch)
        background.append(np.full(n, interferent.in_background))

    def joined(key: str, dtype: Any) -> np.ndarray:
        parts = columns[key]
        return np.concatenate(parts).astype(dtype) if parts else np.zeros(0, dtype=dtype)

    true_position = joined("true_position", np.float64)
    table = LineTable(
        source=tuple(sources),
        v_upper=joined("v_upper", np.int64),
        v_lower=joined("v_lower", np.int64),
        branch=tuple(branches),
        J_lower=joined("J_lower", np.int64),
        true_position_cm1=true_position,
        position_cm1=true_position * instrument.calibration_scale + instrument.calibration_shift_cm1,
        strength_cm_per_molecule=joined("strength", np.float64),
        column_density_per_cm2=joined("column", np.float64),
        doppler_fwhm_cm1=joined("doppler", np.float64),
        lorentz_hwhm_cm1=joined("lorentz", np.float64),
        in_background=np.concatenate(background) if background else np.zeros(0, dtype=bool),
    )
    return table, tuple(bands)


def _lines_in_range(lines: LineTable, first_cm1: float, last_cm1: float) -> LineTable:
    return lines.select((lines.position_cm1 >= first_cm1) & (lines.position_cm1 <= last_cm1))


# ---------------------------------------------------------------------------- the simulator
def margin_cm1(instrument: Instrument) -> float:
    """Extra range computed each side of the output range: 40 ILS widths, at least 5 cm-1.
    ILS sidelobes of lines beyond it are left out (boxcar tails fall as 1/offset)."""
    return max(40.0 * instrument.ils_fwhm_cm1, 5.0)


def fine_grid_for(lines: LineTable, instrument: Instrument) -> FineGrid:
    """Fine grid with spacing <= a quarter of the narrowest line's Voigt HWHM (see plan_fine_grid)."""
    if lines.count:
        narrowest = float(np.min(voigt_hwhm_cm1(lines.doppler_fwhm_cm1, lines.lorentz_hwhm_cm1)))
    else:
        narrowest = instrument.spacing_cm1
    return plan_fine_grid(instrument, narrowest, margin_cm1(instrument))


def output_transmittance(
    instrument: Instrument, transmittance_padded: np.ndarray, grid: FineGrid
) -> tuple[np.ndarray, np.ndarray]:
    """Cut the padded output-grid transmittance to the instrument's range: (nu, T)."""
    k_first, k_last = instrument.output_indices()
    start = k_first - grid.k0
    wavenumber = np.arange(k_first, k_last + 1) * instrument.spacing_cm1
    return wavenumber, transmittance_padded[start : start + wavenumber.size]


def add_baseline_and_fringes(instrument: Instrument, wavenumber: np.ndarray, transmittance: np.ndarray) -> np.ndarray:
    """Multiply in the fringes and the baseline absorbance (both smooth, both deterministic)."""
    result = transmittance
    if instrument.fringes is not None and instrument.fringes.amplitude:
        fringes = instrument.fringes
        result = result * (1.0 + fringes.amplitude * np.cos(
            2.0 * np.pi * wavenumber / fringes.period_cm1 + fringes.phase_rad))
    if instrument.baseline_offset or instrument.baseline_tilt:
        centre = 0.5 * (instrument.first_cm1 + instrument.last_cm1)
        half = 0.5 * (instrument.last_cm1 - instrument.first_cm1)
        baseline = instrument.baseline_offset + instrument.baseline_tilt * (wavenumber - centre) / half
        result = result * np.power(10.0, -baseline)
    return result


def add_noise(instrument: Instrument, transmittance: np.ndarray) -> np.ndarray:
    """Gaussian noise of standard deviation 1/snr per point (100% line) in the instrument's
    noise domain (see `instrument_noise`), seeded by the instrument."""
    if instrument.snr is None:
        return transmittance
    rng = np.random.default_rng(instrument.seed)
    return transmittance + instrument_noise(instrument, transmittance.size, rng)


def simulate(settings: SimulationSettings, library: Library | None = None, workers: int | None = None) -> SimulationResult:
    """A synthetic spectrum with its truth record (see the module docstring for the steps)."""
    instrument = settings.instrument
    all_lines, bands = build_line_table(settings, library)
    margin = margin_cm1(instrument)
    lines = _lines_in_range(all_lines, instrument.first_cm1 - margin, instrument.last_cm1 + margin)
    grid = fine_grid_for(lines, instrument)
    in_background = lines.in_background
    tau = optical_depth_on_grid(grid.first_cm1, grid.step_cm1, grid.points, lines.select(~in_background))
    padded = apply_line_shape(np.exp(-tau), grid, instrument, workers=workers)
    if in_background.any():
        # the background single beam saw these lines: the ratio shows them inverted
        tau_background = optical_depth_on_grid(grid.first_cm1, grid.step_cm1, grid.points, lines.select(in_background))
        padded = padded / apply_line_shape(np.exp(-tau_background), grid, instrument, workers=workers)
    wavenumber, transmittance = output_transmittance(instrument, padded, grid)
    transmittance = add_baseline_and_fringes(instrument, wavenumber, transmittance)
    transmittance = add_noise(instrument, transmittance)
    truth = SimulationTruth(
        settings=settings,
        bands=bands,
        lines=lines,
        output_spacing_cm1=instrument.spacing_cm1,
        ils_fwhm_cm1=instrument.ils_fwhm_cm1,
        noise_sigma_transmittance=None if instrument.snr is None else 1.0 / instrument.snr,
        noise_correlation_points=noise_correlation_points(instrument),
        fine_grid_step_cm1=grid.step_cm1,
        conventions=CONVENTIONS,
    )
    meta = FileMetadata(
        title=settings.title,
        resolution_cm1=instrument.resolution_cm1,
        apodization=instrument.apodization,
        format="bandwatch simulation",
        notes=(f"simulated; seed {instrument.seed}",),
    )
    spectrum = Spectrum.from_y(wavenumber, transmittance, "transmittance", meta)
    return SimulationResult(spectrum=spectrum, transmittance=transmittance, truth=truth)


def auto_range(settings: SimulationSettings, pad_cm1: float = 30.0) -> tuple[float, float]:
    """A range covering the sample's lines that carry >= 1e-3 of the strongest line's
    integrated optical depth, +- `pad_cm1`, rounded out to 10 cm-1."""
    lines, _bands = build_line_table(replace(settings, interferents=()))
    if lines.count == 0:
        raise ValueError("no sample lines to choose a range from; give the range explicitly")
    depth = lines.integrated_optical_depth_cm1()
    strong = lines.position_cm1[depth >= 1e-3 * depth.max()]
    first = math.floor((strong.min() - pad_cm1) / 10.0) * 10.0
    last = math.ceil((strong.max() + pad_cm1) / 10.0) * 10.0
    return max(first, 10.0), last


OUTPUT_FORMATS: tuple[str, ...] = ("jcamp-dif", "jcamp-affn", "csv")
_Y_KIND_BY_NAME = {"transmittance": "transmittance", "absorbance": "absorbance",
                   "percent": "percent_transmittance", "percent_transmittance": "percent_transmittance"}


def write_spectrum(path: str, result: SimulationResult, file_format: str, y: str = "absorbance", decimals: int | None = None) -> None:
    """Write the simulated spectrum with the project's writers (JCAMP-DX or CSV), y values
    rounded to `decimals` places when given."""
    if file_format not in OUTPUT_FORMATS:
        raise ValueError(f"unknown format {file_format!r}; choose from {', '.join(OUTPUT_FORMATS)}")
    if y not in _Y_KIND_BY_NAME:
        raise ValueError(f"unknown y kind {y!r}; choose transmittance, absorbance or percent")
    if decimals is not None and not 0 <= decimals <= 15:
        raise ValueError(f"decimals must be between 0 and 15, got {decimals}")
    y_kind = _Y_KIND_BY_NAME[y]
    spectrum = replace(result.spectrum, original_y_kind=y_kind)
    if file_format == "csv":
        from processing.readers.delimited import write_csv

        write_csv(path, spectrum, y_kind=y_kind, decimals=decimals)
        return
    from processing.readers.jcamp_write import write_jcamp

    write_jcamp(path, spectrum, form="dif" if file_format == "jcamp-dif" else "affn", y_kind=y_kind, decimals=decimals)
