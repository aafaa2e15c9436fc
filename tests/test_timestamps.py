"""ISO-8601 time stamps and decimal commas in sensor tables, against Python's datetime."""

from __future__ import annotations

import datetime as dt

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from filtertwin.errors import UserInputError
from filtertwin.files import recordings
from filtertwin.files.timestamps import is_iso_time, parse_iso_time, seconds_since_many

# The forms loggers write (ISO 8601 extended format, "T" or space): no zone, "Z", +HH:MM and
# +HHMM offsets, 0 to 6 fractional digits with "." or ",".
ZONES = st.sampled_from([None, dt.timedelta(0), dt.timedelta(hours=1),
                         dt.timedelta(hours=-5, minutes=-30), dt.timedelta(hours=9)])  # fmt: skip
MOMENTS = st.datetimes(min_value=dt.datetime(1990, 1, 1), max_value=dt.datetime(2090, 1, 1))


def write(moment: dt.datetime, zone: dt.timedelta | None, digits: int, sep: str, z: str) -> str:
    if zone is not None:
        moment = moment.replace(tzinfo=dt.timezone(zone))
    spec = {0: "seconds", 3: "milliseconds", 6: "microseconds"}[digits]
    text = moment.isoformat(sep=sep, timespec=spec)
    if zone == dt.timedelta(0) and z == "Z":
        text = text[:-6] + "Z"
    return text


@settings(max_examples=300, deadline=None)
@given(MOMENTS, MOMENTS, ZONES, st.sampled_from([0, 3, 6]), st.sampled_from(["T", " "]),
       st.sampled_from(["Z", "+00:00"]))  # fmt: skip
def test_seconds_between_stamps_agree_with_datetime_fromisoformat(a, b, zone, digits, sep, z):
    ta, tb = write(a, zone, digits, sep, z), write(b, zone, digits, sep, z)
    # Python's datetime.fromisoformat (3.11) is the reference
    expected = (dt.datetime.fromisoformat(tb) - dt.datetime.fromisoformat(ta)).total_seconds()
    assert parse_iso_time(tb).since(parse_iso_time(ta)) == pytest.approx(expected, abs=1e-6)


def test_zone_offsets_decimal_comma_and_nanoseconds():
    ref = parse_iso_time("2024-03-01T12:00:00Z")
    # datetime.fromisoformat: the same instant in three zones
    for text in ("2024-03-01T13:00:00+01:00", "2024-03-01T13:00:00+0100",
                 "2024-03-01T06:30:00-05:30"):  # fmt: skip
        want = (dt.datetime.fromisoformat(text) - dt.datetime.fromisoformat(
            "2024-03-01T12:00:00+00:00")).total_seconds()  # fmt: skip
        assert parse_iso_time(text).since(ref) == want == 0.0
    assert parse_iso_time("2024-03-01T12:00:00,25Z").since(ref) == 0.25
    # nanoseconds a day later still resolve (datetime stops at microseconds)
    later = parse_iso_time("2024-03-02T12:00:00.000000001Z").since(ref)
    assert later - 86400 == pytest.approx(1e-9, abs=2e-11)  # float64 spacing at 86400 s
    assert not is_iso_time("2024-02-30T00:00:00") and not is_iso_time("12:00:00")


def test_csv_with_iso_time_column_and_decimal_commas(tmp_path):
    rate = 1000.0
    start = dt.datetime(2024, 3, 1, 23, 59, 59, 500000, tzinfo=dt.UTC)
    values = np.round(np.sin(np.arange(2000) / 7.0), 6)
    rows = []
    for i, v in enumerate(values):
        stamp = (start + dt.timedelta(seconds=i / rate)).isoformat(timespec="microseconds")
        rows.append(f"{stamp.replace('+00:00', 'Z').replace('.', ',')};{v:.6f}".replace(".", ","))
    path = tmp_path / "logger.csv"
    path.write_text("timestamp;accel\n" + "\n".join(rows) + "\n")
    info = recordings.inspect(path)
    # the rate is 1 / step of the stamps, across midnight (datetime arithmetic above)
    assert info.rate_hz == pytest.approx(rate, rel=1e-9)
    assert info.channel_names == ("accel",) and info.layout.decimal_comma
    np.testing.assert_array_equal(recordings.read_all(info)[:, 0], values)


def test_iso_time_column_is_found_without_a_time_name(tmp_path):
    path = tmp_path / "x.csv"
    path.write_text("when,x\n2024-03-01T00:00:00.000,1\n2024-03-01T00:00:00.002,2\n"
                    "2024-03-01T00:00:00.004,3\n")  # fmt: skip
    info = recordings.inspect(path)
    assert info.rate_hz == pytest.approx(500.0)  # 2 ms steps
    assert info.channel_names == ("x",)


@settings(max_examples=100, deadline=None)
@given(st.lists(MOMENTS, min_size=1, max_size=40), ZONES, st.sampled_from([0, 3, 6]),
       st.sampled_from(["T", " "]))  # fmt: skip
def test_a_column_of_stamps_read_as_arrays_equals_datetime_and_the_one_by_one_reader(
    moments, zone, digits, sep
):
    texts = [write(m, zone, digits, sep, "Z") for m in moments]
    ref = parse_iso_time(texts[0])
    got = seconds_since_many(texts, ref)
    # Python's datetime.fromisoformat (3.11) is the reference; dates cross months, leap days
    # and centuries (1990-2090)
    first = dt.datetime.fromisoformat(texts[0])
    expected = [(dt.datetime.fromisoformat(x) - first).total_seconds() for x in texts]
    np.testing.assert_allclose(got, expected, rtol=0, atol=1e-6)
    # and bit for bit what parse_iso_time gives stamp by stamp
    assert got.tolist() == [parse_iso_time(x).since(ref) for x in texts]


def test_stamps_not_written_alike_or_impossible_are_refused_by_the_array_reader(tmp_path):
    ref = parse_iso_time("2024-02-28T00:00:00Z")
    for texts in (["2024-02-28T00:00:00Z", "2024-02-28T00:00:00+00:00"],  # two zone forms
                  ["2024-02-28T00:00:00Z", "2023-02-29T00:00:00Z"],  # no 29 Feb in 2023
                  ["2024-02-28T00:00:00Z", "2024-02-28T24:00:00Z"]):  # fmt: skip
        with pytest.raises(ValueError):
            seconds_since_many(texts, ref)
    # a file mixing the two zone forms is still read (row by row): 1 ms steps
    path = tmp_path / "mixed.csv"
    path.write_text("time,x\n2024-03-01T00:00:00.000Z,1\n2024-03-01T00:00:00.001+00:00,2\n"
                    "2024-03-01T00:00:00.002Z,3\n")  # fmt: skip
    assert recordings.inspect(path).rate_hz == pytest.approx(1000.0)
    # and an impossible date is named with its row
    path.write_text("time,x\n2024-02-28T23:59:59.999Z,1\n2024-02-30T00:00:00.000Z,2\n")
    with pytest.raises(UserInputError, match="line 3.*2024-02-30"):
        recordings.inspect(path)
