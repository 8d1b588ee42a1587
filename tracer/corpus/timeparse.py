"""Parse the time of a document into a sortable value.

Accepted: a year (``1965``, ``"1965"``), an ISO date (``"1965-03-02"``), a
year and month (``"1965-03"``) or an ISO datetime (``"1965-03-02T10:15:00"``,
optionally with ``Z`` or an offset). The stored form is the normalised ISO text,
the calendar year, and a decimal year (``1965.167``) that sorts correctly.
"""

from __future__ import annotations

import dataclasses
import datetime as dt
import re

_YEAR = re.compile(r"^[+-]?\d{1,4}$")
_YEAR_MONTH = re.compile(r"^(\d{4})-(\d{2})$")


@dataclasses.dataclass(frozen=True)
class ParsedTime:
    iso: str
    year: int
    value: float


class TimeParseError(ValueError):
    pass


def _decimal_year(moment: dt.datetime) -> float:
    start = dt.datetime(moment.year, 1, 1)
    end = dt.datetime(moment.year + 1, 1, 1)
    return moment.year + (moment - start).total_seconds() / (end - start).total_seconds()


def parse_time(raw) -> ParsedTime:
    """Parse one time value; raise :class:`TimeParseError` saying what was seen."""
    if isinstance(raw, bool):
        raise TimeParseError(f"cannot read a time from {raw!r}")
    if isinstance(raw, int):
        return ParsedTime(str(raw), raw, float(raw))
    if isinstance(raw, float):
        if raw.is_integer():
            return ParsedTime(str(int(raw)), int(raw), raw)
        raise TimeParseError(f"cannot read a time from {raw!r} (give a year, an ISO date or datetime)")
    if not isinstance(raw, str):
        raise TimeParseError(f"cannot read a time from {raw!r}")
    text = raw.strip()
    if _YEAR.match(text):
        year = int(text)
        return ParsedTime(str(year), year, float(year))
    m = _YEAR_MONTH.match(text)
    if m and 1 <= int(m.group(2)) <= 12:
        moment = dt.datetime(int(m.group(1)), int(m.group(2)), 1)
        return ParsedTime(text, moment.year, _decimal_year(moment))
    try:
        if len(text) == 10:
            day = dt.date.fromisoformat(text)
            moment = dt.datetime(day.year, day.month, day.day)
            return ParsedTime(day.isoformat(), day.year, _decimal_year(moment))
        moment = dt.datetime.fromisoformat(text.replace("Z", "+00:00"))
    except ValueError:
        raise TimeParseError(
            f"cannot read a time from {raw!r} (give a year, an ISO date such as 1965-03-02 or an ISO datetime)"
        ) from None
    if moment.tzinfo is not None:
        moment = moment.astimezone(dt.timezone.utc).replace(tzinfo=None)
    return ParsedTime(moment.isoformat(), moment.year, _decimal_year(moment))
