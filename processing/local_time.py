"""The ledger's UTC time stamps as the operator's clock shows them (the local zone, `TZ`
honoured), always with the zone said.

The ledger and every JSON output keep UTC (`2026-03-05T09:15:00.000Z`); people read local
time: `10:15:00` under a header naming the zone, or `2026-03-05T10:15:00+01:00`.
"""
from __future__ import annotations

import itertools
import re
import time
from collections.abc import Iterable
from operator import itemgetter
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
    up once for each UTC hour the stamps fall in, and a stamp of an hour with one offset is
    shifted as text. Stamps all in the ledger's form, in hours of whole-hour offsets (most
    zones, most of the year), are shifted in C loops over the whole column; otherwise stamp by
    stamp, where an hour with a change, an offset with seconds, and a stamp in another form go
    through `local_iso` one by one."""
    stamps = list(stamps)
    shifted = _shifted_whole_hours(stamps)
    return shifted if shifted is not None else _shifted_one_by_one(stamps)


# a stamp's UTC hour, minute and second, and fraction and zone: `2026-03-05T09` `:15:00` `.000Z`
_HOUR_PART, _MINUTE_SECOND_PART, _TAIL_PART = itemgetter(slice(13)), itemgetter(slice(13, 19)), itemgetter(slice(19, None))
_ASCII_HOUR = re.compile(r"[0-9]{4}-[0-9]{2}-[0-9]{2}T(?:[01][0-9]|2[0-3])")


def _shifted_whole_hours(stamps: list[str | None]) -> list[str] | None:
    """`local_iso` of every stamp when each is in the ledger's form and falls in an hour of a
    whole-hour offset: the local hour and the offset looked up once per UTC hour, the minutes
    and seconds kept (each distinct part checked once); None otherwise."""
    if None in stamps or not all(map(isinstance, stamps, itertools.repeat(str))):
        return None
    hours = list(map(_HOUR_PART, stamps))
    found = _whole_hour_shifts(set(hours))
    if found is None:
        return None
    minutes_seconds = list(map(_MINUTE_SECOND_PART, stamps))
    if not (all(map(_MINUTE_SECOND.fullmatch, set(minutes_seconds)))
            and all(map(_FRACTION_ZONE.fullmatch, set(map(_TAIL_PART, stamps))))):
        return None
    local_hour, offset = ({hour: shift[i] for hour, shift in found.items()} for i in (0, 1))
    return list(map("".join, zip(map(local_hour.__getitem__, hours), minutes_seconds, map(offset.__getitem__, hours))))


def _whole_hour_shifts(hours: set[str]) -> dict[str, tuple[str, str]] | None:
    """For each UTC hour (`YYYY-MM-DDTHH`), the local hour and the offset text (`+01:00`), when
    the offset is whole hours all the hour; None when some hour is not so. The offset is looked
    up at the two ends of each UTC day (a zone changes its offset at most once in a day); a day
    with a change, and an hour whose local time is another day, are looked up hour by hour."""
    by_day: dict[str, list[str]] = {}
    for hour in hours:
        if not _ASCII_HOUR.fullmatch(hour):
            return None
        by_day.setdefault(hour[:10], []).append(hour)
    found: dict[str, tuple[str, str]] = {}
    for day, day_hours in by_day.items():
        offset = _day_offset(day)
        text = _offset_text(offset) if offset is not None else ""
        for hour in day_hours:
            local_hour = int(hour[11:13]) + offset // 3600 if offset is not None else -1
            if 0 <= local_hour <= 23:
                found[hour] = (f"{day}T{local_hour:02d}", text)
                continue
            shift = _hour_shift(hour)
            if shift is None or shift[2]:
                return None
            found[hour] = (shift[0], shift[3])
    return found


def _day_offset(day: str) -> int | None:
    """The local zone's offset from UTC in seconds, when the same whole hours at the first and
    the last second of the UTC day `YYYY-MM-DD`; else None."""
    found = _offset_throughout(day + "T00:00:00", 86400)
    return found[1] if found is not None and found[1] % 3600 == 0 else None


def _offset_throughout(utc_start: str, seconds: int) -> tuple[float, int] | None:
    """(the moment `utc_start`, `YYYY-MM-DDTHH:MM:SS` UTC, as a time stamp; the local zone's
    offset from UTC in seconds) when the offset is the same at the first and the last second of
    the `seconds` from then; None when it is not, or the moment is not one the clock can say."""
    try:
        start = datetime.fromisoformat(utc_start + "+00:00").timestamp()
        first, last = time.localtime(start), time.localtime(start + seconds - 1)
    except (ValueError, OverflowError, OSError):  # not a moment, or beyond what the system's clock can say
        return None
    return (start, first.tm_gmtoff) if first.tm_gmtoff == last.tm_gmtoff else None


def _offset_text(offset: int) -> str:
    """`+01:00`, `-03:30`: an offset from UTC in seconds as ISO 8601 writes it."""
    sign, size = ("-", -offset) if offset < 0 else ("+", offset)
    return f"{sign}{size // 3600:02d}:{size // 60 % 60:02d}"


def _shifted_one_by_one(stamps: list[str | None]) -> list[str]:
    """`local_iso` of each stamp, each hour's shift looked up once (see `local_iso_all`)."""
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
    found = _offset_throughout(hour + ":00:00", 3600) if _HOUR.fullmatch(hour) else None
    if found is None or found[1] % 60:
        return None
    start, offset = found
    minutes = (offset // 60) % 60
    this_hour = time.gmtime(start + offset - minutes * 60)  # local time is UTC + offset, all the hour
    next_hour = time.gmtime(start + offset - minutes * 60 + 3600)
    if not (1 <= this_hour.tm_year and next_hour.tm_year <= 9999):
        return None  # local time off the calendar datetime knows: `local_iso` says it in UTC
    return (_hour_text(this_hour), _hour_text(next_hour), minutes, _offset_text(offset))


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
