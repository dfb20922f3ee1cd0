"""`bandwatch demo`: a simulated instrument fills a temporary export folder; the interface watches it."""
from __future__ import annotations

import argparse

HELP = "watch a simulated instrument write the sample runs into a temporary folder"


def add_arguments(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("--interval", type=float, default=4.0, help="seconds between runs")


def run(args: argparse.Namespace) -> int:
    print("bandwatch: demo is being built")
    return 2
