"""Text timestamps: the fast ISO-8601 path gives the instants pandas gives.

Reference: pandas.to_datetime(utc=True), an independent ISO-8601 parser (general-purpose library).
"""

from __future__ import annotations

from datetime import UTC, datetime, timedelta

import pandas as pd
import polars as pl
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from ingest.reader import parse_iso_utc

offsets = st.sampled_from(["Z", "+00:00", "+01:00", "-05:00", "+05:30", "+0200", "-0330"])
instants = st.datetimes(min_value=datetime(2000, 1, 1), max_value=datetime(2099, 12, 31))


def _text(dt: datetime, off: str, digits: int, sep: str) -> str:
    frac = f"{dt.microsecond:06d}"[:digits]
    return dt.strftime(f"%Y-%m-%d{sep}%H:%M:%S") + (f".{frac}" if digits else "") + off


@settings(max_examples=60, deadline=None)
@given(st.lists(st.tuples(instants, offsets), min_size=1, max_size=40), st.sampled_from([0, 3, 6]),
       st.sampled_from(["T", " "]))
def test_offsets_converted_to_utc_like_pandas(values, digits, sep):
    text = [_text(dt, off, digits, sep) for dt, off in values]
    got = parse_iso_utc(pl.Series("time", text))
    want = pd.to_datetime(pd.Series(text), utc=True, format="ISO8601")
    assert got.dtype == pl.Datetime("us", "UTC")
    assert got.dt.epoch("us").to_list() == want.dt.as_unit("us").astype("int64").tolist()


def test_naive_text_is_taken_as_utc_and_nulls_stay_null():
    got = parse_iso_utc(pl.Series("time", ["2026-11-30T22:00:00.250", None, "2026-11-30 23:59:59"]))
    want = [datetime(2026, 11, 30, 22, 0, 0, 250000, tzinfo=UTC), None,
            datetime(2026, 11, 30, 23, 59, 59, tzinfo=UTC)]
    assert [v if v is None else v.astimezone(UTC) for v in got.to_list()] == want


def test_offset_shifts_the_instant():
    # "+01:00" is one hour ahead of UTC (ISO 8601 time-zone designator)
    a, b = parse_iso_utc(pl.Series(["2026-11-30T23:00:00+01:00", "2026-11-30T22:00:00Z"])).to_list()
    assert a == b and a - b == timedelta(0)


@pytest.mark.parametrize("text", [["2026-11-30T22:00:00Z", "2026-11-30T22:00:01"], ["not a time"]])
def test_what_the_fast_parser_refuses_fails_as_polars_does(text):
    s = pl.Series("time", text)
    with pytest.raises(pl.exceptions.PolarsError) as want:
        s.str.to_datetime(time_zone="UTC", time_unit="us", strict=True)
    with pytest.raises(type(want.value)):
        parse_iso_utc(s)
