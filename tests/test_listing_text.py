"""The text of a long listing, made column by column: local times of many stamps at once,
terminal-safe columns, and tables given as columns. Each must equal the one-at-a-time form it
speeds up, and local times must follow the zone rules."""
from __future__ import annotations

import random
import time
from collections.abc import Iterator
from datetime import datetime, timedelta, timezone

import pytest

from processing.local_time import local_iso, local_iso_all
from processing.safe_text import safe_column, safe_text
from processing.text_table import column_table, fitted_table


@pytest.fixture
def zone(monkeypatch: pytest.MonkeyPatch) -> Iterator[object]:
    """Set the local zone (TZ) for one test; the process's zone is restored after it."""

    def use(name: str) -> None:
        monkeypatch.setenv("TZ", name)
        time.tzset()

    yield use
    monkeypatch.undo()
    time.tzset()


def _stamps(count: int, seed: int) -> list[str]:
    """Stored UTC stamps over a year, as the ledger writes them (milliseconds, `Z`)."""
    rng = random.Random(seed)
    start = datetime(2026, 1, 1, tzinfo=timezone.utc)
    return [
        (start + timedelta(seconds=rng.randrange(366 * 86400), milliseconds=rng.randrange(1000)))
        .isoformat(timespec="milliseconds").replace("+00:00", "Z")
        for _ in range(count)
    ]


# Zones with whole-hour, half-hour and quarter-hour offsets, with and without summer time,
# and half-hour summer shifts (tz database: Europe/Berlin, America/St_Johns, Asia/Kathmandu,
# Australia/Lord_Howe, Pacific/Chatham; common practice to test these edge zones).
ZONES = ["UTC", "Europe/Berlin", "America/St_Johns", "Asia/Kathmandu", "Australia/Lord_Howe", "Pacific/Chatham"]


@pytest.mark.parametrize("name", ZONES)
def test_local_times_of_many_stamps_equal_the_ones_made_one_by_one(zone, name: str) -> None:  # type: ignore[no-untyped-def]
    zone(name)
    stamps = _stamps(3000, seed=len(name))
    stamps += sorted(stamps, reverse=True)[:500]  # a listing's order: newest first
    stamps += [None, "", "not a time", "2026-13-01T00:00:00Z", "2026-03-29T01:00:00+00:00", "2026-03-29T00:59:59Z",
               "2026-10-25T00:59:59.999Z", "2026-10-25T01:00:00Z", "2026-01-01T00:00:60Z", "2026-01-01T05:00:00+02:00",
               "0001-01-01T00:00:00Z", "0999-06-01T12:30:00.5Z", "1900-01-01T00:00:00Z", "9999-12-31T23:59:59Z"]
    assert local_iso_all(stamps) == [local_iso(stamp) for stamp in stamps]


@pytest.mark.parametrize("name", ZONES)
def test_a_column_of_ledger_stamps_is_shifted_whole_as_one_by_one(zone, name: str) -> None:  # type: ignore[no-untyped-def]
    """A listing's column, every stamp in the ledger's form, over a year (two summer-time
    changes in Berlin): the whole-column pass where the offsets are whole hours, else stamp by
    stamp, and the same text as `local_iso` either way."""
    from processing.local_time import _shifted_whole_hours

    zone(name)
    stamps = sorted(_stamps(4000, seed=7 + len(name)), reverse=True)
    stamps += ["2026-03-29T00:59:59.999Z", "2026-03-29T01:00:00.000Z", "2026-10-25T00:30:00Z", "2026-10-25T01:30:00Z",
               "2026-06-30T23:59:59+00:00", "2026-12-31T23:00:00.5Z", "2027-01-01T00:00:00Z"]
    whole = _shifted_whole_hours(stamps)
    # whole-hour offsets all year in UTC and Berlin (+1/+2 h); Nepal +5:45, Newfoundland -3:30/-2:30,
    # Lord Howe +10:30/+11, Chatham +12:45/+13:45 (tz database): those go stamp by stamp
    assert (whole is not None) == (name in ("UTC", "Europe/Berlin"))
    assert local_iso_all(stamps) == [local_iso(stamp) for stamp in stamps]
    assert whole is None or whole == [local_iso(stamp) for stamp in stamps]


def test_a_column_with_one_odd_stamp_goes_stamp_by_stamp(zone) -> None:  # type: ignore[no-untyped-def]
    from processing.local_time import _shifted_whole_hours

    zone("Europe/Berlin")
    good = sorted(_stamps(200, seed=3), reverse=True)
    for odd in ("2026-01-01T٠٥:00:00Z", "2026-01-01T24:00:00Z", "2026-02-30T10:00:00Z", "2026-01-01T10:00:00+01:00",
                "2026-01-01T10:00:60Z", "2026-01-01T10", None, ""):
        stamps = [*good, odd]
        assert _shifted_whole_hours(stamps) is None, odd
        assert local_iso_all(stamps) == [local_iso(stamp) for stamp in stamps], odd


def test_summer_time_starts_and_ends_on_the_hour_the_rules_say(zone) -> None:  # type: ignore[no-untyped-def]
    # EU summer time: from 01:00 UTC on the last Sunday of March to 01:00 UTC on the last
    # Sunday of October (Directive 2000/84/EC); CET is UTC+1, CEST UTC+2.
    zone("Europe/Berlin")
    found = local_iso_all(["2026-03-29T00:59:59.999Z", "2026-03-29T01:00:00.000Z",
                           "2026-10-25T00:59:59Z", "2026-10-25T01:00:00Z"])
    assert found == ["2026-03-29T01:59:59+01:00", "2026-03-29T03:00:00+02:00",
                     "2026-10-25T02:59:59+02:00", "2026-10-25T02:00:00+01:00"]
    zone("Asia/Kathmandu")  # Nepal time, UTC+5:45 all year (tz database)
    assert local_iso_all(["2026-06-30T23:30:07.5Z"]) == ["2026-07-01T05:15:07+05:45"]


def test_a_safe_column_escapes_only_where_a_cell_needs_it() -> None:
    clean = ["run1.csv", "calibration +0.24 cm-1 · fringes 0.004 A", "H35Cl,H37Cl"]  # non-ASCII but printable
    assert safe_column(clean) == clean
    hostile = ["run1.csv", "evil\x1b[2J.csv", "line\nbreak", "\u202eexe.txt"]
    assert safe_column(hostile) == [safe_text(text) for text in hostile]
    assert safe_column(hostile)[1] == "evil\\x1b[2J.csv"


def test_a_table_given_by_columns_equals_the_one_given_by_rows() -> None:
    headers = ["run", "verdict", "file", "reasons"]
    columns = [["12", "3", "100"], ["pass", "warn", "-"], ["a.csv", "long-name-of-a-file.csv", "b.csv"],
               ["", "calibration +0.24 cm-1 · fringes 0.004 A", "unreadable: no spectrum in it"]]
    rows = [list(row) for row in zip(*columns)]
    for width in (None, 200, 60, 40):
        assert column_table(headers, columns, width=width) == fitted_table(headers, rows, width=width), width
    wide = column_table(headers, columns).splitlines()
    assert wide[0] == "run  verdict  file                     reasons"
    assert wide[3] == "3    warn     long-name-of-a-file.csv  calibration +0.24 cm-1 · fringes 0.004 A"
    assert wide[2] == "12   pass     a.csv"  # no trailing blanks after an empty last cell
    narrow = fitted_table(headers, rows, width=60).splitlines()
    assert max(map(len, narrow)) <= 60  # wrapped between words, never cut
    assert "calibration +0.24 cm-1 · fringes 0.004 A".split() == " ".join(
        line[39:] for line in narrow[3:6]).split()
