"""Strict JSON for everything bandwatch writes: no NaN or Infinity, ever.

Python's `json` writes `NaN` and `Infinity`, which are not JSON (RFC 8259) and break other
readers. `to_plain` turns a result into plain JSON data: numpy scalars and arrays become
numbers and lists, tuples and sets lists, and a non-finite float becomes null; `dumps` then
writes it with `allow_nan=False`. Where a value was replaced the caller can say why:
`dumps_result` adds `non_finite` [{"at": "lines[3].snr", "was": "inf"}] to a run's object.
"""
from __future__ import annotations

import json
import math
from typing import Any


def _was(value: float) -> str:
    if math.isnan(value):
        return "nan"
    return "inf" if value > 0 else "-inf"


def to_plain(value: Any, replaced: list[dict[str, str]] | None = None, at: str = "") -> Any:
    """`value` as plain JSON data; each non-finite float becomes None (noted in `replaced`)."""
    if isinstance(value, bool) or value is None or isinstance(value, (str, int)):
        return value
    if isinstance(value, float):
        if math.isfinite(value):
            return value
        if replaced is not None:
            replaced.append({"at": at or "(top)", "was": _was(value)})
        return None
    if isinstance(value, dict):
        return {str(key): to_plain(item, replaced, f"{at}.{key}" if at else str(key)) for key, item in value.items()}
    if isinstance(value, (list, tuple, set, frozenset)):
        items = sorted(value, key=repr) if isinstance(value, (set, frozenset)) else value
        return [to_plain(item, replaced, f"{at}[{index}]") for index, item in enumerate(items)]
    if hasattr(value, "tolist"):  # numpy arrays and scalars
        return to_plain(value.tolist(), replaced, at)
    if hasattr(value, "item"):
        return to_plain(value.item(), replaced, at)
    return str(value)


def dumps(value: Any, **options: Any) -> str:
    """Strict JSON text of `value` (non-finite floats as null)."""
    return json.dumps(to_plain(value), allow_nan=False, **options)


def dumps_flat(value: dict[str, Any]) -> str:
    """Strict JSON text of a flat object whose values are only str, int, bool, None or lists
    of those (a ledger listing's row): the same text as `dumps`, without walking the value
    first (a listing of 100,000 runs writes 100,000 of them)."""
    return json.dumps(value, allow_nan=False)


def dumps_result(result: dict[str, Any], **options: Any) -> str:
    """A run's JSON object; values that were NaN or infinite are null and listed in
    `non_finite` (where, and what they were), so a reader knows why they are missing."""
    try:
        # plain data with finite floats only (the usual run): json's C encoder alone gives the
        # same text as the walk below, ~5x sooner; anything else (numpy integers, sets, a NaN)
        # raises here and takes the walk
        return json.dumps(result, allow_nan=False, **options)
    except (TypeError, ValueError):
        pass
    replaced: list[dict[str, str]] = []
    plain = to_plain(result, replaced)
    if replaced:
        known = list(plain.get("non_finite") or [])
        plain["non_finite"] = known + [item for item in replaced if item not in known]
    return json.dumps(plain, allow_nan=False, **options)
