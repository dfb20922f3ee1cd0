"""The analysis never raises on a readable spectrum, whatever its shape or content."""
from __future__ import annotations

import numpy as np
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from processing.pipeline import analyse
from processing.spectrum import Spectrum


@settings(max_examples=60, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(
    n=st.integers(min_value=2, max_value=3000),
    first=st.floats(min_value=400.0, max_value=8000.0),
    spacing=st.floats(min_value=0.001, max_value=4.0),
    seed=st.integers(min_value=0, max_value=2**32 - 1),
    kind=st.sampled_from(["noise", "spikes", "steps", "constant", "huge"]),
)
def test_analyse_returns_a_result_for_any_spectrum(n: int, first: float, spacing: float, seed: int, kind: str) -> None:
    rng = np.random.default_rng(seed)
    x = first + spacing * np.arange(n)
    if kind == "noise":
        y = rng.normal(0, 0.01, n)
    elif kind == "spikes":
        y = np.zeros(n)
        y[rng.integers(0, n, max(1, n // 50))] = rng.uniform(0.1, 5.0)
    elif kind == "steps":
        y = np.repeat(rng.uniform(0, 3, max(1, n // 100 + 1)), 100)[:n]
    elif kind == "constant":
        y = np.full(n, 0.5)
    else:
        y = rng.uniform(-1e6, 1e6, n)
    analysis = analyse(Spectrum.from_y(x, y, "absorbance"))
    assigned = analysis.assignment.per_line
    assert len(assigned) == analysis.lines.count
    assert all(np.isfinite(analysis.lines.position_cm1))
