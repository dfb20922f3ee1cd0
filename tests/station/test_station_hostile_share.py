"""The export share as an adversary (or a bad day) leaves it: links onto the ledger, FIFOs,
devices, links out of the folder. Only regular files inside the export folder are read; the
ledger is never opened except by SQLite; nothing stops the station."""
from __future__ import annotations

import os
import signal
import subprocess
import sys
import time
from pathlib import Path

import pytest
from station_files import HERE, spectrum_csv, write_file

from processing.station import ledger
from processing.station.events import RunProcessed, StationProblem

ROOT = HERE.parents[1]


def _runs(data: Path) -> list[ledger.RunRecord]:
    conn = ledger.open_ledger(data)
    try:
        return list(reversed(ledger.list_runs(conn)))
    finally:
        conn.close()


def _wait_for(predicate, timeout: float) -> bool:  # type: ignore[no-untyped-def]
    deadline = time.monotonic() + timeout
    while time.monotonic() < deadline:
        if predicate():
            return True
        time.sleep(0.05)
    return predicate()


def _bandwatch(*args: str, env: dict[str, str]) -> subprocess.CompletedProcess[str]:
    return subprocess.run([sys.executable, "-m", "tui", *args], capture_output=True, text=True, env=env,
                          cwd=ROOT, timeout=60)


def test_link_onto_the_ledger_then_sigkill_loses_no_recorded_run(tmp_path: Path) -> None:
    """The settle step once opened and closed a link onto DATA/ledger.sqlite3, which drops the
    station's SQLite locks; the next reader then deleted the live WAL and later runs were lost."""
    export, data = tmp_path / "export", tmp_path / "data"
    export.mkdir()
    env = dict(os.environ, BANDWATCH_CONFIG=str(tmp_path / "none.toml"), PYTHONPATH=str(ROOT))
    station = subprocess.Popen(
        [sys.executable, "-m", "tui", "watch", str(export), "--data", str(data), "--plain",
         "--settle", "0.1", "--workers", "1"],
        stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True, env=env, cwd=ROOT,
    )
    try:
        assert _wait_for(lambda: (data / ledger.LEDGER_FILE).exists(), 20)
        write_file(export / "first.csv", spectrum_csv(200, centre_cm1=2880.0))
        assert _wait_for(lambda: len(_runs(data)) == 1, 20)
        os.symlink(data / ledger.LEDGER_FILE, export / "evil.csv")
        assert _wait_for(lambda: len(_runs(data)) == 2, 20)
        # another process reads the ledger and closes it: with the station's locks dropped it
        # would think itself the last user and delete the WAL the station still writes into
        assert _bandwatch("ledger", "list", "--data", str(data), env=env).returncode == 0
        for index in range(4):
            write_file(export / f"later{index}.csv", spectrum_csv(200, centre_cm1=2890.0 + index))
            assert _wait_for(lambda: len(_runs(data)) == 3 + index, 20)
    finally:
        station.send_signal(signal.SIGKILL)
        out, _ = station.communicate(timeout=10)
    recorded = [line for line in out.splitlines() if " run " in line]
    assert len(recorded) == 6
    listed = _bandwatch("ledger", "list", "--json", "--data", str(data), env=env)
    names = sorted(Path(line.split('"path": "')[1].split('"')[0]).name for line in listed.stdout.splitlines())
    assert names == sorted(["first.csv", "evil.csv"] + [f"later{i}.csv" for i in range(4)])
    [evil] = [run for run in _runs(data) if run.name == "evil.csv"]
    assert evil.status == "unreadable" and "data folder" in (evil.error or "")


def test_a_fifo_in_the_export_folder_does_not_stop_the_station(make_station, folders) -> None:
    export, data = folders
    station, events = make_station()
    station.start()
    os.mkfifo(export / "pipe.csv")
    os.symlink(export / "pipe.csv", export / "link-to-pipe.csv")
    time.sleep(0.5)  # the FIFO is seen and settles first
    write_file(export / "good.csv", spectrum_csv(200))
    started = time.monotonic()
    assert _wait_for(lambda: any(isinstance(e, RunProcessed) and e.path.endswith("good.csv") for e in events), 10)
    assert time.monotonic() - started < 10
    assert station.wait_idle(10)
    by_name = {run.name: run for run in _runs(data)}
    assert by_name["good.csv"].status == "processed"
    for name in ("pipe.csv", "link-to-pipe.csv"):
        assert by_name[name].status == "unreadable" and "FIFO" in (by_name[name].error or "")


def test_links_leading_out_of_the_export_folder_are_not_followed(make_station, folders, tmp_path: Path) -> None:
    export, data = folders
    outside = write_file(tmp_path / "elsewhere.csv", spectrum_csv(200))
    os.symlink("/dev/zero", export / "zero.csv")
    os.symlink(outside, export / "outside.csv")
    station, _ = make_station()
    started = time.monotonic()
    station.start()
    assert station.wait_idle(20)
    assert time.monotonic() - started < 10  # /dev/zero was once read up to 512 MB
    by_name = {run.name: run for run in _runs(data)}
    for name in ("zero.csv", "outside.csv"):
        assert by_name[name].status == "unreadable" and "outside the export folder" in (by_name[name].error or "")


def test_links_out_are_followed_when_configured_but_never_to_a_device_or_the_data_folder(
    make_station, folders, tmp_path: Path
) -> None:
    export, data = folders
    outside = write_file(tmp_path / "elsewhere.csv", spectrum_csv(200))
    os.symlink("/dev/zero", export / "zero.csv")
    os.symlink(outside, export / "outside.csv")
    station, _ = make_station(follow_links_outside=True)
    station.start()
    assert station.wait_idle(20)
    os.symlink(data / "station.lock", export / "lock.csv")
    assert station.wait_idle(20, quiet_ticks=10)
    by_name = {run.name: run for run in _runs(data)}
    assert by_name["outside.csv"].status == "processed"
    assert by_name["zero.csv"].status == "unreadable" and "character device" in (by_name["zero.csv"].error or "")
    assert by_name["lock.csv"].status == "unreadable" and "data folder" in (by_name["lock.csv"].error or "")


@pytest.mark.skipif(os.geteuid() != 0, reason="mknod needs root")
def test_device_node_inside_the_export_folder_is_refused(make_station, folders) -> None:
    export, data = folders
    os.mknod(export / "null.csv", 0o644 | 0o020000, os.makedev(1, 3))  # /dev/null's numbers
    station, _ = make_station()
    station.start()
    assert station.wait_idle(20)
    [run] = _runs(data)
    assert run.status == "unreadable" and "character device" in (run.error or "")


def _deep_tree(top: Path, depth: int) -> Path:
    """`depth` nested folders under `top` (made with relative steps: the full path is long);
    returns the deepest."""
    here = os.getcwd()
    try:
        os.chdir(top)
        for _ in range(depth):
            os.mkdir("d")
            os.chdir("d")
        return Path(os.getcwd())
    finally:
        os.chdir(here)


def _remove_deep_tree(first: Path) -> None:
    """Remove the nested folders d/d/d/... starting at `first`, bottom up and without recursion
    (shutil.rmtree and pytest's clean-up recurse past Python's limit at this depth)."""
    here = os.getcwd()
    try:
        os.chdir(first)
        depth = 0
        while os.path.isdir("d"):
            os.chdir("d")
            depth += 1
        for _ in range(depth + 1):
            for entry in list(os.scandir(".")):
                if entry.is_dir(follow_symlinks=False):
                    os.rmdir(entry.name)  # the child folder, emptied one step before
                else:
                    os.unlink(entry.name)
            os.chdir("..")
        os.rmdir(first.name)
    finally:
        os.chdir(here)


def test_watch_recursive_starts_over_a_thousand_nested_folders(make_station, folders) -> None:
    """watchdog walks the tree recursively (RecursionError past ~1000 levels); the station then
    watches the top folder by events and finds the rest by its (iterative) rescan."""
    export, data = folders
    deepest = _deep_tree(export, 1000)
    write_file(deepest / "deep.csv", spectrum_csv(200))
    station, events = make_station(recursive=True, rescan_seconds=0.5)
    station.start()
    assert "top folder only" in station.observer_kind
    assert station.wait_idle(30)
    assert [run.name for run in _runs(data)] == ["deep.csv"]
    assert any(isinstance(e, StationProblem) and "nested too deeply" in e.message for e in events)
    station.stop()
    _remove_deep_tree(export / "d")


def test_a_deep_tree_moved_in_while_running_does_not_end_the_watching(make_station, folders, tmp_path: Path,
                                                                         capfd: pytest.CaptureFixture[str]) -> None:
    export, data = folders
    station, events = make_station(recursive=True, rescan_seconds=0.5)
    station.start()
    assert station.observer_kind == "native" or station.observer_kind == "polling"
    outside = tmp_path / "outside"
    outside.mkdir()
    deepest = _deep_tree(outside, 1000)
    write_file(deepest / "deep.csv", spectrum_csv(200))
    os.rename(outside / "d", export / "d")
    deadline = time.monotonic() + 10
    while "top folder only" not in station.observer_kind and time.monotonic() < deadline:
        time.sleep(0.05)
    if station.observer_kind == "polling":
        pytest.skip("the polling observer's walk is not killed by depth on this system")
    assert "top folder only" in station.observer_kind
    write_file(export / "top.csv", spectrum_csv(200, centre_cm1=2895.0))
    assert station.wait_idle(30)
    assert sorted(run.name for run in _runs(data)) == ["deep.csv", "top.csv"]
    assert "Traceback" not in capfd.readouterr().err
    station.stop()
    _remove_deep_tree(export / "d")


def test_a_file_name_that_is_not_utf8_is_recorded_once(make_station, folders) -> None:
    """Such a name once raised UnicodeEncodeError at every start and was never recorded."""
    export, data = folders
    name = os.fsdecode(b"run-\xff\xfe-latin1-\xe9.csv")
    write_file(export / name, spectrum_csv(200))
    station, events = make_station()
    station.start()
    assert station.wait_idle(20)
    station.stop()
    [run] = _runs(data)
    assert run.name == name and run.status == "processed"
    assert os.fsencode(run.path).endswith(b"run-\xff\xfe-latin1-\xe9.csv")  # the exact bytes
    again, _ = make_station()
    again.start()  # the next start knows the file: not processed a second time
    assert again.wait_idle(20)
    assert len(_runs(data)) == 1


def test_the_180_byte_bomb_is_recorded_unreadable_in_moments_within_a_1_gb_worker(make_station, folders) -> None:
    """Unbounded, the station's worker died of it (recorded as a reader fault) after 37 s."""
    sys.path.insert(0, str(HERE.parent))  # tests/: shared hostile inputs
    from hostile_inputs import BOMB

    export, data = folders
    station, _ = make_station(memory_limit_mb=1024)
    station.start()
    assert station.wait_idle(20)
    started = time.monotonic()
    (export / "bomb.jdx").write_bytes(BOMB)
    write_file(export / "after.csv", spectrum_csv(200))
    assert station.wait_idle(30)
    assert time.monotonic() - started < 10
    by_name = {run.name: run for run in _runs(data)}
    assert by_name["bomb.jdx"].status == "unreadable"
    assert "NPOINTS=99999999 is more than 14 bytes of data can hold" in (by_name["bomb.jdx"].error or "")
    assert by_name["after.csv"].status == "processed"
    assert station.pool is not None and station.pool.restarts == 0  # no worker was lost to it
