"""Monte-Carlo of bandwatch's stated uncertainties, longer than the CI test.

Run: python tests/benchmarks/mc_noise.py [--realisations N] [--snr 200,1000,5000]

For each noise case (white; interferogram-domain with Happ-Genzel and zero fill 1, 2, 4) and
SNR, prints scatter / stated sigma of the H35Cl 1-0 origin, B', B'', and of B_e and r_e (1 is a
kept promise), the median reported per-point noise over the true one, and the lines found
against the true lines above 5 sigma. Statistical only: the terms two levels cannot float are
held with a negligible uncertainty (see tests/noise_monte_carlo.py).
"""
from __future__ import annotations

import argparse
import sys
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from noise_monte_carlo import QUANTITIES, hcl_case, run_case  # noqa: E402


def main() -> None:
    parser = argparse.ArgumentParser()
    parser.add_argument("--realisations", type=int, default=200)
    parser.add_argument("--snr", default="200,1000,5000")
    args = parser.parse_args()
    print(f"scatter / stated sigma over {args.realisations} realisations (H35Cl 1-0, 0.5 cm-1, Happ-Genzel)")
    header = f"{'case':<34} {'snr':>5} " + " ".join(f"{q:>8}" for q in QUANTITIES) + f" {'noise':>6} {'lines':>12} {'s':>5}"
    print(header)
    for snr in (float(v) for v in args.snr.split(",")):
        for domain, zero_fill in (("points", 2), ("interferogram", 1), ("interferogram", 2), ("interferogram", 4)):
            case = hcl_case(f"{domain} noise, zero fill {zero_fill}", domain, zero_fill, snr)
            start = time.perf_counter()
            outcome = run_case(case, args.realisations)
            ratios = " ".join(f"{outcome.scatter_over_stated(q):8.2f}" for q in QUANTITIES)
            lines = f"{np.median(outcome.detected):.0f}/{outcome.expected_lines}"
            print(f"{case.name:<34} {snr:>5.0f} {ratios} {np.median(outcome.noise_ratio):6.3f} {lines:>12} {time.perf_counter() - start:5.0f}")


if __name__ == "__main__":
    main()
