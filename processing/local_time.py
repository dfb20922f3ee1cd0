"""The ledger's UTC time stamps as the operator's clock shows them (the local zone, `TZ`
honoured), always with the zone said.

The ledger and every JSON output keep UTC (`2026-03-05T09:15:00.000Z`); people read local
time: `10:15:00` under a header naming the zone, or `2026-03-05T10:15:00+01:00`.
"""
from __future__ import annotations

from datetime import datetime, timezone


def parse_stamp(stamp: str | None) -> datetime | None:
    """An ISO 8601 stamp as stored (UTC, `Z` or an offset) as an aware datetime; None when
    absent or unreadable (an old or hand-edited ledger)."""
    if not stamp:
        return None
    try:
        found = datetime.fromisoformat(stamp.replace("Z", "+00:00"))
    except ValueError:
        return None
    return found if found.tzinfo is not None else found.replace(tzinfo=timezone.utc)


def local(stamp: str | None) -> datetime | None:
    """The stamp in the local zone (`TZ`, else the system's)."""
    found = parse_stamp(stamp)
    return found.astimezone() if found is not None else None


def clock(stamp: str | None) -> str:
    """HH:MM:SS local time; "--:--:--" when there is none."""
    found = local(stamp)
    return found.strftime("%H:%M:%S") if found is not None else "--:--:--"


def local_iso(stamp: str | None) -> str:
    """`2026-03-05T10:15:00+01:00`: local time with its offset from UTC; "-" when none."""
    found = local(stamp)
    return found.isoformat(timespec="seconds") if found is not None else "-"


def zone_name(stamp: str | None = None) -> str:
    """The local zone's name at `stamp` (now when None): "CET", "UTC", "+03"."""
    found = local(stamp) or datetime.now(timezone.utc).astimezone()
    return found.tzname() or found.strftime("%z")


def local_day(stamp: str | None) -> str | None:
    """The local calendar day of a stamp, `2026-03-05`."""
    found = local(stamp)
    return found.date().isoformat() if found is not None else None
