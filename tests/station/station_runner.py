"""One station on a ledger server, as its own process, for the multi-station tests:

    python station_runner.py EXPORT DATA URL INSTRUMENT

The real station and `--plain` output (`run_plain`), with the bookkeeping-only processing
function `station_hooks:quick` so that hundreds of files go through in seconds. SIGTERM stops it.
"""
from __future__ import annotations

import sys
from pathlib import Path

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))

from processing.station.config import StationConfig  # noqa: E402
from tui.commands.watch import run_plain  # noqa: E402


def main(argv: list[str]) -> int:
    export, data, url, instrument = argv[1:5]
    config = StationConfig(
        export_folder=Path(export), data_folder=Path(data), ledger_url=url, instrument=instrument,
        settle_seconds=0.1, workers=1, rescan_seconds=1.0, process_function="station_hooks:quick",
    )
    return run_plain(config, once=False)


if __name__ == "__main__":
    sys.exit(main(sys.argv))
