import datetime as dt

import pytest

from tracer.corpus.timeparse import TimeParseError, parse_time


@pytest.mark.parametrize("raw, iso, year", [
    (1965, "1965", 1965),
    ("1965", "1965", 1965),
    (1965.0, "1965", 1965),
    ("+1965", "1965", 1965),
    ("0065", "65", 65),
    ("1965-03", "1965-03", 1965),
    ("1965-3", "1965-03", 1965),
    ("1965-03-02", "1965-03-02", 1965),
    ("1965-03-02T10:15:00", "1965-03-02T10:15:00", 1965),
    ("1965-03-02 10:15", "1965-03-02T10:15:00", 1965),
    # offsets are kept as written: the year is that of the local time in the text
    ("1965-12-31T23:30:00-02:00", "1965-12-31T23:30:00-02:00", 1965),
    ("1999-12-31T23:00:00Z", "1999-12-31T23:00:00+00:00", 1999),
    ("0001-01-01T00:30:00+05:00", "0001-01-01T00:30:00+05:00", 1),
    ("9999-12", "9999-12", 9999),
    ("9999-12-31", "9999-12-31", 9999),
    ("9999-12-31T23:59:59.999999", "9999-12-31T23:59:59.999999", 9999),
    (9999, "9999", 9999),
    (100, "100", 100),
    (dt.date(1965, 3, 2), "1965-03-02", 1965),
    (dt.datetime(1965, 3, 2, 10, 15), "1965-03-02T10:15:00", 1965),
    (dt.datetime(1999, 12, 31, 23, tzinfo=dt.timezone(dt.timedelta(hours=-5))), "1999-12-31T23:00:00-05:00", 1999),
])
def test_accepted_forms(raw, iso, year):
    t = parse_time(raw)
    assert (t.iso, t.year) == (iso, year)
    assert year <= t.value < year + 1


def test_integer_and_string_years_are_alike():
    for y in (1000, 1965, 9999):
        assert parse_time(y) == parse_time(str(y)) == parse_time(float(y))
    for y in (99999, 10000, 0, -5, 2 ** 63, 2 ** 64 + 1, 10 ** 30, 10 ** 5000):
        with pytest.raises(TimeParseError):
            parse_time(y)
        if 0 <= y < 10 ** 100:
            with pytest.raises(TimeParseError):
                parse_time(str(y))


@pytest.mark.parametrize("raw", [99999, "99999", 10000, 2 ** 63, "10000-01-01"])
def test_years_outside_the_range_say_the_range(raw):
    with pytest.raises(TimeParseError, match=r"outside 1-9999|cannot read a time"):
        parse_time(raw)
    if isinstance(raw, int):
        with pytest.raises(TimeParseError, match="outside 1-9999"):
            parse_time(raw)


@pytest.mark.parametrize("raw", [65, "65", "7", 7, "05", 65.0])
def test_two_digit_years_are_rejected_with_a_message(raw):
    with pytest.raises(TimeParseError, match="one or two digits is ambiguous; write all four"):
        parse_time(raw)


def test_values_sort_in_time_order():
    raws = ["1965", "1965-03-02", "1965-03-02T12:00:00", "1965-11", "1966-01-01", "9999-12-31T23:59:59"]
    values = [parse_time(r).value for r in raws]
    assert values == sorted(values)
    assert len(set(values)) == len(values)
    assert parse_time("9999-12-31T23:59:59").value < 10000


def test_decimal_year_counts_days_of_leap_years():
    # 1 March is day 60 (0-based) of 2000 (leap, 366 days) and day 59 of 1999: computed by hand
    assert parse_time("2000-03-01").value == pytest.approx(2000 + 60 / 366)
    assert parse_time("1999-03-01").value == pytest.approx(1999 + 59 / 365)


@pytest.mark.parametrize("raw", ["yesterday", "1965-13-01", "1965-13", "65/03/02", True, 1965.5, [1965], "1965-02-30",
                                 float("nan"), float("inf"), "", "-500", "1965-03-02T25:00", "2021-W01-1",
                                 "\udfff", "1" * 5000, None])
def test_rejected_forms_say_what_was_seen(raw):
    with pytest.raises(TimeParseError, match="cannot read a time"):
        parse_time(raw)
