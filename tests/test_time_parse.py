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


_ENDS = st.sampled_from(["Z", "+00:00", "+01:00", "-05:00", "+0200", "-0330", "", "", ".125", ":00"])


@settings(max_examples=150, deadline=None)
@given(st.lists(st.one_of(st.none(), st.tuples(instants, _ENDS), st.sampled_from(["2026-11-30", "-11-30", "garbage"])),
                min_size=1, max_size=90),
       st.sampled_from(["T", " "]))
def test_offsets_found_in_a_batch_are_those_of_its_values(values, sep):
    # The distinct UTC offsets a batch's timestamps carry, by its fast tests, against the
    # definition applied to every value one by one: "Z" or a signed hh[:]mm at the end.
    import re

    from ingest.reader import _OFFSET, _offsets_of

    text = [v if v is None or isinstance(v, str) else v[0].strftime(f"%Y-%m-%d{sep}%H:%M:%S") + v[1] for v in values]
    want = sorted({m.group(1) for v in text if v is not None and (m := re.search(_OFFSET, v[-6:]))})
    got = _offsets_of("time")(pl.DataFrame({"time": pl.Series(text, dtype=pl.String)}))
    assert got == want


@pytest.mark.parametrize("end, want", [("Z", ["Z"]), ("+01:00", ["+01:00"]), ("-0500", ["-0500"]), ("", []),
                                        (".250", [])])
def test_offsets_of_a_batch_with_one_form(end, want):
    from ingest.reader import _offsets_of

    text = [f"2026-11-30T22:{m:02d}:00{end}" for m in range(60)] + [None]
    assert _offsets_of("time")(pl.DataFrame({"time": pl.Series(text, dtype=pl.String)})) == want
    # one odd value later in the batch is found too
    odd = ["2026-11-30T23:00:00+02:00", *text]
    assert _offsets_of("time")(pl.DataFrame({"time": pl.Series(odd[1:] + odd[:1], dtype=pl.String)})) == sorted({*want, "+02:00"})
