"""`bandwatch reprocess` on a real Dask LocalCluster (2 worker processes): the same recorded
results as the station's pool, bit for bit; a worker killed mid-run loses no file and records
none twice; workers running another analysis stop the job; the command line's --cluster."""
from __future__ import annotations

import json
import os
import re
import signal
from collections.abc import Iterator
from pathlib import Path

import distributed  # the test extra installs dask[distributed]: these tests always run
import pytest
from archive_files import verdict_counts
from reprocess_support import stored_results, versions_by_path, write_archive

from processing.pipeline import ProcessSettings
from processing.reprocess.cluster import ClusterBackend
from processing.reprocess.guarded import PoolSpec
from processing.reprocess.job import JobOptions, ReprocessJob
from processing.reprocess.local import LocalBackend
from processing.reprocess.selection import PathSelection
from processing.reprocess.summary import Progress, ReprocessSummary
from processing.station import ledger
from tui.cli import main

pytestmark = pytest.mark.slow
FILES = 300
PROCESS = "processing.pipeline:process_file"
TIMING = re.compile(r'"timing_ms": \{[^{}]*\}, ')  # how long each stage took: never the same twice


@pytest.fixture(scope="module")
def archive(tmp_path_factory: pytest.TempPathFactory) -> Path:
    folder = tmp_path_factory.mktemp("cluster") / "archive"
    write_archive(folder, FILES)
    return folder


@pytest.fixture(scope="module")
def client() -> Iterator[distributed.Client]:
    cluster = distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=True, dashboard_address=None)
    client = distributed.Client(cluster)
    try:
        yield client
    finally:
        client.close()
        cluster.close()


@pytest.fixture(scope="module")
def local_results(archive: Path, tmp_path_factory: pytest.TempPathFactory) -> dict[str, str]:
    """The same archive through the station's pool on this PC: the reference."""
    data = tmp_path_factory.mktemp("local") / "data"
    summary = _run(data, archive, LocalBackend(2, PROCESS, 60.0, 2048))
    assert summary.recorded == FILES and set(versions_by_path(data).values()) == {1}
    return stored_results(data)


def _run(data: Path, archive: Path, backend, on_progress=None) -> ReprocessSummary:  # noqa: ANN001
    conn = ledger.open_ledger(data)
    try:
        job = ReprocessJob(conn, JobOptions(data, ProcessSettings()), backend, on_progress=on_progress)
        return job.run(PathSelection((str(archive),)).candidates())
    finally:
        backend.close()
        conn.close()


def _on_cluster(client: distributed.Client) -> ClusterBackend:
    return ClusterBackend(client, PoolSpec(1, PROCESS, 60.0, 2048))


def _without_timing(results: dict[str, str]) -> dict[str, str]:
    stripped = {path: TIMING.sub("", text, count=1) for path, text in results.items()}
    assert all(text != results[path] for path, text in stripped.items())  # the timing was there and went
    return stripped


def test_the_cluster_records_what_the_local_pool_records_bit_for_bit(
    client: distributed.Client, archive: Path, local_results: dict[str, str], tmp_path: Path,
) -> None:
    summary = _run(tmp_path / "data", archive, _on_cluster(client))
    assert summary.mode == "cluster"
    assert (summary.recorded, summary.failed, summary.not_recorded) == (FILES, 0, 0)
    assert set(versions_by_path(tmp_path / "data").values()) == {1}
    cluster_results = stored_results(tmp_path / "data")
    assert set(cluster_results) == set(local_results)
    # Everything the analysis concluded, to the last digit of every number: the stored JSON
    # text with only the stage timings taken out.
    assert _without_timing(cluster_results) == _without_timing(local_results)


def test_a_worker_killed_mid_run_loses_no_file_and_records_none_twice(
    client: distributed.Client, archive: Path, local_results: dict[str, str], tmp_path: Path,
) -> None:
    pids = client.run(os.getpid)
    address, victim = sorted(pids.items())[0]
    killed: list[int] = []
    held: list[str] = []

    def kill_once(progress: Progress) -> None:
        if progress.done >= FILES // 3 and not killed:
            held.extend(client.processing(workers=[address]).get(address, ()))
            os.kill(victim, signal.SIGKILL)  # the worker and the tasks it holds are gone
            killed.append(victim)

    summary = _run(tmp_path / "data", archive, _on_cluster(client), on_progress=kill_once)
    assert killed, "the run ended before a third of it"
    assert held, "the killed worker held no task: nothing had to be run elsewhere"
    assert (summary.recorded, summary.failed, summary.not_recorded) == (FILES, 0, 0)
    counts = versions_by_path(tmp_path / "data")
    assert len(counts) == FILES and set(counts.values()) == {1}
    assert _without_timing(stored_results(tmp_path / "data")) == _without_timing(local_results)
    client.wait_for_workers(2, timeout=60)  # the nanny replaced it; later tests have two again
    assert victim not in client.run(os.getpid).values()


def test_workers_running_another_analysis_stop_the_job_before_anything_is_recorded(
    client: distributed.Client, archive: Path, tmp_path: Path,
) -> None:
    from reprocess_hooks import back_to_this_analysis, pretend_another_analysis

    client.run(pretend_another_analysis)
    try:
        summary = _run(tmp_path / "data", archive, _on_cluster(client))
    finally:
        client.run(back_to_this_analysis)
    assert summary.stopped is not None and "0.0.0+another" in summary.stopped
    assert "install the same bandwatch" in summary.stopped
    assert summary.recorded == 0 and not versions_by_path(tmp_path / "data")


def test_the_command_line_takes_the_cluster_address_and_reports_in_json(
    client: distributed.Client, tmp_path: Path, monkeypatch: pytest.MonkeyPatch, capsys: pytest.CaptureFixture[str],
) -> None:
    monkeypatch.setenv("BANDWATCH_CONFIG", str(tmp_path / "no-config.toml"))
    archive = tmp_path / "archive"
    files = write_archive(archive, 8)
    address = client.scheduler.address
    code = main(["reprocess", str(archive), "--data", str(tmp_path / "data"), "--cluster", address, "--json"])
    out = capsys.readouterr().out
    assert code == 0
    summary = json.loads(out)
    assert (summary["mode"], summary["recorded"], summary["by_verdict"]) == ("cluster", 8, verdict_counts(files))

    config = tmp_path / "station.toml"
    config.write_text(f'[cluster]\naddress = "{address}"\n', encoding="utf-8")
    code = main(["reprocess", str(archive), "--data", str(tmp_path / "data"), "--config", str(config), "--cluster", "--json"])
    assert code == 0
    assert json.loads(capsys.readouterr().out)["skipped"] == 8


def test_a_scheduler_that_cannot_be_reached_is_one_clear_error() -> None:
    from processing.reprocess.cluster import ClusterUnavailable, connect

    with pytest.raises(ClusterUnavailable, match=r"cannot reach the Dask scheduler at tcp://127\.0\.0\.1:9 "):
        connect("tcp://127.0.0.1:9", timeout_seconds=1.0)  # the discard port: nothing listens here
