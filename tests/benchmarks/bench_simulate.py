"""Speed of the simulator on a 1M-point spectrum (plain script: `python tests/benchmarks/bench_simulate.py`).

Four isotopologues (H35Cl, H37Cl, D35Cl, D37Cl), bands 1-0 and 2-0 each, 1750-5950 cm-1 at
0.0168 cm-1 resolution with zero filling 2 (spacing 0.0042 cm-1, ~1.0M output points), 0.002 atm
of each gas in a 200 cm cell: nearly Doppler-limited lines, so the fine grid is ~8M points.
Reports the median of several runs, each stage's share, and the time of one numpy FFT of the
output length measured in the same run (ratio = simulator / FFT). Target: < 2 s on 2 cores.

Trade-off: the fine grid is uniform with spacing <= a quarter of the narrowest line's Voigt HWHM
(8x finer than the output here). Adaptive grids near lines would need fewer points but make the
ILS step a non-uniform transform; one uniform real FFT is simpler and exact.
"""
from __future__ import annotations

import statistics
import sys
import time
from dataclasses import replace

import numpy as np

from processing.instrument import Instrument, apply_line_shape
from processing.simulate import (
    Cell,
    SampleGas,
    SimulationSettings,
    _lines_in_range,
    add_baseline_and_fringes,
    add_noise,
    build_line_table,
    fine_grid_for,
    margin_cm1,
    optical_depth_on_grid,
    output_transmittance,
    simulate,
)
from processing.species import load_library

RUNS = 5
TARGET_SECONDS = 2.0


def settings() -> SimulationSettings:
    bands = ((1, 0), (2, 0))
    return SimulationSettings(
        gases=(SampleGas(("H35Cl", "H37Cl"), 0.002, bands), SampleGas(("D35Cl", "D37Cl"), 0.002, bands)),
        cell=Cell(path_length_cm=200.0, temperature_K=296.0),
        instrument=Instrument(resolution_cm1=0.0168, apodization="happ-genzel", zero_fill=2,
                              first_cm1=1750.0, last_cm1=5950.0, snr=2000.0, baseline_offset=0.01, seed=1),
    )


def staged_run(simulation: SimulationSettings, library: object) -> tuple[dict[str, float], int]:
    """The steps of `simulate`, timed one by one."""
    instrument = simulation.instrument
    times: dict[str, float] = {}
    start = time.perf_counter()
    all_lines, _bands = build_line_table(simulation, library)
    margin = margin_cm1(instrument)
    lines = _lines_in_range(all_lines, instrument.first_cm1 - margin, instrument.last_cm1 + margin)
    grid = fine_grid_for(lines, instrument)
    times["lines"] = time.perf_counter() - start
    start = time.perf_counter()
    transmittance_fine = np.exp(-optical_depth_on_grid(grid.first_cm1, grid.step_cm1, grid.points, lines))
    times["fine-grid optical depth"] = time.perf_counter() - start
    start = time.perf_counter()
    padded = apply_line_shape(transmittance_fine, grid, instrument, workers=-1)
    times["ILS"] = time.perf_counter() - start
    start = time.perf_counter()
    wavenumber, transmittance = output_transmittance(instrument, padded, grid)
    transmittance = add_baseline_and_fringes(instrument, wavenumber, transmittance)
    times["sampling"] = time.perf_counter() - start
    start = time.perf_counter()
    transmittance = add_noise(instrument, transmittance)
    times["noise"] = time.perf_counter() - start
    return times, int(transmittance.size)


def main() -> int:
    library = load_library()
    simulation = settings()
    simulate(replace(simulation, instrument=replace(simulation.instrument, last_cm1=1800.0)), library)  # warm up
    totals, fft_times, full_times, stage_runs = [], [], [], []
    points = 0
    for _ in range(RUNS):
        stages, points = staged_run(simulation, library)
        stage_runs.append(stages)
        totals.append(sum(stages.values()))
        start = time.perf_counter()
        result = simulate(simulation, library, workers=-1)
        full_times.append(time.perf_counter() - start)
        signal = np.random.default_rng(0).normal(size=points)
        start = time.perf_counter()
        np.fft.fft(signal)
        fft_times.append(time.perf_counter() - start)
    median_total = statistics.median(full_times)
    median_fft = statistics.median(fft_times)
    print(f"output points: {points}  lines: {result.truth.lines.count}  fine step: "
          f"{result.truth.fine_grid_step_cm1:.5f} cm-1")
    print(f"simulate(): median of {RUNS} runs {median_total:.3f} s (target < {TARGET_SECONDS} s)")
    staged_median = statistics.median(totals)
    for stage in stage_runs[0]:
        value = statistics.median(run[stage] for run in stage_runs)
        print(f"  {stage:<24} {value:7.3f} s  {100 * value / staged_median:5.1f} %")
    print(f"baseline: one numpy FFT of {points} points, median {median_fft * 1000:.1f} ms; "
          f"ratio simulate/FFT = {median_total / median_fft:.1f}")
    return 0 if median_total < TARGET_SECONDS else 1


if __name__ == "__main__":
    sys.exit(main())
