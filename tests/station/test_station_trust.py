"""What the operator must be able to trust: an incomplete export recorded once (not again at
every restart), said to be waited for; the ledger's change feed; deciding over another
person's decision only when confirmed, with both kept on record; each run's main reasons."""
from __future__ import annotations

import os
import time
from pathlib import Path

from processing.station import ledger
from processing.station.events import FileUnchanged, FileWaiting, RunProcessed
from processing.station.redo import RedoRequest, record_redo

from station_files import spectrum_csv, write_file

# A JCAMP-DX file that never got its ##END= (the instrument stopped writing): IUPAC JCAMP-DX
# 4.24 ends every block with ##END= (common practice: readers wait for it).
CUT_JCAMP = "##TITLE=cut\n##JCAMP-DX=4.24\n##XUNITS=1/CM\n##YUNITS=ABSORBANCE\n##XYDATA=(X++(Y..Y))\n2900 1 2 3\n"


def _versions(data: Path, name: str) -> list[ledger.RunRecord]:
    conn = ledger.open_ledger(data)
    try:
        return [run for run in ledger.list_runs(conn, with_result=False) if run.name == name]
    finally:
        conn.close()


def test_an_incomplete_export_is_recorded_once_not_again_at_every_restart(make_station, folders) -> None:
    export, data = folders
    write_file(export / "cut.jdx", CUT_JCAMP)
    station, events = make_station(max_wait_seconds=0.6)
    station.start()
    deadline = time.monotonic() + 15
    while not any(isinstance(e, RunProcessed) for e in events) and time.monotonic() < deadline:
        time.sleep(0.05)
    station.stop()
    waiting = [e for e in events if isinstance(e, FileWaiting)]
    assert len(waiting) == 1 and "##END=" in waiting[0].reason and waiting[0].give_up_after_seconds == 0.6
    assert "waiting for cut.jdx to finish" in waiting[0].plain()
    [first] = _versions(data, "cut.jdx")
    assert first.status == "unreadable" and "##END=" in (first.error or "")
    # three restarts, the last after the file's time stamp changed with the same bytes
    for restart in range(3):
        if restart == 2:
            os.utime(export / "cut.jdx", ns=(time.time_ns(), time.time_ns()))
        station, events = make_station(max_wait_seconds=0.6)
        station.start()
        assert station.wait_idle(15)
        time.sleep(0.8)  # past the longest wait: a re-recording would have happened by now
        assert station.wait_idle(15)
        station.stop()
        assert [run.run_id for run in _versions(data, "cut.jdx")] == [first.run_id], restart
        if restart == 2:
            assert any(isinstance(e, FileUnchanged) and e.run_id == first.run_id for e in events)


def test_the_change_feed_names_every_run_a_decision_or_new_version_concerns(tmp_path: Path) -> None:
    data = tmp_path / "data"
    conn = ledger.open_ledger(data)
    try:
        start, none = ledger.changes_after(conn, None)
        assert none == []
        one = ledger.record_run(conn, "/x/a.csv", "1" * 64, "unreadable", error="empty")
        other = ledger.record_run(conn, "/x/b.csv", "2" * 64, "unreadable", error="empty")
        cursor, changed = ledger.changes_after(conn, start)
        assert changed == [one.run_id, other.run_id] and cursor > start
        assert ledger.changes_after(conn, cursor) == (cursor, [])
        ledger.record_decision(conn, one.run_id, "flag", "cell leak", "alice")
        cursor2, changed = ledger.changes_after(conn, cursor)
        assert changed == [one.run_id] and cursor2 > cursor
        # a new version of a.csv (a rewritten file or a redo) changes the earlier version too
        again = record_redo(conn, one.run_id, RedoRequest(species=("HCl",)), None, failure="test")
        cursor3, changed = ledger.changes_after(conn, cursor2)
        assert changed == [one.run_id, again.run_id]
        superseded = ledger.get_run(conn, one.run_id)
        assert superseded is not None and superseded.superseded_by == again.run_id
    finally:
        conn.close()


def test_deciding_over_another_persons_decision_needs_confirming_and_keeps_both(tmp_path: Path) -> None:
    conn = ledger.open_ledger(tmp_path / "data")
    try:
        run = ledger.record_run(conn, "/x/a.csv", "1" * 64, "unreadable", error="empty")
        flagged = ledger.decide(conn, run.run_id, "flag", "cell leak", "alice")
        assert flagged.event is not None and flagged.over is None
        asked = ledger.decide(conn, run.run_id, "accept", "", "bob")
        assert asked.event is None and asked.over == flagged.event  # nothing written: ask first
        assert [e.action for e in ledger.decision_history(conn, run.run_id)] == ["flag"]
        done = ledger.decide(conn, run.run_id, "accept", "looked again", "bob", confirmed_over=flagged.event.event_id)
        assert done.event is not None and done.over == flagged.event
        assert done.event.reason == f"looked again (over flag by alice (event {flagged.event.event_id}))"
        trail = ledger.decision_history(conn, run.run_id)
        assert [(e.action, e.operator) for e in trail] == [("flag", "alice"), ("accept", "bob")]
        # one's own decision is changed without asking; an undo of another's asks too
        assert ledger.decide(conn, run.run_id, "flag", "no, really", "bob").event is not None
        asked = ledger.decide(conn, run.run_id, "undo", "", "carol")
        assert asked.event is None and asked.over is not None and asked.over.operator == "bob"
    finally:
        conn.close()


def test_a_processed_run_carries_its_main_reasons_into_the_ledger_and_its_event(make_station, folders) -> None:
    export, data = folders
    write_file(export / "run.csv", spectrum_csv(150))
    station, events = make_station()
    station.start()
    deadline = time.monotonic() + 30
    while not any(isinstance(e, RunProcessed) for e in events) and time.monotonic() < deadline:
        time.sleep(0.05)
    station.stop()
    [event] = [e for e in events if isinstance(e, RunProcessed)]
    [run] = _versions(data, "run.csv")
    assert run.reasons == event.reasons and run.reasons  # this small spectrum leaves checks not assessed
    if run.verdict == "pass":
        assert all(reason.startswith("n/a: ") for reason in run.reasons)
    assert f"reasons={' · '.join(run.reasons)}" in event.plain()
