"""The one time rule of every input (linkfold.inputs.times): RFC 3339 §5.6-5.8, ISO 8601 forms, POSIX
epoch values and our documented conventions; tests/cases/times.tsv holds the table, with a source each."""

from __future__ import annotations

import csv
import json
from datetime import UTC, datetime
from pathlib import Path

import pytest

from linkfold.inputs import BadTime, parse_time


@pytest.mark.parametrize(("text", "expected"), [
    # RFC 3339 §5.8, first example: fractional seconds in UTC.
    ("1985-04-12T23:20:50.52Z", datetime(1985, 4, 12, 23, 20, 50, 520000, tzinfo=UTC)),
    # RFC 3339 §5.8: "equivalent to 1996-12-20T00:39:57Z in UTC".
    ("1996-12-19T16:39:57-08:00", datetime(1996, 12, 20, 0, 39, 57, tzinfo=UTC)),
    # RFC 3339 §5.8: the leap second at the end of 1990, in UTC and at -08:00. POSIX time has no leap
    # seconds, so it is read as the next instant (our convention, documented).
    ("1990-12-31T23:59:60Z", datetime(1991, 1, 1, 0, 0, 0, tzinfo=UTC)),
    ("1990-12-31T15:59:60-08:00", datetime(1991, 1, 1, 0, 0, 0, tzinfo=UTC)),
    # RFC 3339 §5.8: "the same instant of time as noon, January 1, 1937, Netherlands time" (+00:20).
    ("1937-01-01T12:00:27.87+00:20", datetime(1937, 1, 1, 11, 40, 27, 870000, tzinfo=UTC)),
])
def test_rfc3339_examples(text, expected):
    assert parse_time(text) == expected


@pytest.mark.parametrize(("value", "expected"), [
    # POSIX.1 "Seconds Since the Epoch": 0 is 1970-01-01T00:00:00Z.
    (0, datetime(1970, 1, 1, tzinfo=UTC)),
    ("-1", datetime(1969, 12, 31, 23, 59, 59, tzinfo=UTC)),
    # 10^9 seconds: 2001-09-09T01:46:40Z (a widely quoted value, from memory; it also follows from the
    # POSIX formula: 11574 days of 86400 s plus 6400 s).
    (1_000_000_000, datetime(2001, 9, 9, 1, 46, 40, tzinfo=UTC)),
    ("1000000000.5", datetime(2001, 9, 9, 1, 46, 40, 500000, tzinfo=UTC)),
    # The same instant in milliseconds (values >= 1e11 are milliseconds: common practice, no source).
    (1_000_000_000_000, datetime(2001, 9, 9, 1, 46, 40, tzinfo=UTC)),
    ("1000000000000", datetime(2001, 9, 9, 1, 46, 40, tzinfo=UTC)),
])
def test_epoch_values(value, expected):
    assert parse_time(value) == expected


def test_posix_formula_for_the_billion():
    assert 11574 * 86400 + 6400 == 1_000_000_000


def test_naive_time_is_utc():
    assert parse_time("2031-05-04 10:00") == datetime(2031, 5, 4, 10, 0, tzinfo=UTC)


def test_basic_format_date_is_a_date_not_an_epoch():
    # ISO 8601 basic format YYYYMMDD; as epoch seconds it would be in August 1970.
    assert parse_time("20310504") == datetime(2031, 5, 4, tzinfo=UTC)


def test_result_is_always_utc():
    assert parse_time("2031-05-04T10:00:00+02:00").utcoffset().total_seconds() == 0


@pytest.mark.parametrize("value", ["", "  ", "yesterday", "2031-13-01", "2031-05-04T25:00", True, None,
                                   {"t": 1}, float("nan"), float("inf"), 10**20, "1e9"])
def test_bad_times(value):
    with pytest.raises(BadTime):
        parse_time(value)


def _cases() -> list:
    with (Path(__file__).parent / "cases" / "times.tsv").open(encoding="utf-8", newline="") as fh:
        rows = list(csv.DictReader(fh, delimiter="\t", quoting=csv.QUOTE_NONE))
    return [pytest.param(r["input"], r["type"], r["expected"], id=f"{r['type']}:{r['input'] or 'empty'}")
            for r in rows]


@pytest.mark.parametrize(("raw", "kind", "expected"), _cases())
def test_the_time_table(raw, kind, expected):
    value = json.loads(raw) if kind == "json" else raw
    if kind == "json" and raw == "NaN":
        value = float("nan")
    if expected == "error":
        with pytest.raises(BadTime):
            parse_time(value)
    else:
        got = parse_time(value)
        assert got.tzinfo is UTC and got.isoformat() == expected


def test_every_case_names_its_source():
    with (Path(__file__).parent / "cases" / "times.tsv").open(encoding="utf-8") as fh:
        rows = list(csv.DictReader(fh, delimiter="\t", quoting=csv.QUOTE_NONE))
    assert len(rows) >= 40 and all(r["source"].strip() for r in rows)


def test_a_bad_time_never_repeats_the_value():
    # docs/ingest.md, "What is stored": a reject keeps no field of a parsed record.
    for value in ["panel-person-0042", "2031-05-04T08:00:60Z", "2031-05-04x08:00", "1985-13-12"]:
        with pytest.raises(BadTime) as caught:
            parse_time(value)
        assert value not in str(caught.value)

