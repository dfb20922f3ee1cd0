"""One worker process: `python -m processing.station.worker IN_FD OUT_FD FUNCTION MEMORY_MB`.

Receives (job_id, path, ProcessSettings, staging folder, whether the result object is wanted)
over IN_FD and answers ("done", job_id, (the pickled RunResult or None, its JSON text, its
lines.csv text, its summary body, its digest, the staged report folder)) or ("failed", job_id,
reason) over OUT_FD (multiprocessing's length-prefixed pickles). The result is encoded here,
once, and a processed run's report files are written here into the station's staging folder:
the station stores the JSON in the ledger, gives summary.md its title and moves the folder in
place, and spends no time of its own on the rest (it is one process for all workers). Runs under
an address-space limit so a memory blow-up is a MemoryError here, not a starved machine. Exits
when the station closes the pipe or disappears. Standard output is sent to standard error, so
nothing the analysis prints can corrupt the pipe.
"""
from __future__ import annotations

import importlib
import io
import os
import pickle
import signal
import sys
import threading
import time
from collections.abc import Callable
from multiprocessing.connection import Connection
from typing import Any


def resolve_function(spec: str) -> Callable[..., Any]:
    """'module:function' -> the callable (raises ImportError/AttributeError if absent)."""
    module_name, _, attribute = spec.partition(":")
    function = getattr(importlib.import_module(module_name), attribute)
    if not callable(function):
        raise TypeError(f"{spec} is not callable")
    return function


# Imported before the first file so its latency carries no import time; absent ones are skipped.
WARM_MODULES = (
    "processing.pipeline",
    "processing.baseline",
    "processing.lines",
    "processing.assign",
    "processing.fit",
    "processing.checks",
    "processing.species",
)


# polars (the fast-text extra) reserves ~370 MB of address space when imported; under a
# tighter worker limit (an address-space limit) it would leave too little for the analysis.
POLARS_MIN_LIMIT_MB = 2048


def warm_up(memory_limit_mb: int = 0) -> None:
    """Import the analysis and parse the shipped library before the first file. A problem here
    is raised: the worker reports itself broken and the station says why. With the fast-text
    extra and room under the memory limit, polars is imported too and reads every delimited
    file from then on; under a tighter limit it is never used in this worker."""
    from processing.readers import delimited

    if memory_limit_mb == 0 or memory_limit_mb >= POLARS_MIN_LIMIT_MB:
        # one analysis per worker, one worker per core: polars' own threads would only contend
        os.environ.setdefault("POLARS_MAX_THREADS", "1")
        delimited.polars_module()
    else:
        delimited.forgo_polars()
    for name in WARM_MODULES:
        importlib.import_module(name)
    from processing.readers.registry import reader_modules
    from processing.species import load_library

    reader_modules()
    load_library()  # the shipped library file, parsed once per worker
    _warm_analysis()


def _warm_analysis() -> None:
    """Analyse a small simulated HCl spectrum once, read back from CSV text, and throw the
    result away: the first calls into numpy, scipy, polars and the library's predictions cost
    ~70 ms, which the station's first real file would otherwise pay (115 ms against 46 ms for
    the next, measured on a 64k-point export)."""
    from processing.instrument import Instrument
    from processing.pipeline import analyse, result_from_analysis
    from processing.readers import parse_bytes
    from processing.readers.delimited import write_csv
    from processing.result_text import lines_csv, summary_body
    from processing.results import to_json
    from processing.run_digest import digest_of
    from processing.simulate import SampleGas, SimulationSettings, simulate

    instrument = Instrument(resolution_cm1=0.1, first_cm1=2600.0, last_cm1=3100.0, snr=300.0, seed=1)
    spectrum = simulate(SimulationSettings(gases=(SampleGas("HCl", 0.01),), instrument=instrument)).spectrum
    text = io.BytesIO()
    write_csv(text, spectrum)
    result = result_from_analysis("warm-up.csv", analyse(parse_bytes(text.getvalue(), "warm-up.csv")))
    to_json(result), lines_csv(result), summary_body(result), digest_of(result)


def _exit_when_orphaned(parent: int) -> None:
    """The station was killed: do not linger (a hung analysis would otherwise live on)."""
    while os.getppid() == parent:
        time.sleep(0.5)
    os._exit(1)


def serve(inbox: Connection, outbox: Connection, function_spec: str, memory_limit_mb: int) -> None:
    """The worker loop."""
    from processing.result_text import lines_csv, summary_body
    from processing.results import RunResult, to_json
    from processing.run_digest import digest_of
    from processing.station.reports import stage_reports

    try:
        function = resolve_function(function_spec)
        warm_up(memory_limit_mb)
    except Exception as error:  # said to the station, which keeps the files queued
        outbox.send(("broken", None, f"{type(error).__name__}: {error}"))
        return
    if memory_limit_mb > 0:
        import resource

        limit = memory_limit_mb * 1024 * 1024
        resource.setrlimit(resource.RLIMIT_AS, (limit, limit))
    outbox.send(("ready", None, None))
    while True:
        try:
            message = inbox.recv()
        except (EOFError, OSError):
            return
        if message is None:
            return
        job_id, path, settings, staging, want_result = message
        try:
            result = function(path, settings)
            if not isinstance(result, RunResult):
                raise TypeError(f"{function_spec} returned {type(result).__name__}, not a RunResult")
            # the station records and reports from the texts and the digest; the result
            # object goes pickled (a bytes blob to the station's receiving thread); a processed
            # run's report files are written here (summary.md under a title to be filled in),
            # for the station to move in place
            text, lines_text, body = to_json(result), lines_csv(result), summary_body(result)
            staged = (stage_reports(staging, job_id, text, lines_text, body, result.file)
                      if staging is not None and result.status == "processed" else None)
            data = (pickle.dumps(result, protocol=pickle.HIGHEST_PROTOCOL) if want_result else None, text, lines_text,
                    body, digest_of(result), staged)
        except MemoryError:
            outbox.send(("failed", job_id, f"out of memory (worker limit {memory_limit_mb} MB)"))
            return  # a fresh worker replaces this one
        except Exception as error:  # becomes the run's failure reason; the worker goes on
            outbox.send(("failed", job_id, f"analysis crashed: {type(error).__name__}: {error}"))
            continue
        outbox.send(("done", job_id, data))


def main(argv: list[str]) -> int:
    in_fd, out_fd, function_spec, memory_limit_mb = int(argv[0]), int(argv[1]), argv[2], int(argv[3])
    signal.signal(signal.SIGINT, signal.SIG_IGN)  # Ctrl-C is the station's to handle
    sys.stdout = sys.stderr
    threading.Thread(target=_exit_when_orphaned, args=(os.getppid(),), daemon=True).start()
    inbox = Connection(in_fd, writable=False)
    outbox = Connection(out_fd, readable=False)
    try:
        serve(inbox, outbox, function_spec, memory_limit_mb)
    except (BrokenPipeError, EOFError):
        return 0
    return 0


if __name__ == "__main__":
    for name in ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS"):
        os.environ.setdefault(name, "1")  # set before numpy loads: one thread per worker
    sys.exit(main(sys.argv[1:]))
