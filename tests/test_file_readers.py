"""The file readers in ``stream_miner.decoding.files``: format detection, record parsing, event times."""

from __future__ import annotations

import io
import math
import os

import pytest

from stream_miner.decoding.files import FileLayout, InputError, detect_format, read_records
from stream_miner.decoding.messages import MessageFormat, parse_event_time
from stream_miner.decoding.records import Basket, DeadLetter

# 2024-03-01T12:00:00Z by hand: 2024-01-01T00:00:00Z is 1704067200 (19723 days), then
# January (31) and February (29, leap year) add 60 days, then 12 hours:
# 1704067200 + 60 * 86400 + 12 * 3600 = 1709294400.
NOON_2024_03_01 = 1_704_067_200 + 60 * 86_400 + 12 * 3_600


def records(data: bytes, fmt: str, **options) -> list:
    """(line, items, id, ts) of each basket, and the DeadLetter itself for each bad record."""
    found = read_records(io.BytesIO(data), FileLayout(fmt, **options), "test")
    return [
        (r.offset, r.payload.items, r.payload.id, r.payload.ts)
        if isinstance(r.payload, Basket)
        else r.payload
        for r in found
    ]


def basket(items, line, id=None, ts=None):
    return (line, items, id, ts)


def only_bad(found: list) -> list[tuple[int, str]]:
    return [(r.offset, r.reason) for r in found if isinstance(r, DeadLetter)]


# ----------------------------------------------------------------------- detection
@pytest.mark.parametrize(
    "path, fmt",
    [
        ("b.dat", "fimi"),
        ("b.txt", "fimi"),
        ("b.fimi", "fimi"),
        ("b.basket", "fimi"),
        ("data/B.DAT", "fimi"),
        ("b.jsonl", "jsonl"),
        ("b.ndjson", "jsonl"),
        ("x.csv/b.NDJSON", "jsonl"),
        ("b.csv", "csv"),
        ("/tmp/run.jsonl/b.Csv", "csv"),
    ],
)
def test_detect_format(path, fmt):
    assert detect_format(path) == fmt


@pytest.mark.parametrize("path", ["b.xlsx", "baskets", "b.csv.gz", "stdin", "b.json"])
def test_detect_format_unknown(path):
    with pytest.raises(InputError, match="--format") as error:
        detect_format(path)
    assert repr(path) in str(error.value)


def test_unknown_format_name():
    with pytest.raises(InputError, match="unknown format 'xml'"):
        FileLayout("xml")


# ----------------------------------------------------------------------- fimi
def test_fimi_lines_and_numbers():
    found = records(b"a b\n\n  c\td  \ncaf\xc3\xa9 \xe6\x97\xa5\n", "fimi")
    assert only_bad(found) == [(2, "empty basket")]  # an empty line is an empty basket
    assert [f for f in found if not isinstance(f, DeadLetter)] == [
        basket(["a", "b"], line=1),
        basket(["c", "d"], line=3),
        basket(["café", "日"], line=4),
    ]


def test_fimi_crlf_and_missing_final_newline():
    found = records(b"a b\r\nc\r\n\r\nd e", "fimi")
    assert only_bad(found) == [(3, "empty basket")]
    assert [f for f in found if not isinstance(f, DeadLetter)] == [
        basket(["a", "b"], 1),
        basket(["c"], 2),
        basket(["d", "e"], 4),
    ]


def test_fimi_invalid_utf8_is_a_bad_record():
    found = records(b"a\nb \xff c\nd\n", "fimi")
    assert len(found) == 3
    bad = found[1]
    assert isinstance(bad, DeadLetter)
    assert bad.reason == "invalid UTF-8"
    assert bad.raw == b"b \xff c"
    assert bad.message().startswith("line 2: invalid UTF-8: ")
    assert found[2] == basket(["d"], 3)


# ----------------------------------------------------------------------- jsonl
def test_jsonl_fields_and_line_numbers():
    data = (
        b'{"items": ["a"], "id": 7, "ts": 1.5}\n'
        b"\n"
        b"   \n"
        b'{"id": "x", "items": ["b", "a", "b"], "ts": "2024-03-01T12:00:00Z"}\n'
        b'{"items": [], "id": null, "extra": {"k": 1}}\n'
    )
    found = records(data, "jsonl")
    assert found[:2] == [
        basket(["a"], line=1, id="7", ts=1.5),
        basket(["b", "a"], line=4, id="x", ts=float(NOON_2024_03_01)),  # a repeat counts once
    ]
    assert only_bad(found) == [(5, "empty basket")]


def test_jsonl_crlf():
    data = b'{"items": ["a", "b"]}\r\n\r\n{"items": ["c"], "ts": 10}\r\n'
    assert records(data, "jsonl") == [basket(["a", "b"], 1), basket(["c"], 3, ts=10.0)]


BAD_JSONL = {
    "invalid json": (b'{"items": ["a",}', "invalid JSON"),
    "not json": (b"not json", "invalid JSON"),
    "invalid utf-8": (b'{"items": ["\xff"]}', "invalid UTF-8"),
    "array": (b'["a"]', "not a JSON object"),
    "string": (b'"a"', "not a JSON object"),
    "no items": (b"{}", "no items"),
    "null items": (b'{"items": null}', "no items"),
    "items string": (b'{"items": "a"}', "items not a list"),
    "items object": (b'{"items": {"a": 1}}', "items not a list"),
    "number item": (b'{"items": ["a", 1]}', "bad item"),
    "null item": (b'{"items": ["a", null]}', "bad item"),
    "bool id": (b'{"items": ["a"], "id": true}', "bad id"),
    "list id": (b'{"items": ["a"], "id": [1]}', "bad id"),
    "ts text": (b'{"items": ["a"], "ts": "soon"}', "bad event time"),
    "ts bool": (b'{"items": ["a"], "ts": false}', "bad event time"),
    "ts infinity": (b'{"items": ["a"], "ts": Infinity}', "bad event time"),
    "ts huge int": (b'{"items": ["a"], "ts": 1' + b"0" * 400 + b"}", "bad event time"),
    "int over digit limit": (b'{"items": ["a"], "n": ' + b"9" * 5000 + b"}", "invalid JSON"),
    "nested too deep": (b"[" * 100_000 + b"]" * 100_000, "invalid JSON"),
}


@pytest.mark.parametrize("line, reason", BAD_JSONL.values(), ids=BAD_JSONL.keys())
def test_jsonl_bad_records(line, reason):
    found = records(b'{"items": ["ok"]}\n' + line + b'\r\n{"items": ["ok"]}\n', "jsonl")
    assert found[0] == basket(["ok"], 1) and found[2] == basket(["ok"], 3)
    bad = found[1]
    assert isinstance(bad, DeadLetter)
    assert (bad.offset, bad.reason) == (2, reason)
    assert bad.raw.rstrip(b"\r\n") == line
    assert bad.message().startswith(f"line 2: {reason}: ")


# ----------------------------------------------------------------------- csv
def test_csv_groups_contiguous_rows():
    data = b'transaction_id,item\nT1,a\nT1,"salt, sea"\nT2,c\n7,a\n7,a\n'
    assert records(data, "csv") == [
        basket(["a", "salt, sea"], line=2, id="T1"),
        basket(["c"], line=4, id="T2"),
        basket(["a"], line=5, id="7"),  # a repeated item counts once
    ]


def test_csv_crlf_and_custom_columns():
    data = b"qty,product,order\r\n1,tea,o1\r\n2,jam,o1\r\n1,scone,o2\r\n"
    found = records(data, "csv", csv_id_column="order", csv_item_column="product")
    assert found == [basket(["tea", "jam"], line=2, id="o1"), basket(["scone"], line=4, id="o2")]


def test_csv_bad_rows_keep_their_line_and_do_not_break_grouping():
    data = (
        b"transaction_id,item\n"  # 1
        b"T1,a\n"  # 2
        b"T1,b,extra\n"  # 3 wrong number of fields
        b"T1,\n"  # 4 empty item
        b"T1,\xff\n"  # 5 invalid UTF-8
        b"T1,c\n"  # 6 still T1
        b"T2,d\n"  # 7
        b"T1,e\n"  # 8 T1 again, after T2
        b"T3,f\n"
    )  # 9
    found = records(data, "csv")
    assert only_bad(found) == [
        (3, "wrong number of fields"),
        (4, "empty field"),
        (5, "invalid UTF-8"),
        (8, "transaction not contiguous"),
    ]
    assert [r for r in found if not isinstance(r, DeadLetter)] == [
        basket(["a", "c"], line=2, id="T1"),
        basket(["d"], line=7, id="T2"),
        basket(["f"], line=9, id="T3"),
    ]


def test_csv_missing_column_is_an_input_error():
    with pytest.raises(InputError, match="'transaction_id'") as error:
        records(b"order,item\no1,a\n", "csv")
    assert "--csv-id-column" in str(error.value)
    with pytest.raises(InputError, match="'product'"):
        records(b"transaction_id,item\nT1,a\n", "csv", csv_item_column="product")


def test_csv_invalid_utf8_header_is_an_input_error():
    with pytest.raises(InputError, match="line 1"):
        records(b"transaction_id,it\xffem\nT1,a\n", "csv")


def test_csv_empty_stream_and_header_only():
    assert records(b"", "csv") == []
    assert records(b"transaction_id,item\n", "csv") == []


# ----------------------------------------------------------------------- event times
@pytest.mark.parametrize(
    "text, expected",
    [
        ("2024-03-01T12:00:00Z", NOON_2024_03_01),
        ("2024-03-01T12:00:00+00:00", NOON_2024_03_01),
        ("2024-03-01T14:30:00+02:30", NOON_2024_03_01),
        ("2024-03-01T07:00:00-05:00", NOON_2024_03_01),
        ("2024-03-01T12:00:00", NOON_2024_03_01),  # naive: UTC
        ("2024-03-01 12:00:00", NOON_2024_03_01),
        ("2024-03-01T12:00:00.250Z", NOON_2024_03_01 + 0.25),
        ("2024-03-01", NOON_2024_03_01 - 12 * 3_600),
        ("1970-01-01T00:00:00Z", 0),
        ("1969-12-31T23:00:00Z", -3_600),
    ],
)
def test_parse_event_time_iso(text, expected):
    assert parse_event_time(text) == expected


@pytest.mark.parametrize("value", [0, 1_709_294_400, 1.5, -86_400, 1e12])
def test_parse_event_time_epoch(value):
    result = parse_event_time(value)
    assert type(result) is float and result == value


@pytest.mark.parametrize(
    "value",
    [
        True,
        False,
        None,
        [1],
        {"ts": 1},
        "",
        "yesterday",
        "2024-13-01",
        "2024-03-01T25:00:00",
        math.nan,
        math.inf,
        -math.inf,
        10**400,
    ],
    ids=lambda value: "huge int" if value == 10**400 else repr(value),
)
def test_parse_event_time_rejects(value):
    with pytest.raises(ValueError):
        parse_event_time(value)


def test_byte_order_mark_is_not_part_of_the_data():
    bom = b"\xef\xbb\xbf"
    assert records(bom + b"tea scone\n", "fimi") == [basket(["tea", "scone"], 1)]
    assert records(bom + b'{"items": ["tea"]}\n', "jsonl") == [basket(["tea"], 1)]
    found = records(bom + b"transaction_id,item\nt1,tea\n", "csv")
    assert found == [basket(["tea"], line=2, id="t1")]


def test_csv_blank_lines_are_ignored():
    found = records(b"transaction_id,item\nt1,tea\n\nt1,jam\n\n", "csv")
    assert found == [basket(["tea", "jam"], line=2, id="t1")]


@pytest.mark.parametrize("fmt", ["fimi", "jsonl"])
def test_a_line_over_the_size_limit_is_set_aside_after_reading_only_the_limit(fmt):
    long_item = b"x" * 5000
    line = long_item if fmt == "fimi" else b'{"items": ["' + long_item + b'"]}'
    data = b"tea jam\n" if fmt == "fimi" else b'{"items": ["tea", "jam"]}\n'
    found = list(
        read_records(
            io.BytesIO(data + line + b"\r\n" + data),
            FileLayout(fmt, MessageFormat(max_message_bytes=100)),
            "t",
        )
    )
    letter = found[1].payload
    assert (letter.reason, letter.offset, letter.detail) == (
        "message too large",
        2,
        f"{len(line)} bytes, limit 100",
    )
    assert letter.raw == line[:100]
    assert [r.payload.items for r in (found[0], found[2])] == [["tea", "jam"], ["tea", "jam"]]


def test_a_pipe_with_no_data_yet_answers_none_instead_of_waiting():
    read_end, write_end = os.pipe()
    with os.fdopen(read_end, "rb") as stream, os.fdopen(write_end, "wb") as writer:
        records = read_records(stream, FileLayout("fimi"), "pipe")
        assert next(records) is None  # nothing written yet: no blocking read
        writer.write(b"tea jam\nscone")
        writer.flush()
        found = next(r for r in records if r is not None)
        assert found.payload.items == ["tea", "jam"]
        assert next(records) is None  # "scone" has no newline yet
        writer.close()
        last = next(r for r in records if r is not None)
        assert last.payload.items == ["scone"] and last.offset == 2
        assert next(records, "end") == "end"
