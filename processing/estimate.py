"""`Estimate`: a fitted or derived quantity with its standard error and unit."""
from __future__ import annotations

from dataclasses import dataclass
from typing import Any


@dataclass(frozen=True)
class Estimate:
    """value ± sigma in `unit`; `sigma is None` when the data do not determine it."""

    value: float
    sigma: float | None
    unit: str = "cm-1"

    def to_dict(self) -> dict[str, Any]:
        """The public JSON form {"value", "sigma"} (unit added when it is not cm-1)."""
        out: dict[str, Any] = {"value": float(self.value), "sigma": None if self.sigma is None else float(self.sigma)}
        if self.unit != "cm-1":
            out["unit"] = self.unit
        return out

    def format(self, digits_of_sigma: int = 2) -> str:
        """Text like ``10.4398(12)``: value rounded to the sigma's leading digits."""
        return format_value_sigma(self.value, self.sigma, digits_of_sigma)


def format_value_sigma(value: float, sigma: float | None, digits_of_sigma: int = 2) -> str:
    """Concise value(sigma) notation, e.g. 2885.9774(31); plain value when sigma is unknown."""
    import math

    if sigma is None or not math.isfinite(sigma) or sigma <= 0:
        return f"{value:.6g}"
    exponent = math.floor(math.log10(sigma)) - (digits_of_sigma - 1)
    decimals = max(0, -exponent)
    scaled_sigma = round(sigma / 10.0**exponent)
    if decimals == 0:
        return f"{round(value / 10.0**exponent) * 10.0**exponent:.0f}({scaled_sigma * 10.0**exponent:.0f})"
    return f"{value:.{decimals}f}({scaled_sigma})"
