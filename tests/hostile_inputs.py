"""Hostile inputs shared by tests in several folders (tests/, tests/station/, tests/tui/)."""
from __future__ import annotations

# 180 bytes: NPOINTS 99,999,999 and one DIF/DUP line whose DUP count (s9999999) repeats the
# first value 99,999,999 times. Unbounded, it took 39 s and 7.97 GB to be refused by
# `bandwatch process`, and 5.45 GB in the interface.
BOMB = (
    b"##TITLE=bomb\n##JCAMP-DX=4.24\n##DATA TYPE=INFRARED SPECTRUM\n##XUNITS=1/CM\n"
    b"##YUNITS=ABSORBANCE\n##FIRSTX=4000\n##LASTX=400\n##NPOINTS=99999999\n"
    b"##XYDATA=(X++(Y..Y))\n4000@s9999999\n##END=\n"
)
