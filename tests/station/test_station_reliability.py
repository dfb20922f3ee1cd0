"""The station end to end: exactly once, nothing lost, nothing written to the export folder."""
from __future__ import annotations

import hashlib
import json
import signal
import stat
import subprocess
import sys
import textwrap
import time
from pathlib import Path

import pytest
from station_files import HERE, spectrum_csv, write_file

from processing.station import ledger
from processing.station.events import (
    ClaimResumed,
    FileUnchanged,
    FileVanished,
    RunFailed,
    RunProcessed,
)

ROOT = HERE.parents[1]


def _runs(data: Path) -> list[ledger.RunRecord]:
    conn = ledger.open_ledger(data)
    try:
        return list(reversed(ledger.list_runs(conn)))  # oldest first
    finally:
        conn.close()


def _listing(folder: Path) -> list[tuple[str, int, int, int]]:
    return sorted(
        (str(p.relative_to(folder)), p.stat().st_size, p.stat().st_mtime_ns, stat.S_IMODE(p.stat().st_mode))
        for p in folder.rglob("*")
    )


def test_file_written_slowly_in_chunks_is_processed_once_and_complete(make_station, folders) -> None:
    export, data = folders
    station, events = make_station(settle_seconds=0.3)
    station.start()
    text = spectrum_csv(1000)
    path = export / "slow.csv"
    with open(path, "w", encoding="utf-8") as handle:
        for start in range(0, len(text), len(text) // 6 + 1):
            handle.write(text[start:start + len(text) // 6 + 1])
            handle.flush()
            time.sleep(0.1)  # shorter than the settle time: the station must keep waiting
    assert station.wait_idle(20)
    [run] = _runs(data)
    assert run.status == "processed" and run.version == 1
    assert run.sha256 == hashlib.sha256(text.encode()).hexdigest()
    assert run.result.spectrum.points == 1000  # all rows, not a prefix
    assert sum(isinstance(e, RunProcessed) for e in events) == 1


def test_burst_of_200_files_is_processed_exactly_once_each(make_station, folders) -> None:
    export, data = folders
    station, events = make_station(process_function="station_hooks:quick", workers=2)
    station.start()
    names = [f"burst{index:03d}.csv" for index in range(200)]
    for name in names:
        write_file(export / name, f"wavenumber,absorbance\n2900,{name}\n")
    assert station.wait_idle(30)
    runs = _runs(data)
    assert sorted(Path(r.path).name for r in runs) == names  # each once, none missing
    assert all(r.version == 1 and r.status == "processed" for r in runs)
    assert sum(isinstance(e, RunProcessed) for e in events) == 200
    conn = ledger.open_ledger(data)
    assert ledger.list_claims(conn) == []


def test_read_only_export_folder_is_left_exactly_as_it_was(make_station, folders) -> None:
    export, data = folders
    write_file(export / "a.csv", spectrum_csv(300))
    (export / "sub").mkdir()
    write_file(export / "sub" / "b.csv", spectrum_csv(300, centre_cm1=2910))
    for path in (export / "a.csv", export / "sub" / "b.csv"):
        path.chmod(0o444)
    (export / "sub").chmod(0o555)
    export.chmod(0o555)  # a-w
    try:
        before = _listing(export)
        station, _ = make_station(recursive=True)
        station.start()
        assert station.wait_idle(20)
        station.stop()
        after = _listing(export)
    finally:
        export.chmod(0o755)
        (export / "sub").chmod(0o755)
    assert after == before  # nothing added, changed or re-permissioned
    runs = _runs(data)
    assert sorted(Path(r.path).name for r in runs) == ["a.csv", "b.csv"]
    assert all(r.status == "processed" for r in runs)
    reports = sorted(p.name for p in (data / "reports").iterdir())
    assert len(reports) == 2 and all((data / "reports" / r / "result.json").exists() for r in reports)


def test_corrupt_file_is_unreadable_with_its_reason_and_the_station_goes_on(make_station, folders) -> None:
    export, data = folders
    write_file(export / "corrupt.csv", "wavenumber,absorbance\n\x00\x01\x02garbage\n", mtime=1_000_000)
    write_file(export / "empty.csv", "", mtime=1_000_001)
    write_file(export / "good.csv", spectrum_csv(300), mtime=1_000_002)
    station, events = make_station()
    station.start()
    assert station.wait_idle(20)
    runs = {Path(r.path).name: r for r in _runs(data)}
    assert runs["corrupt.csv"].status == "unreadable"
    assert runs["corrupt.csv"].error.startswith(str(export / "corrupt.csv"))
    assert "binary" in runs["corrupt.csv"].error
    assert runs["empty.csv"].status == "unreadable" and "empty" in runs["empty.csv"].error
    assert runs["good.csv"].status == "processed"
    # catch-up goes oldest first (by modification time)
    assert [Path(r.path).name for r in _runs(data)] == ["corrupt.csv", "empty.csv", "good.csv"]


def test_file_deleted_before_it_settles_is_not_recorded(make_station, folders) -> None:
    # Decision: a file deleted before it settles never became a run; the station says
    # "vanished" in its events and records nothing.
    export, data = folders
    station, events = make_station(settle_seconds=0.5)
    station.start()
    path = write_file(export / "brief.csv", spectrum_csv(100))
    time.sleep(0.15)
    path.unlink()
    write_file(export / "stays.csv", spectrum_csv(100))
    assert station.wait_idle(20)
    assert [Path(r.path).name for r in _runs(data)] == ["stays.csv"]
    assert [Path(e.path).name for e in events if isinstance(e, FileVanished)] == ["brief.csv"]


def test_rewritten_file_is_a_new_version_and_an_identical_rewrite_is_not(make_station, folders) -> None:
    export, data = folders
    station, events = make_station()
    station.start()
    path = write_file(export / "a.csv", spectrum_csv(200))
    assert station.wait_idle(20)
    write_file(path, spectrum_csv(220))  # new content
    assert station.wait_idle(20)
    write_file(path, spectrum_csv(220))  # same content again (new time stamp)
    assert station.wait_idle(20)
    runs = _runs(data)
    assert [(r.version, r.result.spectrum.points) for r in runs] == [(1, 200), (2, 220)]
    assert len({r.path for r in runs}) == 1
    assert any(isinstance(e, FileUnchanged) for e in events)


def test_catch_up_processes_only_what_the_ledger_has_not_seen(make_station, folders) -> None:
    export, data = folders
    write_file(export / "c.csv", spectrum_csv(120), mtime=1_000_000)
    write_file(export / "a.csv", spectrum_csv(140), mtime=1_000_100)
    write_file(export / "b.csv", spectrum_csv(160), mtime=1_000_200)
    first, _ = make_station()
    first.start()
    assert first.wait_idle(20)
    first.stop()
    assert [Path(r.path).name for r in _runs(data)] == ["c.csv", "a.csv", "b.csv"]  # oldest first
    # while stopped: one file changes, one arrives, one is rewritten as it was, one stays
    write_file(export / "a.csv", spectrum_csv(150), mtime=1_000_300)
    write_file(export / "d.csv", spectrum_csv(170), mtime=1_000_400)
    write_file(export / "b.csv", spectrum_csv(160), mtime=1_000_500)
    second, events = make_station()
    second.start()
    assert second.wait_idle(20)
    runs = _runs(data)
    assert [(Path(r.path).name, r.version) for r in runs] == [
        ("c.csv", 1), ("a.csv", 1), ("b.csv", 1), ("a.csv", 2), ("d.csv", 1),
    ]
    # b was read again (new time stamp) but not redone; c was not even read (same size and time)
    assert [Path(e.path).name for e in events if isinstance(e, FileUnchanged)] == ["b.csv"]


def test_crash_hang_and_memory_blow_up_become_failed_runs(make_station, folders) -> None:
    export, data = folders
    for index, name in enumerate(("crash.csv", "hang.csv", "hog.csv", "good.csv")):
        write_file(export / name, spectrum_csv(150), mtime=1_000_000 + index)
    station, events = make_station(
        process_function="station_hooks:misbehave", workers=2, timeout_seconds=1.5, memory_limit_mb=768
    )
    station.start()
    assert station.wait_idle(20)
    runs = {Path(r.path).name: r for r in _runs(data)}
    assert (runs["crash.csv"].status, runs["crash.csv"].error) == ("failed", "worker process exited with code 3")
    assert (runs["hang.csv"].status, runs["hang.csv"].error) == ("failed", "timed out after 1.5 s")
    assert runs["hog.csv"].status == "failed" and runs["hog.csv"].error.startswith("out of memory")
    assert runs["good.csv"].status == "processed"
    assert sorted(Path(e.path).name for e in events if isinstance(e, RunFailed)) == ["crash.csv", "hang.csv", "hog.csv"]
    # each run carries its file's sha256 (a failed one hashed by the station, a result by its
    # worker), so a restart knows the content and skips it unchanged
    for name, run in runs.items():
        assert run.sha256 == hashlib.sha256((export / name).read_bytes()).hexdigest(), name
    # the station still takes new files afterwards
    write_file(export / "later.csv", spectrum_csv(150))
    assert station.wait_idle(20)
    assert _runs(data)[-1].status == "processed"


def test_incomplete_jcamp_is_recorded_unreadable_after_the_longest_wait(make_station, folders) -> None:
    export, data = folders
    station, _ = make_station(max_wait_seconds=0.6)
    station.start()
    write_file(export / "cut.jdx", "##TITLE=cut\n##JCAMP-DX=4.24\n##XYDATA=(X++(Y..Y))\n2900 1 2 3\n")
    assert station.wait_idle(20)
    [run] = _runs(data)
    assert run.status == "unreadable" and "no ##END=" in run.error and run.error.startswith(str(export))


def test_a_second_station_on_the_same_data_folder_is_refused(make_station) -> None:
    from processing.errors import ConfigError

    first, _ = make_station()
    first.start()
    second, _ = make_station()
    with pytest.raises(ConfigError, match="another station is already running"):
        second.start()


STATION_SCRIPT = textwrap.dedent(
    """
    import sys, time
    sys.path.insert(0, {hooks!r})
    from pathlib import Path
    from processing.station.config import StationConfig
    from processing.station.events import plain_line
    from processing.station.station import Station

    config = StationConfig(export_folder=Path({export!r}), data_folder=Path({data!r}),
                           settle_seconds=0.05, workers=1, process_function="station_hooks:slow")
    station = Station(config, on_event=lambda e: print(plain_line(e), flush=True))
    station.start()
    time.sleep(60)
    """
)


def test_station_killed_mid_file_loses_nothing_and_doubles_nothing(make_station, folders) -> None:
    export, data = folders
    names = [f"k{index}.csv" for index in range(6)]
    for index, name in enumerate(names):
        write_file(export / name, spectrum_csv(150), mtime=1_000_000 + index)
    script = STATION_SCRIPT.format(hooks=str(HERE), export=str(export), data=str(data))
    process = subprocess.Popen([sys.executable, "-c", script], cwd=ROOT, stdout=subprocess.PIPE, text=True)
    try:
        deadline = time.monotonic() + 20
        claims: list[ledger.Claim] = []
        while time.monotonic() < deadline:
            if (data / ledger.LEDGER_FILE).exists():
                conn = ledger.open_ledger(data)
                done, claims = len(ledger.list_runs(conn)), ledger.list_claims(conn)
                conn.close()
                if done >= 2 and claims:
                    break
            time.sleep(0.02)
        else:
            pytest.fail("the station did not get going")
    finally:
        process.send_signal(signal.SIGKILL)
        process.wait(timeout=5)
        process.stdout.close()
    done_before = len(_runs(data))
    assert 2 <= done_before < 6 and claims  # killed with a file in progress
    station, events = make_station()
    station.start()
    assert station.wait_idle(20)
    runs = _runs(data)
    assert sorted(Path(r.path).name for r in runs) == names  # nothing lost, nothing twice
    assert all(r.version == 1 for r in runs)
    conn = ledger.open_ledger(data)
    assert ledger.list_claims(conn) == []
    assert [Path(e.path).name for e in events if isinstance(e, ClaimResumed)] == [Path(c.path).name for c in claims]


def test_ledger_list_reads_while_the_station_writes(make_station, folders) -> None:
    export, data = folders
    station, _ = make_station(process_function="station_hooks:slow", workers=2)
    station.start()
    for index in range(8):
        write_file(export / f"w{index}.csv", spectrum_csv(100))
    seen_counts = []
    deadline = time.monotonic() + 20
    while time.monotonic() < deadline:
        listing = subprocess.run(
            [sys.executable, "-m", "tui", "ledger", "list", "--json", "--data", str(data)],
            cwd=ROOT, capture_output=True, text=True, timeout=20,
        )
        if listing.returncode == 0:
            rows = [json.loads(line) for line in listing.stdout.splitlines()]
            seen_counts.append(len(rows))
            if len(rows) == 8:
                break
        else:
            assert "no ledger here yet" in listing.stderr  # only before the first write
        time.sleep(0.05)
    assert seen_counts and seen_counts[-1] == 8
    assert any(0 < count < 8 for count in seen_counts)  # read while the station was writing
    assert seen_counts == sorted(seen_counts)
