"""`bandwatch simulate`: placeholder until the simulator lands."""
from __future__ import annotations

import argparse

HELP = "write a synthetic spectrum (see processing/simulate.py)"


def add_arguments(parser: argparse.ArgumentParser) -> None:
    pass


def run(args: argparse.Namespace) -> int:
    print("bandwatch: simulate is not available yet")
    return 2
