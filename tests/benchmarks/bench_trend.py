"""Trend of one fitted quantity over the ledger (plain script: `python tests/benchmarks/bench_trend.py [RUNS]`).

A ledger of RUNS (200) processed runs of the demo's HCl cell, each with its own H35Cl 1-0
origin (a drift over the day), and a tenth of them also carrying a 2-0 overtone band of the
same isotopologue (it must not join the 1-0 trend). The trend of the H35Cl 1-0 band origin is
read two ways, each timed as the median of REPEATS:
  quantities  `ledger.trend`: one query on the quantities table (this version)
  re-read     the way the trend screen read it before: every run's whole result JSON parsed to
              find the value, then each point's run read again (one query and one JSON parse per
              point) to check its band by float equality
Both must give the same points. Target: the one query under 20 ms.
"""
from __future__ import annotations

import json
import statistics
import sqlite3
import sys
import tempfile
import time
from collections.abc import Callable
from dataclasses import replace
from pathlib import Path

from processing.estimate import Estimate
from processing.pipeline import process_file
from processing.results import to_json
from processing.station import ledger

ROOT = Path(__file__).resolve().parents[2]
SAMPLE = ROOT / "sample_runs" / "0905_hcl_cell.jdx"
REPEATS = 15
TARGET_MS = 20.0


def build(data: Path, runs: int) -> None:
    base = process_file(SAMPLE)
    conn = ledger.open_ledger(data)
    try:
        for index in range(runs):
            bands = list(base.bands)
            main = bands[0]
            bands[0] = replace(main, origin=Estimate(main.origin.value + 1e-4 * index, main.origin.sigma))
            if index % 10 == 0:  # an overtone run: the same isotopologue, another band
                bands.append(replace(main, v_upper=2, origin=Estimate(5667.98 + 1e-4 * index, main.origin.sigma)))
            result = replace(base, file=f"/export/run{index:03d}.jdx", bands=tuple(bands))
            stamp = f"2026-03-05T{8 + index // 60:02d}:{index % 60:02d}:00.000Z"
            ledger.record_run(conn, result.file, f"{index:064x}", "processed", result=result, result_json=to_json(result),
                              received_at=stamp, processed_at=stamp)
    finally:
        conn.close()


def by_re_reading(conn: sqlite3.Connection, isotopologue: str, quantity: str, band: str) -> list[tuple[str, int, float, float | None]]:
    """The previous way: parse every run's JSON for the value, then re-read each point's run
    and find its band again by float equality."""
    rows = conn.execute(
        "SELECT run_id, processed_at, result_json FROM runs AS r WHERE status = 'processed'"
        " AND result_json IS NOT NULL AND version = (SELECT MAX(version) FROM runs WHERE path = r.path)"
        " ORDER BY processed_at, run_id"
    ).fetchall()
    points = []
    for run_id, processed_at, text in rows:
        for section in ("bands", "constants"):
            for item in json.loads(text).get(section) or ():
                if item.get("isotopologue") == isotopologue and isinstance(item.get(quantity), dict):
                    points.append((processed_at, int(run_id), float(item[quantity]["value"]), item[quantity].get("sigma")))
    kept = []
    for point in points:
        row = conn.execute("SELECT result_json FROM runs WHERE run_id = ?", (point[1],)).fetchone()
        conn.execute("SELECT * FROM decisions WHERE run_id = ? ORDER BY event_id", (point[1],)).fetchall()
        for item in json.loads(row[0]).get("bands") or ():
            if (item.get("isotopologue"), f"{item.get('v_upper')}-{item.get('v_lower')}") == (isotopologue, band) \
                    and item.get(quantity, {}).get("value") == point[2]:
                kept.append(point)
                break
    return kept


def median_ms(function: Callable[[], object]) -> float:
    times = []
    for _ in range(REPEATS):
        started = time.perf_counter()
        function()
        times.append((time.perf_counter() - started) * 1e3)
    return statistics.median(times)


def main(runs: int) -> int:
    with tempfile.TemporaryDirectory(prefix="bandwatch-trend-") as folder:
        data = Path(folder)
        build(data, runs)
        conn = ledger.open_ledger(data, read_only=True)
        try:
            new = [(p.processed_at, p.run_id, p.value, p.sigma) for p in ledger.trend(conn, "H35Cl", "origin", "1-0")]
            old = by_re_reading(conn, "H35Cl", "origin", "1-0")
            assert new == old and len(new) == runs, (len(new), len(old))
            query = median_ms(lambda: ledger.trend(conn, "H35Cl", "origin", "1-0"))
            reread = median_ms(lambda: by_re_reading(conn, "H35Cl", "origin", "1-0"))
        finally:
            conn.close()
    print(f"trend of the H35Cl 1-0 origin over {runs} runs ({runs // 10} with an overtone band), median of {REPEATS}:")
    print(f"  one query (quantities table)      {query:8.2f} ms   target < {TARGET_MS:g} ms: {'met' if query < TARGET_MS else 'NOT met'}")
    print(f"  per-run JSON re-read (before)     {reread:8.2f} ms")
    print(f"  ratio re-read / query             {reread / query:8.1f} x")
    return 0 if query < TARGET_MS else 1


if __name__ == "__main__":
    sys.exit(main(int(sys.argv[1]) if len(sys.argv) > 1 else 200))
