"""The limits the run checks grade against (`CheckThresholds`): defaults, each with its reason,
and the station configuration's [checks] table read into them. Kept apart from the checks
themselves so reading a configuration needs no numerical library."""
from __future__ import annotations

import math
from dataclasses import dataclass, fields
from typing import Any

from processing.errors import ConfigError


@dataclass(frozen=True)
class CheckThresholds:
    # strongest assigned line in units of the noise sigma (common practice: >= 10 to measure
    # positions well; weak runs still give constants)
    snr_pass: float = 30.0
    snr_warn: float = 10.0
    # apparent absorbance beyond which a line top is not measurable (T < ~3%, common practice)
    usable_absorbance: float = 1.5
    saturated_lines_fail_fraction: float = 0.2  # of assigned lines
    thin_ratio_warn: float = 0.5  # measured/natural isotopologue ratio below this: strongly thick
    # lines per band
    band_lines_pass: float = 10.0
    band_lines_warn: float = 6.0
    # band fit rms as a fraction of the measured line width (a line is located to a few % of
    # its width at SNR >= 30; more means misassignments or blends)
    rms_width_pass: float = 0.1
    rms_width_warn: float = 0.25
    # wavenumber axis against the library: offset (cm-1, at the bands' mean wavenumber; 0.05
    # ~ the library's own accuracy) and scale (ppm: the usual FTIR error, laser or aperture;
    # 30 ppm is 0.06-0.09 cm-1 at 2000-3000 cm-1, 300 ppm about 1 cm-1)
    calibration_pass_cm1: float = 0.05
    calibration_warn_cm1: float = 0.5
    calibration_scale_pass_ppm: float = 30.0
    calibration_scale_warn_ppm: float = 300.0
    # interferent lines left unassigned in their typical regions
    interferent_lines_warn: float = 5.0
    negative_lines_warn: float = 5.0
    # rotational temperature range for a room-temperature cell (K)
    temperature_min_K: float = 273.0
    temperature_max_K: float = 323.0
    # isotopologue abundance ratio against natural, relative
    abundance_ratio_tolerance: float = 0.15
    # baseline away from zero where nothing absorbs (common practice: |A| > 0.05)
    baseline_offset_warn: float = 0.05
    baseline_tilt_warn_per_1000_cm1: float = 0.05
    fringe_amplitude_warn: float = 0.003  # absorbance

    @classmethod
    def from_mapping(cls, values: dict[str, Any] | None, source: str | None = None) -> CheckThresholds:
        """Defaults overridden by a mapping (the [checks] table). Only these thresholds may be
        set there; an unknown name, a value that is not a finite number >= 0, or a pass limit
        on the wrong side of its warn limit raises ConfigError naming the key."""
        known = [f.name for f in fields(cls)]
        chosen: dict[str, float] = {}
        for key, value in (values or {}).items():
            if key not in known:
                raise ConfigError(source, f"checks.{key}", f"not a check threshold (known: {', '.join(known)})")
            if isinstance(value, bool) or not isinstance(value, (int, float)) or not math.isfinite(value):
                raise ConfigError(source, f"checks.{key}", f"must be a finite number, got {value!r}")
            if value < 0:
                raise ConfigError(source, f"checks.{key}", f"must not be negative, got {value!r}")
            chosen[key] = float(value)
        thresholds = cls(**chosen)
        for better, worse, higher_is_better in _THRESHOLD_PAIRS:
            good, fair = getattr(thresholds, better), getattr(thresholds, worse)
            if (good < fair) if higher_is_better else (good > fair):
                side = "at least" if higher_is_better else "at most"
                raise ConfigError(source, f"checks.{better}", f"must be {side} checks.{worse} ({fair:g}), got {good:g}")
        return thresholds


# (pass limit, warn limit, higher is better): a pass must be at least as strict as its warn
_THRESHOLD_PAIRS = (
    ("snr_pass", "snr_warn", True),
    ("band_lines_pass", "band_lines_warn", True),
    ("rms_width_pass", "rms_width_warn", False),
    ("calibration_pass_cm1", "calibration_warn_cm1", False),
    ("calibration_scale_pass_ppm", "calibration_scale_warn_ppm", False),
    ("temperature_min_K", "temperature_max_K", False),
)
