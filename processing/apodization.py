"""Apodization windows of an FTIR (numpy only, so the analysis can use them without scipy).

A window w(u) weights the interferogram at relative path difference u = |x| / L (L the maximum
optical path difference); its Fourier transform is the instrument line shape, and the square of
it shapes the power spectrum of the noise (`processing.noise`).
"""
from __future__ import annotations

import re

import numpy as np

APODIZATIONS: tuple[str, ...] = (
    "boxcar",
    "triangular",
    "happ-genzel",
    "blackman-harris-3",
    "norton-beer-weak",
    "norton-beer-medium",
    "norton-beer-strong",
)

# Norton-Beer windows: sum_i c_i (1 - u^2)^i, u = x/L (Norton & Beer 1976, coefficients
# recalled from memory; each set sums to 1 so the window is 1 at zero path difference).
_NORTON_BEER: dict[str, tuple[float, ...]] = {
    "norton-beer-weak": (0.384093, -0.087577, 0.703484),
    "norton-beer-medium": (0.152442, -0.136176, 0.983734),
    "norton-beer-strong": (0.045335, 0.0, 0.554883, 0.0, 0.399782),
}

# Minimum 3-term Blackman-Harris (Harris 1978), one-sided over 0 <= u <= 1.
_BLACKMAN_HARRIS_3 = (0.42323, 0.49755, 0.07922)


def apodization_window(name: str, u: np.ndarray) -> np.ndarray:
    """Window value at relative path difference u = |x|/L (0 for |u| > 1)."""
    u = np.abs(np.asarray(u, dtype=np.float64))
    inside = u <= 1.0
    if name == "boxcar":
        w = np.ones_like(u)
    elif name == "triangular":
        w = 1.0 - u
    elif name == "happ-genzel":
        w = 0.54 + 0.46 * np.cos(np.pi * u)
    elif name == "blackman-harris-3":
        a0, a1, a2 = _BLACKMAN_HARRIS_3
        w = a0 + a1 * np.cos(np.pi * u) + a2 * np.cos(2.0 * np.pi * u)
    elif name in _NORTON_BEER:
        q = np.clip(1.0 - u * u, 0.0, None)
        w = np.zeros_like(u)
        for power, coefficient in enumerate(_NORTON_BEER[name]):
            if coefficient:
                w = w + coefficient * q**power
    else:
        raise ValueError(f"unknown apodization {name!r}; choose one of {', '.join(APODIZATIONS)}")
    return np.where(inside, w, 0.0)




_ALIASES = {
    "boxcar": "boxcar", "none": "boxcar", "rectangular": "boxcar", "uniform": "boxcar",
    "triangular": "triangular", "triangle": "triangular",
    "happgenzel": "happ-genzel", "hamming": "happ-genzel",
    "blackmanharris3": "blackman-harris-3", "blackmanharris": "blackman-harris-3", "3termblackmanharris": "blackman-harris-3",
    "nortonbeerweak": "norton-beer-weak", "nbweak": "norton-beer-weak", "weaknortonbeer": "norton-beer-weak",
    "nortonbeermedium": "norton-beer-medium", "nbmedium": "norton-beer-medium", "mediumnortonbeer": "norton-beer-medium",
    "nortonbeerstrong": "norton-beer-strong", "nbstrong": "norton-beer-strong", "strongnortonbeer": "norton-beer-strong",
}


def window_name(text: str | None) -> str | None:
    """The window named by a file's free-text apodization entry (e.g. `Happ-Genzel`,
    `NB medium`, `BOXCAR`), or None when it names none of ours."""
    if not text:
        return None
    key = re.sub(r"[^a-z0-9]", "", text.lower())
    return _ALIASES.get(key)
