"""The ledger's UTC time stamps as the operator's clock shows them (the local zone, `TZ`
honoured), always with the zone said.

The ledger and every JSON output keep UTC (`2026-03-05T09:15:00.000Z`); people read local
time: `10:15:00` under a header naming the zone, or `2026-03-05T10:15:00+01:00`.
"""
from __future__ import annotations

import re
import time
from collections.abc import Iterable
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
    """The stamp in the local zone (`TZ`, else the system's); at the ends of the calendar,
    where the local time would fall outside years 1-9999 (a hand-edited ledger), in UTC."""
    found = parse_stamp(stamp)
    if found is None:
        return None
    try:
        return found.astimezone()
    except (OverflowError, OSError):
        return found


def clock(stamp: str | None) -> str:
    """HH:MM:SS local time; "--:--:--" when there is none."""
    found = local(stamp)
    return found.strftime("%H:%M:%S") if found is not None else "--:--:--"


def local_iso(stamp: str | None) -> str:
    """`2026-03-05T10:15:00+01:00`: local time with its offset from UTC; "-" when none."""
    found = local(stamp)
    return found.isoformat(timespec="seconds") if found is not None else "-"


# the parts of a stamp as the ledger writes it (UTC to the second or finer, `Z` or `+00:00`)
_HOUR = re.compile(r"\d{4}-\d\d-\d\dT\d\d")
_MINUTE_SECOND = re.compile(r":[0-5]\d:[0-5]\d")
_FRACTION_ZONE = re.compile(r"(?:\.\d+)?(?:Z|\+00:00)")


def local_iso_all(stamps: Iterable[str | None]) -> list[str]:
    """`local_iso` of each stamp (a listing's 100,000 in a fraction of the time).

    A zone's offset from UTC changes at most once in an hour, on a whole minute: it is looked
    up once for each UTC hour the stamps fall in, at the hour's first and last second, and a
    stamp of an hour with one offset is shifted as text. An hour with a change, an offset
    with seconds, and a stamp in another form go through `local_iso` one by one. The parts of
    the stamps repeat (hours, minutes and seconds, fractions): each is checked once."""
    hours: dict[str, tuple[str, str, int, str] | None] = {}
    checked: dict[str, bool] = {}
    found = []
    hour, shift = "", None
    for stamp in stamps:
        if stamp is None:
            found.append("-")
            continue
        if not stamp.startswith(hour) or len(hour) != 13:  # the stamps come in order: mostly the same hour
            hour = stamp[:13]
            shift = hours[hour] if hour in hours else hours.setdefault(hour, _hour_shift(hour))
        middle, tail = stamp[13:19], stamp[19:]
        good = checked.get(middle)
        if good is None:
            good = checked[middle] = bool(_MINUTE_SECOND.fullmatch(middle))
        fine = checked.get(tail)
        if fine is None:
            fine = checked[tail] = bool(_FRACTION_ZONE.fullmatch(tail))
        if shift is None or not (good and fine):
            found.append(local_iso(stamp))
        elif not shift[2]:
            found.append(shift[0] + middle + shift[3])
        else:
            this_hour, next_hour, minutes, offset = shift
            minute = int(stamp[14:16]) + minutes
            found.append(f"{this_hour}:{minute:02d}{stamp[16:19]}{offset}" if minute < 60
                         else f"{next_hour}:{minute - 60:02d}{stamp[16:19]}{offset}")
    return found


def _hour_shift(hour: str) -> tuple[str, str, int, str] | None:
    """For the UTC hour `YYYY-MM-DDTHH`: the local hour its minute 0 falls in and the next
    (`YYYY-MM-DDTHH`), the minutes to add, and the offset text (`+01:00`); None when the
    offset changes within the hour or is not whole minutes, or `hour` is not an hour."""
    if not _HOUR.fullmatch(hour):
        return None
    try:
        start = datetime.fromisoformat(hour + ":00:00+00:00").timestamp()
        first, last = time.localtime(start), time.localtime(start + 3599)
    except (ValueError, OverflowError, OSError):  # not an hour, or beyond what the system's clock can say
        return None
    offset = first.tm_gmtoff
    if offset != last.tm_gmtoff or offset % 60:
        return None
    minutes = (offset // 60) % 60
    this_hour = time.gmtime(start + offset - minutes * 60)  # local time is UTC + offset, all the hour
    next_hour = time.gmtime(start + offset - minutes * 60 + 3600)
    if not (1 <= this_hour.tm_year and next_hour.tm_year <= 9999):
        return None  # local time off the calendar datetime knows: `local_iso` says it in UTC
    sign, size = ("-", -offset) if offset < 0 else ("+", offset)
    return (_hour_text(this_hour), _hour_text(next_hour), minutes, f"{sign}{size // 3600:02d}:{size // 60 % 60:02d}")


def _hour_text(moment: time.struct_time) -> str:
    """`YYYY-MM-DDTHH` (strftime, fast; its %Y is not zero-padded below the year 1000 on every
    system, so such a year is written out by hand)."""
    text = time.strftime("%Y-%m-%dT%H", moment)
    if len(text) == 13:
        return text
    return f"{moment.tm_year:04d}-{moment.tm_mon:02d}-{moment.tm_mday:02d}T{moment.tm_hour:02d}"


def zone_name(stamp: str | None = None) -> str:
    """The local zone's name at `stamp` (now when None): "CET", "UTC", "+03"."""
    found = local(stamp) or datetime.now(timezone.utc).astimezone()
    return found.tzname() or found.strftime("%z")


def local_day(stamp: str | None) -> str | None:
    """The local calendar day of a stamp, `2026-03-05`."""
    found = local(stamp)
    return found.date().isoformat() if found is not None else None
