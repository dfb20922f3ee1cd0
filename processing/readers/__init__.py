"""Spectrum file readers and their writers, one module per format, one registry."""
from processing.readers.registry import DEFAULT_MAX_BYTES, Incomplete, incomplete, incomplete_reason, load_bytes, parse_bytes, read_any

__all__ = ["DEFAULT_MAX_BYTES", "Incomplete", "incomplete", "incomplete_reason", "load_bytes", "parse_bytes", "read_any"]
