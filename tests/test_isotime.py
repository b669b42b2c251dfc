"""ISO 8601 parsing shared by the loader and the live watcher, on every Python version."""

from datetime import datetime, timezone

import pandas as pd
import pytest
from hypothesis import given
from hypothesis import strategies as st

from seqmine._util.isotime import iso_seconds, parse_iso_datetime


@pytest.mark.parametrize("text, expected", [
    # reference: datetime(...).timestamp() of the same instant, from the standard library
    ("2026-03-02T09:15:30Z", datetime(2026, 3, 2, 9, 15, 30, tzinfo=timezone.utc)),
    ("2026-03-02T09:15:30.123456789Z",
     datetime(2026, 3, 2, 9, 15, 30, 123456, tzinfo=timezone.utc)),
    ("2026-03-02 09:15", datetime(2026, 3, 2, 9, 15, tzinfo=timezone.utc)),
    ("2026-03-02T10:15:30+01:00", datetime(2026, 3, 2, 9, 15, 30, tzinfo=timezone.utc)),
    ("2026-03-02T04:15:30-0500", datetime(2026, 3, 2, 9, 15, 30, tzinfo=timezone.utc)),
    ("2026-03-02", datetime(2026, 3, 2, tzinfo=timezone.utc)),
    ("1600-01-01T00:00:00Z", datetime(1600, 1, 1, tzinfo=timezone.utc)),
])
def test_iso_seconds_match_the_standard_library(text, expected):
    assert iso_seconds(text) == expected.timestamp()


@pytest.mark.parametrize("text", ["ten", "12:00", "2026-13-01", "2026-03-02T25:00",
                                  "2026-03-02T09:00+25:00"])
def test_not_iso_raises_value_error(text):
    with pytest.raises(ValueError):
        parse_iso_datetime(text)


@given(st.datetimes(min_value=datetime(1970, 1, 1), max_value=datetime(2099, 12, 31)),
       st.sampled_from(["Z", "+00:00", "+02:00", "-07:30", ""]),
       st.sampled_from(["T", " "]))
def test_agrees_with_pandas_iso8601(stamp, zone, sep):
    # reference: pandas.to_datetime(format="ISO8601"), the loader's bulk parser
    text = stamp.isoformat(sep=sep) + zone
    expected = pd.to_datetime(text, format="ISO8601", utc=True)
    assert iso_seconds(text) == pytest.approx(
        (expected - pd.Timestamp("1970-01-01", tz="UTC")) / pd.Timedelta(seconds=1), abs=1e-6)


def test_loader_reads_naive_times_as_utc_beside_zoned_ones():
    # regression: one call with naive and zoned strings gave the naive ones the zoned
    # strings' offset (pandas before 3); reference values from the standard library
    from seqmine.inputs.load import parse_times
    values = ["2026-03-01T11:00:00+01:00", "2026-03-01 10:00:05", "2026-03-01",
              "2026-03-01T10:00:05.250Z"]
    seconds, reasons, kind = parse_times(values)
    expected = [datetime(2026, 3, 1, 10, 0, 0, tzinfo=timezone.utc).timestamp(),
                datetime(2026, 3, 1, 10, 0, 5, tzinfo=timezone.utc).timestamp(),
                datetime(2026, 3, 1, tzinfo=timezone.utc).timestamp(),
                datetime(2026, 3, 1, 10, 0, 5, 250000, tzinfo=timezone.utc).timestamp()]
    assert kind == "iso" and list(reasons) == [None] * 4
    assert list(seconds) == pytest.approx(expected, abs=1e-6)
