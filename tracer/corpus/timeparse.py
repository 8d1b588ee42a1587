"""Parse the time of a document into a sortable value, under one stated rule.

The rule
--------
Accepted forms, whether the value is a number or a string:

* a year: ``1965``, ``"1965"``, ``1965.0``;
* a year and month: ``"1965-03"``;
* a date: ``"1965-03-02"``, or a date object (Parquet ``date32``);
* a date and time: ``"1965-03-02T10:15"``, ``"1965-03-02 10:15:00.5"``, with or
  without ``Z`` or an offset such as ``+05:30``; or a datetime object (Parquet
  ``timestamp``, with or without a time zone).

Years run from 1 to 9999, the range of the proleptic Gregorian calendar of
Python's :mod:`datetime`, so that every accepted time has a date, a month and a
place in the order; ``99999``, ``"99999"``, ``0`` and negative years are
rejected alike, as are integers of any size beyond the range.

A year written with one or two digits (``65``, ``"65"``, ``"7"``) is rejected
with a message: it is ambiguous (1965? 2065? the year 65?). Years 1-99 are
written with four digits (``"0065"``, ``"0065-03-02"``).

Offsets are kept as written: the year, the decade and the decimal value come
from the local date and time in the text, not from its conversion to UTC, so
``"1999-12-31T23:00:00-05:00"`` is in 1999 (and in the 1990s) as its writer
meant. The stored form (``iso``) keeps the offset.

The stored form is the normalised ISO text, the calendar year, and a decimal
year (``1965.167``: the year plus the fraction of it elapsed) that sorts in time
order; ``"9999-12-31T23:59:59"`` is accepted and its value stays below 10000.
"""

from __future__ import annotations

import dataclasses
import datetime as dt
import math
import re

MIN_YEAR, MAX_YEAR = 1, 9999
_YEAR = re.compile(r"^[+]?(\d{1,18})$")
_YEAR_MONTH = re.compile(r"^(\d{4})-(\d{1,2})$")
_DATE = re.compile(r"^\d{4}-\d{2}-\d{2}$")
_DATETIME = re.compile(r"^\d{4}-\d{2}-\d{2}[T ]\d{2}:\d{2}(:\d{2}(\.\d{1,6})?)?(Z|[+-]\d{2}:?\d{2})?$")
_FORMS = "give a year, an ISO date such as 1965-03-02 or an ISO datetime"


@dataclasses.dataclass(frozen=True)
class ParsedTime:
    iso: str
    year: int
    value: float


class TimeParseError(ValueError):
    pass


def _shown(raw) -> str:
    if isinstance(raw, int) and abs(raw) >= 10 ** 12:
        return f"an integer of {raw.bit_length()} bits"
    text = repr(raw)
    return text if len(text) <= 60 else text[:57] + "..."


def _year(year: int, raw) -> int:
    if not MIN_YEAR <= year <= MAX_YEAR:
        shown = str(year) if abs(year) < 10 ** 12 else "beyond 10^12"
        raise TimeParseError(f"cannot read a time from {_shown(raw)}: year {shown} is outside "
                             f"{MIN_YEAR}-{MAX_YEAR} (the range of the calendar used)")
    return year


def _decimal_year(moment: dt.datetime) -> float:
    """Year plus the fraction elapsed; computed from day counts so that year 9999 needs no year 10000."""
    start = dt.datetime(moment.year, 1, 1)
    days = 366 if (moment.year % 4 == 0 and moment.year % 100 != 0) or moment.year % 400 == 0 else 365
    value = moment.year + (moment - start).total_seconds() / (days * 86400.0)
    # the last microseconds of a year would round up to the next year in float64
    return min(value, math.nextafter(moment.year + 1.0, 0.0))


def _from_year(year: int, raw) -> ParsedTime:
    year = _year(year, raw)
    return ParsedTime(str(year), year, float(year))


def _from_moment(moment: dt.datetime | dt.date, raw) -> ParsedTime:
    if isinstance(moment, dt.datetime):
        local = moment.replace(tzinfo=None)
        return ParsedTime(moment.isoformat(), _year(moment.year, raw), _decimal_year(local))
    day = dt.datetime(moment.year, moment.month, moment.day)
    return ParsedTime(moment.isoformat(), _year(moment.year, raw), _decimal_year(day))


def _two_digits(raw) -> TimeParseError:
    return TimeParseError(f"cannot read a time from {_shown(raw)}: a year of one or two digits is ambiguous; "
                          "write all four (1965, or 0065 for the year 65)")


def parse_time(raw) -> ParsedTime:
    """Parse one time value; raise :class:`TimeParseError` saying what was seen (rule: module docstring)."""
    if isinstance(raw, bool):
        raise TimeParseError(f"cannot read a time from {raw!r}")
    if isinstance(raw, float):
        if not math.isfinite(raw) or not raw.is_integer():
            raise TimeParseError(f"cannot read a time from {_shown(raw)} ({_FORMS})")
        raw = int(raw)
    if isinstance(raw, int):
        if 0 <= raw <= 99:
            raise _two_digits(raw)
        return _from_year(raw, raw)
    if isinstance(raw, (dt.datetime, dt.date)):
        return _from_moment(raw, raw)
    if not isinstance(raw, str):
        raise TimeParseError(f"cannot read a time from {_shown(raw)} ({_FORMS})")
    text = raw.strip()
    m = _YEAR.match(text)
    if m:
        if len(m.group(1)) <= 2:
            raise _two_digits(raw)
        return _from_year(int(m.group(1)), raw)
    m = _YEAR_MONTH.match(text)
    if m:
        if not 1 <= int(m.group(2)) <= 12:
            raise TimeParseError(f"cannot read a time from {_shown(raw)}: month {m.group(2)} is not 1-12")
        year = _year(int(m.group(1)), raw)
        month = dt.datetime(year, int(m.group(2)), 1)
        return ParsedTime(f"{year:04d}-{month.month:02d}", year, _decimal_year(month))
    try:
        if _DATE.match(text):
            return _from_moment(dt.date.fromisoformat(text), raw)
        if _DATETIME.match(text):
            return _from_moment(dt.datetime.fromisoformat(text.replace("Z", "+00:00")), raw)
    except ValueError as e:  # a day or hour that does not exist, an offset of a day or more
        raise TimeParseError(f"cannot read a time from {_shown(raw)}: {e}") from None
    raise TimeParseError(f"cannot read a time from {_shown(raw)} ({_FORMS})")
