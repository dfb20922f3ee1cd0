"""Whether this process reads text with polars (the `fast-text` extra), asked without importing
the delimited reader: it decides (see its rent-before-buy rule), the other readers follow."""
from __future__ import annotations

import sys
from types import ModuleType

_DELIMITED_READER = "processing.readers.delimited"


def polars_in_use() -> ModuleType | None:
    """polars, when this process's delimited reader reads with it; else None (never imported
    here: a one-shot run of a JCAMP-DX file does not load the delimited reader or polars)."""
    delimited = sys.modules.get(_DELIMITED_READER)
    if delimited is None or not delimited.polars_in_use():
        return None
    return sys.modules["polars"]
