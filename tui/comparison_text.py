"""How a fitted quantity reads beside its reference: the value its Δ/σ is computed against,
for the constants pane and the `bandwatch process` tables (plain functions on the result JSON;
results written before references were computed for the model fitted are read too)."""
from __future__ import annotations

from typing import Any

from processing.model_reference import compared_reference, compared_z


def _number_of(item: Any, *names: str) -> float | None:
    for name in names:
        value = item.get(name) if isinstance(item, dict) else None
        if isinstance(value, (int, float)) and not isinstance(value, bool):
            return float(value)
    return None


def reference_value(reference: Any, key: str) -> float | None:
    """The reference `key`'s Δ/σ is computed against, from a `reference` object (a number,
    {"value": ...} or the analysis' comparison object)."""
    if not isinstance(reference, dict):
        return None
    item = reference.get(key)
    if isinstance(item, dict):
        return compared_reference(item)
    return float(item) if isinstance(item, (int, float)) else None


def comparison_z(reference: Any, key: str) -> float | None:
    """Δ/σ against the value `reference_value` returns; None when not given."""
    item = reference.get(key) if isinstance(reference, dict) else None
    return compared_z(item) if isinstance(item, dict) else None


def comparison_text(iso: str, key: str, estimate: Any, reference: Any, name: str | None = None) -> str:
    """One sentence on a fitted quantity: its value, the reference it is compared with (the
    same model on the library's lines), Δ/σ, the handbook value and the model."""
    name = name or key
    value = estimate.get("value") if isinstance(estimate, dict) else None
    sigma = estimate.get("sigma") if isinstance(estimate, dict) else None
    parts = [f"{iso} {name}: fitted {value:.8g}" if isinstance(value, (int, float)) else f"{iso} {name}"]
    if isinstance(sigma, (int, float)):
        parts[0] += f" ± {sigma:.2g}"
    item = reference.get(key) if isinstance(reference, dict) else None
    compared = reference_value(reference, key)
    if compared is not None:
        text = f"reference {compared:.8g}"
        reference_sigma = _number_of(item, "reference_sigma")
        if reference_sigma:
            text += f" ± {reference_sigma:.2g}"
        z = comparison_z(reference, key)
        if z is not None:
            text += f": {z:+.1f} σ"
        parts.append(text)
    if isinstance(item, dict):
        handbook = _number_of(item, "handbook")
        if handbook is None and _number_of(item, "effective_reference") is not None:
            handbook = _number_of(item, "reference")
        source = f" ({item['source']})" if item.get("source") else ""
        if handbook is not None:
            parts.append(f"handbook {handbook:.8g}{source}")
        model = item.get("model") or item.get("effective_rule")
        if model:
            parts.append(f"model: {model}")
    return "; ".join(parts)
