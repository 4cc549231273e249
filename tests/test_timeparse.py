"""Timestamp parsing: every format against instants computed independently with datetime."""
from __future__ import annotations

from datetime import datetime, timedelta, timezone
from zoneinfo import ZoneInfo

import numpy as np
import pyarrow as pa
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from warehouse.errors import BadInputError
from warehouse.ingest.timeparse import (
    FORMATS,
    REASON_AMBIGUOUS,
    REASON_NONEXISTENT,
    REASON_UNPARSABLE,
    REASONS,
    guess_time_format,
    parse_times,
)

UTC = timezone.utc
EPOCH = datetime(1970, 1, 1, tzinfo=UTC)
BERLIN = ZoneInfo("Europe/Berlin")
NEW_YORK = ZoneInfo("America/New_York")
OK, UNPARSABLE, AMBIGUOUS, NONEXISTENT = 0, 1, 2, 3


def us_of(moment: datetime) -> int:
    """Microseconds since the epoch of an aware datetime, by exact integer arithmetic."""
    return (moment - EPOCH) // timedelta(microseconds=1)


def local_us(zone: ZoneInfo, *fields: int) -> int:
    return us_of(datetime(*fields, tzinfo=zone))


def parse_one(text: str | None, fmt: str, zone: str | None = None) -> tuple[int, int]:
    ts, reason = parse_times([text], fmt, zone)
    return int(ts[0]), int(reason[0])


def test_reason_table_matches_codes() -> None:
    assert REASONS == ("", REASON_UNPARSABLE, REASON_AMBIGUOUS, REASON_NONEXISTENT)
    assert FORMATS == ("iso", "mdy", "dmy", "ymd-utc", "epoch_s", "epoch_ms")


@pytest.mark.parametrize(
    ("text", "fmt", "zone", "expected"),
    [
        ("2026-03-02T08:00:00Z", "iso", "Europe/Berlin", datetime(2026, 3, 2, 8, tzinfo=UTC)),
        ("2026-03-02 08:00:00", "iso", None, datetime(2026, 3, 2, 8, tzinfo=UTC)),
        ("2026-03-02T08:00:00", "iso", "Europe/Berlin", datetime(2026, 3, 2, 8, tzinfo=BERLIN)),
        ("2026-07-02 08:00", "iso", "America/New_York",
         datetime(2026, 7, 2, 8, tzinfo=NEW_YORK)),
        ("03/02/2026 08:00:15.123", "mdy", "Europe/Berlin",
         datetime(2026, 3, 2, 8, 0, 15, 123000, tzinfo=BERLIN)),
        ("3/2/2026 8:05:09", "mdy", None, datetime(2026, 3, 2, 8, 5, 9, tzinfo=UTC)),
        ("12/31/2026 11:59:59 PM", "mdy", None, datetime(2026, 12, 31, 23, 59, 59, tzinfo=UTC)),
        ("12/31/2026 12:00:00 AM", "mdy", None, datetime(2026, 12, 31, 0, 0, 0, tzinfo=UTC)),
        ("25.03.2026 08:00:00", "dmy", "Europe/Berlin", datetime(2026, 3, 25, 8, tzinfo=BERLIN)),
        ("25/03/2026 08:00", "dmy", None, datetime(2026, 3, 25, 8, tzinfo=UTC)),
        ("5.1.2026 17:45:30,25", "dmy", None,
         datetime(2026, 1, 5, 17, 45, 30, 250000, tzinfo=UTC)),
        ("2026-03-02 08:01:00 UTC", "ymd-utc", "America/New_York",
         datetime(2026, 3, 2, 8, 1, tzinfo=UTC)),
        ("1772438400", "epoch_s", "Europe/Berlin", datetime(2026, 3, 2, 8, tzinfo=UTC)),
        ("1772438400.25", "epoch_s", None, datetime(2026, 3, 2, 8, 0, 0, 250000, tzinfo=UTC)),
        ("-86400", "epoch_s", None, datetime(1969, 12, 31, tzinfo=UTC)),
        ("1772438400123", "epoch_ms", "Europe/Berlin",
         datetime(2026, 3, 2, 8, 0, 0, 123000, tzinfo=UTC)),
        ("1772438400123.5", "epoch_ms", None,
         datetime(2026, 3, 2, 8, 0, 0, 123500, tzinfo=UTC)),
        ("02.03.26 08:00", "%d.%m.%y %H:%M", "Europe/Berlin",
         datetime(2026, 3, 2, 8, tzinfo=BERLIN)),
        ("2026/03/02-08:00:00.5+0530", "%Y/%m/%d-%H:%M:%S.%f%z", "Europe/Berlin",
         datetime(2026, 3, 2, 8, 0, 0, 500000, tzinfo=timezone(timedelta(hours=5, minutes=30)))),
    ],
)
def test_formats_give_known_instants(text: str, fmt: str, zone: str | None,
                                     expected: datetime) -> None:
    assert parse_one(text, fmt, zone) == (us_of(expected), OK)


def test_calendar_edges() -> None:
    texts = ["0001-01-01T00:00:00Z", "9999-12-31T23:59:59.999999Z", "2024-02-29T12:00:00Z",
             "2000-02-29T00:00:00Z", "1969-12-31T23:59:59.5Z", "1900-03-01T00:00:00Z"]
    ts, reason = parse_times(texts, "iso", None)
    expected = [us_of(datetime.fromisoformat(t.replace("Z", "+00:00"))) for t in texts]
    assert ts.tolist() == expected
    assert not reason.any()


@pytest.mark.parametrize(
    ("fraction", "micro"),
    [(".1", 100000), (".12", 120000), (".123", 123000), (".000001", 1), (".123456", 123456),
     (".1234567", 123456), (".999999999", 999999), (",5", 500000), ("", 0)],
)
def test_fractional_seconds(fraction: str, micro: int) -> None:
    base = us_of(datetime(2026, 3, 2, 8, 0, 15, tzinfo=UTC))
    assert parse_one(f"2026-03-02T08:00:15{fraction}Z", "iso") == (base + micro, OK)
    assert parse_one(f"03/02/2026 08:00:15{fraction}", "mdy") == (base + micro, OK)


def test_mixed_offsets_in_one_array_ignore_the_zone() -> None:
    texts = ["2026-03-02T08:00:00+01:00", "2026-03-02T08:00:00-0530", "2026-03-02T08:00:00Z",
             "2026-03-02 08:00:00+09", "2026-03-02T08:00:00.5-00:30", "2026-03-02T08:00:00"]
    ts, reason = parse_times(texts, "iso", "America/New_York")
    zones = [timezone(timedelta(hours=1)), timezone(-timedelta(hours=5, minutes=30)), UTC,
             timezone(timedelta(hours=9)), timezone(-timedelta(minutes=30)), NEW_YORK]
    micros = [0, 0, 0, 0, 500000, 0]
    expected = [us_of(datetime(2026, 3, 2, 8, 0, 0, m, tzinfo=z)) for z, m in zip(zones, micros)]
    assert ts.tolist() == expected
    assert reason.tolist() == [OK] * 6


@pytest.mark.parametrize(
    ("zone", "gap", "overlap"),
    [
        (BERLIN, datetime(2026, 3, 29, 2, 30), datetime(2026, 10, 25, 2, 30)),
        (NEW_YORK, datetime(2026, 3, 8, 2, 30), datetime(2026, 11, 1, 1, 30)),
    ],
)
def test_dst_gap_and_overlap_are_flagged_and_neighbours_kept(
        zone: ZoneInfo, gap: datetime, overlap: datetime) -> None:
    hour = timedelta(hours=1)
    walls = [gap - hour, gap, gap + hour, overlap - hour, overlap, overlap + hour]
    # A gap/overlap row among fixed-offset rows must not disturb them.
    texts = [w.isoformat(sep=" ") for w in walls] + ["2026-03-29T02:30:00+02:00"]
    ts, reason = parse_times(texts, "iso", zone.key)
    assert reason.tolist() == [OK, NONEXISTENT, OK, OK, AMBIGUOUS, OK, OK]
    for i in (0, 2, 3, 5):
        assert ts[i] == us_of(walls[i].replace(tzinfo=zone))
    assert ts[1] == 0 and ts[4] == 0
    assert ts[6] == us_of(datetime(2026, 3, 29, 0, 30, tzinfo=UTC))
    assert REASONS[reason[1]] == REASON_NONEXISTENT
    assert REASONS[reason[4]] == REASON_AMBIGUOUS


def test_dst_edges_to_the_microsecond() -> None:
    texts = ["03/29/2026 01:59:59.999999", "03/29/2026 02:00:00", "03/29/2026 02:59:59.999999",
             "03/29/2026 03:00:00", "10/25/2026 01:59:59.999999", "10/25/2026 02:00:00",
             "10/25/2026 02:59:59.999999", "10/25/2026 03:00:00"]
    ts, reason = parse_times(texts, "mdy", "Europe/Berlin")
    assert reason.tolist() == [OK, NONEXISTENT, NONEXISTENT, OK, OK, AMBIGUOUS, AMBIGUOUS, OK]
    assert ts[0] == local_us(BERLIN, 2026, 3, 29, 1, 59, 59, 999999)
    assert ts[3] == local_us(BERLIN, 2026, 3, 29, 3)
    assert ts[4] == local_us(BERLIN, 2026, 10, 25, 1, 59, 59, 999999)
    assert ts[7] == local_us(BERLIN, 2026, 10, 25, 3)


def test_utc_zone_never_flags_dst() -> None:
    texts = ["2026-03-29 02:30:00", "2026-10-25 02:30:00"]
    for zone in (None, "UTC", "Etc/UTC", "utc"):
        ts, reason = parse_times(texts, "iso", zone)
        assert not reason.any()
        assert ts[0] == us_of(datetime(2026, 3, 29, 2, 30, tzinfo=UTC))


BAD_CELLS = [
    None, "", "   ", "garbage", "2026-03-02", "2026-13-02T08:00:00", "2026-02-29 08:00:00",
    "2026-03-02T24:00:00", "2026-03-02T08:60:00", "2026-03-02T08:00:60",
    "2026-03-02T08:00:00+24:00", "2026-03-02T08:00:00.Z", "2026-03-02T08:00:00.1234567890",
    "2026-03-02T08:00:00 Z", "0000-01-01T00:00:00", "02/30/2026 08:00:00", "03/02/2026",
    "13/02/2026 08:00", "03.02/2026 08:00", "03/02/2026 13:00 PM", "03/02/2026 00:00 AM",
    "25.03.2026 08:00:00", "2026-03-02 08:00:00 UTC", "1.5e9", "12ab", "-", "\u00e9t\u00e9",
]
# Cells from BAD_CELLS that some format does accept.
VALID_FOR = {"ymd-utc": {"2026-03-02 08:00:00 UTC"},
             "dmy": {"25.03.2026 08:00:00", "13/02/2026 08:00"}}


@pytest.mark.parametrize("fmt", [*FORMATS, "%Y-%m-%d %H:%M:%S"])
def test_garbage_is_unparsable_without_raising(fmt: str) -> None:
    cells = [c for c in BAD_CELLS if c not in VALID_FOR.get(fmt, set())]
    ts, reason = parse_times(cells, fmt, "Europe/Berlin")
    assert reason.dtype == np.int8 and ts.dtype == np.int64
    assert reason.tolist() == [UNPARSABLE] * len(cells)
    assert not ts.any()


def test_good_rows_survive_among_bad_ones() -> None:
    texts = ["garbage", "2026-03-02T08:00:00Z", None, "", "2026-03-02T09:00:00Z",
             "2026-02-30T00:00:00Z"]
    ts, reason = parse_times(texts, "iso", None)
    assert reason.tolist() == [UNPARSABLE, OK, UNPARSABLE, UNPARSABLE, OK, UNPARSABLE]
    assert ts.tolist() == [0, us_of(datetime(2026, 3, 2, 8, tzinfo=UTC)), 0, 0,
                           us_of(datetime(2026, 3, 2, 9, tzinfo=UTC)), 0]


def test_padding_whitespace_and_quotes_are_tolerated() -> None:
    expected = us_of(datetime(2026, 3, 2, 8, 0, 15, 123000, tzinfo=UTC))
    for text in ['"03/02/2026 08:00:15.123"', " 03/02/2026 08:00:15.123\t",
                 "'03/02/2026 08:00:15.123'", ' " 03/02/2026 08:00:15.123 " \r\n']:
        assert parse_one(text, "mdy") == (expected, OK)
    assert parse_one('"1772438400"', "epoch_s") == (us_of(datetime(2026, 3, 2, 8, tzinfo=UTC)), OK)


def test_arrow_inputs_of_every_shape_agree() -> None:
    texts = ["2026-03-02T08:00:00Z", "2026-03-02T08:00:01.5+01:00", None, "x",
             "2026-03-02 08:00:02"]
    expected_ts, expected_reason = parse_times(texts, "iso", "Europe/Berlin")
    padded = pa.array(["junk", *texts, "junk"])
    shapes = [
        pa.array(texts),
        pa.array(texts, type=pa.large_string()),
        pa.chunked_array([texts[:2], [], texts[2:]]),
        padded.slice(1, len(texts)),
        pa.array(texts).dictionary_encode(),
    ]
    for values in shapes:
        ts, reason = parse_times(values, "iso", "Europe/Berlin")
        assert ts.tolist() == expected_ts.tolist()
        assert reason.tolist() == expected_reason.tolist()
    assert expected_reason.tolist() == [OK, OK, UNPARSABLE, UNPARSABLE, OK]


def test_non_string_arrow_column_is_read_as_text() -> None:
    ts, reason = parse_times(pa.array([1772438400, None]), "epoch_s", None)
    assert ts.tolist() == [us_of(datetime(2026, 3, 2, 8, tzinfo=UTC)), 0]
    assert reason.tolist() == [OK, UNPARSABLE]


def test_empty_input() -> None:
    for values in ([], pa.array([], type=pa.string()), pa.chunked_array([], type=pa.string())):
        ts, reason = parse_times(values, "iso", "Europe/Berlin")
        assert len(ts) == 0 and len(reason) == 0


def test_unknown_format_or_zone_is_an_input_error() -> None:
    with pytest.raises(BadInputError):
        parse_times(["2026-03-02T08:00:00"], "yyyy-mm-dd", None)
    with pytest.raises(BadInputError):
        parse_times(["2026-03-02T08:00:00"], "iso", "Nowhere/Special")
    with pytest.raises(BadInputError):
        parse_times(["2026-03-02"], "%Y-%Q", None)


@pytest.mark.parametrize(
    ("samples", "expected"),
    [
        (["2026-03-02T08:00:00Z", "2026-03-02T08:00:15.5+01:00"], "iso"),
        (["2026-03-02 08:00:00", "", None], "iso"),
        (["03/02/2026 08:00:15.123", "03/02/2026 08:00:30.120"], "mdy"),
        (["03/02/2026 08:00:00"], "mdy"),
        (["03/02/2026 08:00:00", "03/25/2026 08:00:00"], "mdy"),
        (["03/02/2026 08:00:00", "25/03/2026 08:00:00"], "dmy"),
        (["25.03.2026 08:00:00"], "dmy"),
        (["03.02.2026 08:00:00"], "dmy"),
        (['"2026-03-02 08:01:00 UTC"'], "ymd-utc"),
        (["1772438400", "1772438460.5"], "epoch_s"),
        (["1772438400123"], "epoch_ms"),
        (["177243840012"], "epoch_ms"),
        (["17724384"], None),
        (["12.5", "13"], None),
        (["1772438400", "hello"], None),
        (["", " ", None], None),
        ([], None),
    ],
)
def test_guess_time_format(samples: list[str], expected: str | None) -> None:
    assert guess_time_format(samples) == expected


OFFSETS = st.integers(min_value=-(23 * 60 + 59), max_value=23 * 60 + 59).map(
    lambda m: timezone(timedelta(minutes=m)))
AWARE = st.datetimes(min_value=datetime(1, 1, 2), max_value=datetime(9999, 12, 30),
                     timezones=OFFSETS)


def iso_text(moment: datetime, sep: str, digits: int, style: str) -> str:
    """ISO text of moment with `digits` fraction digits and the offset written in `style`."""
    text = moment.replace(tzinfo=None).isoformat(sep=sep, timespec="seconds")
    if digits:
        text += "." + f"{moment.microsecond:06d}"[:digits]
    minutes = int(moment.utcoffset().total_seconds()) // 60
    sign, minutes = ("-" if minutes < 0 else "+"), abs(minutes)
    if style == "Z" and minutes == 0:
        return text + "Z"
    if style == "compact":
        return text + f"{sign}{minutes // 60:02d}{minutes % 60:02d}"
    if style == "hours" and minutes % 60 == 0:
        return text + f"{sign}{minutes // 60:02d}"
    return text + f"{sign}{minutes // 60:02d}:{minutes % 60:02d}"


@settings(max_examples=120, deadline=None)
@given(st.lists(st.tuples(AWARE, st.sampled_from("T "), st.integers(0, 6),
                          st.sampled_from(["Z", "colon", "compact", "hours"])),
                min_size=1, max_size=8))
def test_aware_iso_round_trips_exactly(rows: list[tuple[datetime, str, int, str]]) -> None:
    texts, expected = [], []
    for moment, sep, digits, style in rows:
        texts.append(iso_text(moment, sep, digits, style))
        kept = moment.microsecond // 10 ** (6 - digits) * 10 ** (6 - digits)
        expected.append(us_of(moment.replace(microsecond=kept)))
    ts, reason = parse_times(texts, "iso", "America/New_York")
    assert reason.tolist() == [OK] * len(texts), texts
    assert ts.tolist() == expected, texts
    # A trailing null changes the internal read path; results must not change.
    ts_null, reason_null = parse_times([*texts, None], "iso", None)
    assert ts_null[:-1].tolist() == expected and reason_null[-1] == UNPARSABLE


def zone_verdict(wall: datetime, zone: ZoneInfo) -> tuple[int, int]:
    """(reason, us) for a wall-clock time in zone, decided by zoneinfo's fold semantics."""
    early = wall.replace(tzinfo=zone, fold=0)
    late = wall.replace(tzinfo=zone, fold=1)
    if early.astimezone(UTC).astimezone(zone).replace(tzinfo=None) != wall:
        return NONEXISTENT, 0
    if early.utcoffset() != late.utcoffset():
        return AMBIGUOUS, 0
    return OK, us_of(early)


TRANSITION_WALLS = {
    "Europe/Berlin": [datetime(2026, 3, 29, 2), datetime(2026, 10, 25, 2),
                      datetime(2061, 3, 27, 2), datetime(1980, 4, 6, 2)],
    "America/New_York": [datetime(2026, 3, 8, 2), datetime(2026, 11, 1, 1),
                         datetime(2070, 11, 2, 1)],
    "Australia/Lord_Howe": [datetime(2026, 4, 5, 1, 30), datetime(2026, 10, 4, 2)],
    "America/Sao_Paulo": [datetime(2018, 11, 4, 0), datetime(2018, 2, 17, 23)],
}
ANY_WALL = st.datetimes(min_value=datetime(1900, 1, 1), max_value=datetime(2100, 1, 1))


def walls_near_transitions(zone_name: str) -> st.SearchStrategy[list[datetime]]:
    near = st.builds(lambda base, shift: base + timedelta(seconds=shift),
                     st.sampled_from(TRANSITION_WALLS[zone_name]),
                     st.integers(min_value=-9000, max_value=9000))
    return st.lists(st.one_of(near, ANY_WALL), min_size=1, max_size=12)


@settings(max_examples=80, deadline=None)
@given(st.sampled_from(sorted(TRANSITION_WALLS)).flatmap(
    lambda name: st.tuples(st.just(name), walls_near_transitions(name))))
def test_naive_local_times_match_zoneinfo(case: tuple[str, list[datetime]]) -> None:
    zone_name, walls = case
    zone = ZoneInfo(zone_name)
    ts, reason = parse_times([w.isoformat(sep=" ") for w in walls], "iso", zone_name)
    verdicts = [zone_verdict(w, zone) for w in walls]
    assert list(zip(reason.tolist(), ts.tolist())) == verdicts
