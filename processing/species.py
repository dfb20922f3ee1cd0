"""Placeholder: the isotopologue library (filled by the physics work)."""
