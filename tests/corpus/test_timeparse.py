import pytest

from tracer.corpus.timeparse import TimeParseError, parse_time


@pytest.mark.parametrize("raw, iso, year", [
    (1965, "1965", 1965),
    ("1965", "1965", 1965),
    (1965.0, "1965", 1965),
    ("1965-03", "1965-03", 1965),
    ("1965-03-02", "1965-03-02", 1965),
    ("1965-03-02T10:15:00", "1965-03-02T10:15:00", 1965),
    ("1965-12-31T23:30:00-02:00", "1966-01-01T01:30:00", 1966),
    ("1999-12-31T23:00:00Z", "1999-12-31T23:00:00", 1999),
])
def test_accepted_forms(raw, iso, year):
    t = parse_time(raw)
    assert (t.iso, t.year) == (iso, year)
    assert year <= t.value < year + 1


def test_values_sort_in_time_order():
    raws = ["1965", "1965-03-02", "1965-03-02T12:00:00", "1965-11", "1966-01-01"]
    values = [parse_time(r).value for r in raws]
    assert values == sorted(values)
    assert len(set(values)) == len(values)


@pytest.mark.parametrize("raw", ["yesterday", "1965-13-01", "65/03/02", True, 1965.5, [1965], "1965-02-30"])
def test_rejected_forms_say_what_was_seen(raw):
    with pytest.raises(TimeParseError, match="cannot read a time"):
        parse_time(raw)
