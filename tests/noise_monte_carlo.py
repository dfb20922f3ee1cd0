"""Monte-Carlo of bandwatch's stated uncertainties on simulated HCl spectra (shared by
`test_noise_monte_carlo.py` and `benchmarks/mc_noise.py`).

One noise-free spectrum is simulated per case; each realisation adds the instrument's noise
with its own seed (interferogram-domain noise is correlated as apodization and zero filling
make it) and runs the whole analysis. A stated sigma keeps its promise when the scatter of the
values over the realisations, divided by the root-mean-square of the stated sigmas, is near 1.

Terms the lines cannot determine (gamma_e, beta_e, H_e from two vibrational levels) are held
at the library's values with the library's uncertainty, which is a systematic, the same in
every realisation. Here they are held with a negligible uncertainty (a library file given to the
analysis) so that the scatter meets the statistical part alone; the held terms' own promise is
tested against a perturbed library in `test_model_references.py`.
"""
from __future__ import annotations

import math
import tempfile
from dataclasses import dataclass, replace
from pathlib import Path

import numpy as np

from processing.instrument import Instrument, instrument_noise
from processing.pipeline import ProcessSettings, analyse
from processing.simulate import Cell, SampleGas, SimulationSettings, simulate
from processing.spectrum import Spectrum

QUANTITIES = ("origin", "B_upper", "B_lower", "B_e", "r_e")
# the shipped H35Cl values of the terms two levels cannot float, with a negligible uncertainty
HELD_EXACTLY = """
[isotopologues.H35Cl.constants]
gamma_e = { value = 0.0017, sigma = 1e-12, source = "test: held exactly", recalled = true }
beta_e = { value = -7.24e-6, sigma = 1e-15, source = "test: held exactly", recalled = false }
H_e = { value = 1.70e-8, sigma = 1e-18, source = "test: held exactly", recalled = false }
"""


@dataclass(frozen=True)
class Case:
    name: str
    instrument: Instrument
    species: str = "HCl"
    pressure_atm: float = 0.01
    path_cm: float = 10.0

    def settings(self) -> SimulationSettings:
        return SimulationSettings((SampleGas(self.species, self.pressure_atm),), Cell(self.path_cm), replace(self.instrument, snr=None))


def hcl_case(name: str, noise_domain: str, zero_fill: int, snr: float = 1000.0) -> Case:
    """HCl 1-0 at 0.5 cm-1 with Happ-Genzel apodization (a teaching-lab setting)."""
    instrument = Instrument(resolution_cm1=0.5, apodization="happ-genzel", zero_fill=zero_fill,
                            first_cm1=2600.0, last_cm1=3150.0, snr=snr, noise_domain=noise_domain)
    return Case(name, instrument)


CASES = (
    hcl_case("white noise, zero fill 2", "points", 2),
    hcl_case("interferogram noise, zero fill 2", "interferogram", 2),
    hcl_case("interferogram noise, zero fill 4", "interferogram", 4),
)


@dataclass(frozen=True)
class Outcome:
    """One case over many realisations."""

    case: str
    values: dict[str, np.ndarray]  # per quantity, per realisation
    sigmas: dict[str, np.ndarray]
    noise_ratio: np.ndarray  # reported per-point noise / true
    detected: np.ndarray  # lines found per realisation
    expected_lines: int  # true lines whose top is above 5 noise sigma

    def scatter_over_stated(self, quantity: str) -> float:
        values, sigmas = self.values[quantity], self.sigmas[quantity]
        return float(np.std(values, ddof=1) / math.sqrt(np.mean(sigmas**2)))


def _h35cl(result_constants: object, bands: tuple) -> dict[str, tuple[float, float]]:
    band = next(b for b in bands if b.isotopologue == "H35Cl" and (b.v_upper, b.v_lower) == (1, 0))
    constants = next(c for c in result_constants.per_isotopologue if c.isotopologue == "H35Cl")
    return {
        "origin": (band.origin.value, band.origin.sigma),
        "B_upper": (band.B_upper.value, band.B_upper.sigma),
        "B_lower": (band.B_lower.value, band.B_lower.sigma),
        "B_e": (constants.constants["B_e"].value, constants.constants["B_e"].sigma),
        "r_e": (constants.constants["r_e"].value, constants.constants["r_e"].sigma),
    }


def run_case(case: Case, realisations: int, first_seed: int = 1) -> Outcome:
    clean = simulate(case.settings())
    x = clean.spectrum.wavenumber_cm1
    transmittance = clean.transmittance
    true_sigma = (1.0 / case.instrument.snr) / math.log(10.0)  # absorbance at T = 1
    absorbance = clean.spectrum.absorbance
    lines = clean.truth.lines
    index = np.clip(np.searchsorted(x, lines.position_cm1), 0, x.size - 1)
    on_sample = np.array([not source.endswith("-like") for source in lines.source])
    expected = int(np.count_nonzero(on_sample & (absorbance[index] > 5.0 * true_sigma)))
    values = {q: [] for q in QUANTITIES}
    sigmas = {q: [] for q in QUANTITIES}
    noise_ratio, detected = [], []
    with tempfile.TemporaryDirectory() as folder:
        library_file = Path(folder) / "held_exactly.toml"
        library_file.write_text(HELD_EXACTLY)
        settings = ProcessSettings(library_file=str(library_file))
        analyses = []
        for seed in range(first_seed, first_seed + realisations):
            noise = instrument_noise(case.instrument, x.size, np.random.default_rng(seed))
            spectrum = Spectrum.from_y(x, transmittance + noise, "transmittance", clean.spectrum.meta)
            analyses.append(analyse(spectrum, settings))
    for analysis in analyses:
        for quantity, (value, sigma) in _h35cl(analysis.constants, analysis.assignment.bands).items():
            values[quantity].append(value)
            sigmas[quantity].append(sigma)
        noise_ratio.append(analysis.baseline.noise_sigma / true_sigma)
        detected.append(analysis.lines.count)
    return Outcome(
        case=case.name,
        values={q: np.array(v) for q, v in values.items()},
        sigmas={q: np.array(v, dtype=np.float64) for q, v in sigmas.items()},
        noise_ratio=np.array(noise_ratio),
        detected=np.array(detected),
        expected_lines=expected,
    )
