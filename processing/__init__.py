"""Computation and file I/O for bandwatch: no user interface imports here."""
