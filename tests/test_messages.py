"""Decoding one message into a basket: ``stream_miner.decoding.messages.decode_message``."""

from __future__ import annotations

import json

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from stream_miner.decoding import messages
from stream_miner.decoding.messages import TIME_UNITS, MessageFormat, decode_message
from stream_miner.decoding.records import REASONS, Basket, DeadLetter

# 2024-03-01T12:00:00Z by hand: 2024-01-01T00:00:00Z is 1704067200 (19723 days), then
# January (31) and February (29, leap year) add 60 days, then 12 hours.
NOON = 1_704_067_200 + 60 * 86_400 + 12 * 3_600
DEFAULT = MessageFormat()


def encode(message: object) -> bytes:
    return json.dumps(message).encode("utf-8")


def decode(message: object, fmt: MessageFormat = DEFAULT) -> Basket | DeadLetter:
    raw = message if isinstance(message, bytes) else encode(message)
    return decode_message(raw, fmt, source="test")


def reason_of(message: object, fmt: MessageFormat = DEFAULT) -> str:
    found = decode(message, fmt)
    assert isinstance(found, DeadLetter), found
    return found.reason


def basket_of(message: object, fmt: MessageFormat = DEFAULT) -> Basket:
    found = decode(message, fmt)
    assert isinstance(found, Basket), found
    return found


# ----------------------------------------------------------------------- every reason
STORE = MessageFormat(segment_field="store")
BAD = [
    ("message too large", b'{"items": ["a", "b", "c"]}', MessageFormat(max_message_bytes=10)),
    ("invalid UTF-8", b'{"items": ["caf\xe9"]}', DEFAULT),
    ("invalid UTF-8", b'{"items": ["\xed\xa0\x80"]}', DEFAULT),  # an encoded surrogate
    ("invalid JSON", b'{"items": ["a"]', DEFAULT),
    ("invalid JSON", b"", DEFAULT),
    ("invalid JSON", b"{'items': ['a']}", DEFAULT),
    ("invalid JSON", b'{"items": ["a"], "id": 1' + b"0" * 5000 + b"}", DEFAULT),  # integer overflow
    ("invalid JSON", b'{"items": ["a"], "ts": ' + b"[" * 50_000 + b"]" * 50_000 + b"}", DEFAULT),
    ("not a JSON object", b'["a", "b"]', DEFAULT),
    ("not a JSON object", b'"a b"', DEFAULT),
    ("not a JSON object", b"null", DEFAULT),
    ("no items", {"id": "t1"}, DEFAULT),
    ("no items", {"items": None}, DEFAULT),
    ("no items", {"items": ["a"]}, MessageFormat(items_field="lines")),
    ("items not a list", {"items": "a b"}, DEFAULT),
    ("items not a list", {"items": {"sku": "a"}}, DEFAULT),
    ("bad item", {"items": ["a", 7]}, DEFAULT),
    ("bad item", {"items": ["a", None]}, DEFAULT),
    ("bad item", {"items": [["a"]]}, DEFAULT),
    ("bad item", {"items": [{"qty": 2}]}, DEFAULT),
    ("bad item", {"items": [{"sku": 12, "qty": 2}]}, DEFAULT),
    ("bad item", {"items": [{"sku": "a"}]}, MessageFormat(item_key="product")),
    ("bad item", {"items": ["ok", "\ud800"]}, DEFAULT),  # a lone surrogate is valid JSON, not text
    ("bad item", {"items": [{"sku": "\udfff"}]}, DEFAULT),
    ("empty basket", {"items": []}, DEFAULT),
    ("bad id", {"items": ["a"], "id": 1.5}, DEFAULT),
    ("bad id", {"items": ["a"], "id": True}, DEFAULT),
    ("bad id", {"items": ["a"], "id": ["t1"]}, DEFAULT),
    ("bad event time", {"items": ["a"], "ts": "yesterday"}, DEFAULT),
    ("bad event time", {"items": ["a"], "ts": "2024-13-01T00:00:00Z"}, DEFAULT),
    ("bad event time", {"items": ["a"], "ts": True}, DEFAULT),
    ("bad event time", {"items": ["a"], "ts": [NOON]}, DEFAULT),
    ("bad event time", {"items": ["a"], "ts": {"s": NOON}}, DEFAULT),
    ("bad event time", b'{"items": ["a"], "ts": NaN}', DEFAULT),
    ("bad event time", b'{"items": ["a"], "ts": -Infinity}', DEFAULT),
    ("bad event time", b'{"items": ["a"], "ts": 1e400}', DEFAULT),  # parses as infinity
    ("bad event time", b'{"items": ["a"], "ts": 1' + b"0" * 400 + b"}", DEFAULT),  # too big for a float
    ("bad event time", {"items": ["a"], "ts": 1e300}, DEFAULT),  # finite, out of range
    ("bad event time", {"items": ["a"], "ts": -1e12}, MessageFormat(time_unit="s")),
    ("bad segment", {"items": ["a"], "store": 7}, STORE),
    ("bad segment", {"items": ["a"], "store": ["s1"]}, STORE),
]


def _case_id(case: tuple) -> str:
    reason, message, _ = case
    text = message.decode("utf-8", "replace") if isinstance(message, bytes) else json.dumps(message)
    return f"{reason}: {text[:40]}"


@pytest.mark.parametrize("reason, message, fmt", BAD, ids=[_case_id(c) for c in BAD])
def test_bad_message_reason(reason, message, fmt):
    assert reason_of(message, fmt) == reason


# Reasons given elsewhere: by the Kafka source (a message without a value), the CSV reader,
# and the run loop (size cap, event-time checks); tests/test_bad_input_corpus.py covers them.
NOT_FROM_THE_DECODER = {
    "empty message",
    "wrong number of fields",
    "empty field",
    "transaction not contiguous",
    "basket too large",
    "no event time",
    "too late",
}


def test_every_decoder_reason_has_a_bad_message():
    assert {reason for reason, _, _ in BAD} == set(REASONS) - NOT_FROM_THE_DECODER


def test_dead_letter_carries_raw_bytes_and_origin():
    raw = b'{"items": 3}'
    found = decode_message(raw, DEFAULT, source="orders", partition=2, offset=41)
    assert found == DeadLetter(
        raw=raw, reason="items not a list", detail=found.detail, source="orders", partition=2, offset=41
    )
    assert '"items"' in found.detail and "integer" in found.detail


def test_detail_is_short_for_a_huge_bad_value():
    found = decode({"items": ["a"], "ts": "x" * 100_000})
    assert found.reason == "bad event time"
    assert len(found.detail) <= 200


def test_too_large_is_rejected_before_parsing(monkeypatch):
    def no_parsing(*args, **kwargs):
        raise AssertionError("json.loads was called")

    monkeypatch.setattr(messages.json, "loads", no_parsing)
    fmt = MessageFormat(max_message_bytes=8)
    assert reason_of(b"\xff\xfe not even UTF-8", fmt) == "message too large"
    assert reason_of(b"x" * 9, fmt) == "message too large"


def test_size_limit_is_inclusive():
    raw = b'{"items":["a"]}'
    assert basket_of(raw, MessageFormat(max_message_bytes=len(raw))).items == ["a"]
    assert reason_of(raw, MessageFormat(max_message_bytes=len(raw) - 1)) == "message too large"


def test_the_raw_bytes_stay_with_the_basket():
    raw = b'{"items": ["a", "b"]}'
    assert basket_of(raw).raw == raw


@pytest.mark.parametrize("depth", [10, 500, 900, 990, 999, 1000, 1001, 2000])
@pytest.mark.parametrize(
    "template, reasons",
    [
        ('{"items": ["a"], "ts": %s}', {"bad event time", "invalid JSON"}),
        ('{"items": ["a"], "id": %s}', {"bad id", "invalid JSON"}),
        ('{"items": [%s]}', {"bad item", "invalid JSON"}),
        ("%s", {"not a JSON object", "invalid JSON"}),
    ],
    ids=["ts", "id", "item", "top"],
)
def test_deep_nesting_never_raises(template, reasons, depth):
    raw = (template % ("[" * depth + "]" * depth)).encode()
    assert reason_of(raw) in reasons


# ----------------------------------------------------------------------- happy paths
def test_string_items():
    assert decode({"id": "t1", "ts": NOON, "items": ["milk", "bread"]}) == Basket(
        items=["milk", "bread"], id="t1", ts=NOON, segment=None
    )


def test_missing_or_null_optional_fields():
    assert decode({"items": ["a"]}) == Basket(items=["a"], id=None, ts=None, segment=None)
    assert decode({"items": ["a"], "id": None, "ts": None, "store": None}, STORE) == Basket(
        items=["a"], id=None, ts=None, segment=None
    )


def test_escaped_characters_and_surrogate_pairs_are_text():
    assert basket_of(rb'{"items": ["caf\u00e9", "\ud83c\udf75", "\u0074ea"]}').items == ["café", "🍵", "tea"]


def test_repeated_items_count_once_in_first_seen_order():
    assert basket_of({"items": ["b", "a", "b", "c", "a"]}).items == ["b", "a", "c"]


def test_object_items_with_default_key():
    assert basket_of({"items": [{"sku": "A1", "qty": 2}, "B2"]}).items == ["A1", "B2"]


def test_object_items_with_custom_key():
    fmt = MessageFormat(item_key="product")
    message = {"items": [{"product": "A1", "qty": 3, "sku": "ignored"}, {"product": "B2"}]}
    assert basket_of(message, fmt).items == ["A1", "B2"]


def test_quantities_do_not_matter():
    once = basket_of({"items": [{"sku": "A", "qty": 5}, {"sku": "B", "qty": 1}]})
    spread = basket_of({"items": [{"sku": "A", "qty": 1}, {"sku": "A", "qty": 4}, {"sku": "B"}, "A"]})
    assert once.items == spread.items == ["A", "B"]


def test_custom_field_names():
    fmt = MessageFormat(id_field="order_id", time_field="event_time", items_field="lines")
    message = {
        "order_id": "o9",
        "event_time": NOON,
        "lines": ["x", "y"],
        "id": "other",
        "ts": 0,
        "items": ["other"],
    }
    assert decode(message, fmt) == Basket(items=["x", "y"], id="o9", ts=NOON, segment=None)


def test_segment():
    assert basket_of({"items": ["a"], "store": "s1"}, STORE).segment == "s1"
    assert basket_of({"items": ["a"]}, STORE).segment is None


def test_segment_ignored_when_not_configured():
    assert basket_of({"items": ["a"], "store": 7}).segment is None


@pytest.mark.parametrize(
    "ts, unit, expected",
    [
        (NOON, "s", NOON),
        (NOON + 0.25, "s", NOON + 0.25),
        (0, "s", 0.0),
        (-86_400, "s", -86_400.0),
        (NOON * 1000, "ms", NOON),
        (NOON * 1000 + 250, "ms", NOON + 0.25),
        (NOON, "ms", NOON / 1000),  # the unit is forced, not guessed
        (NOON, "auto", NOON),
        (NOON * 1000, "auto", NOON),
        (NOON * 1000 + 250, "auto", NOON + 0.25),
        (100_000_000_000, "auto", 100_000_000_000.0),  # 1e11 itself is seconds
        (100_000_000_001, "auto", 100_000_000.001),  # above 1e11: milliseconds
        (1e14, "s", None),  # out of range as seconds
    ],
    ids=lambda v: str(v),
)
def test_numeric_event_times(ts, unit, expected):
    message = {"items": ["a"], "ts": ts}
    fmt = MessageFormat(time_unit=unit)
    if expected is None:
        assert reason_of(message, fmt) == "bad event time"
    else:
        assert basket_of(message, fmt).ts == pytest.approx(expected, abs=1e-6)


@pytest.mark.parametrize(
    "text",
    [
        "2024-03-01T12:00:00Z",
        "2024-03-01T14:00:00+02:00",
        "2024-03-01T07:00:00-05:00",
        "2024-03-01T12:00:00",  # naive means UTC
        "2024-03-01T12:00:00.000+00:00",
    ],
)
@pytest.mark.parametrize("unit", TIME_UNITS)
def test_iso_event_times(text, unit):
    assert basket_of({"items": ["a"], "ts": text}, MessageFormat(time_unit=unit)).ts == NOON


@pytest.mark.parametrize(
    "basket_id, expected",
    [
        (42, "42"),
        (0, "0"),
        (-7, "-7"),
        (2**70, str(2**70)),
        ("t-1", "t-1"),
        ("", ""),
    ],
)
def test_ids(basket_id, expected):
    assert basket_of({"items": ["a"], "id": basket_id}).id == expected


def test_byte_order_mark_and_line_ending_are_ignored():
    assert basket_of(b'\xef\xbb\xbf{"items": ["a"]}\r\n').items == ["a"]


def test_format_is_validated():
    with pytest.raises(ValueError, match="time_unit"):
        MessageFormat(time_unit="us")
    with pytest.raises(ValueError, match="at least 1"):
        MessageFormat(max_message_bytes=0)


# ----------------------------------------------------------------------- never raises
JSON_SCALARS = (
    st.none()
    | st.booleans()
    | st.integers()
    | st.floats()
    | st.text(max_size=20)
    | st.sampled_from(["2024-03-01T12:00:00Z", "2024-03-01"])
)
JSON_VALUES = st.recursive(
    JSON_SCALARS,
    lambda inner: st.lists(inner, max_size=4) | st.dictionaries(st.text(max_size=5), inner, max_size=4),
    max_leaves=12,
)
ITEMS = st.lists(st.text(max_size=3) | st.fixed_dictionaries({"sku": JSON_VALUES}) | JSON_VALUES, max_size=6)
MESSAGES = JSON_VALUES | st.fixed_dictionaries(
    {},
    optional={
        "items": ITEMS | JSON_VALUES,
        "id": JSON_VALUES,
        "ts": JSON_VALUES,
        "store": JSON_VALUES,
    },
)
FORMATS = st.builds(
    MessageFormat,
    segment_field=st.sampled_from([None, "store"]),
    time_unit=st.sampled_from(TIME_UNITS),
)


def check_outcome(raw: bytes, fmt: MessageFormat) -> Basket | DeadLetter:
    found = decode_message(raw, fmt, source="fuzz", partition=0, offset=1)
    if isinstance(found, DeadLetter):
        assert found.reason in REASONS
        assert (found.raw, found.source, found.partition, found.offset) == (raw, "fuzz", 0, 1)
    else:
        assert isinstance(found, Basket)
        assert len(found.items) >= 1
        assert len(set(found.items)) == len(found.items)
        assert all(isinstance(item, str) for item in found.items)
    return found


@settings(max_examples=300)
@given(raw=st.binary(max_size=200), fmt=FORMATS)
def test_never_raises_on_random_bytes(raw, fmt):
    check_outcome(raw, fmt)


@settings(max_examples=500)
@given(message=MESSAGES, fmt=FORMATS)
def test_never_raises_on_json_values(message, fmt):
    check_outcome(json.dumps(message).encode("utf-8"), fmt)


# ------------------------------------------------------------- fast path = full path
def full_path(raw: bytes, fmt: MessageFormat) -> Basket | tuple[str, str]:
    """What the full (standard json) path alone makes of ``raw``."""
    try:
        return messages._basket(messages._json_object(raw, fmt), fmt, raw)
    except messages._Refused as refusal:
        return refusal.reason, refusal.detail


def assert_same_as_full_path(raw: bytes, fmt: MessageFormat = DEFAULT) -> None:
    found, expected = decode_message(raw, fmt, source="s"), full_path(raw, fmt)
    if isinstance(expected, Basket):
        assert isinstance(found, Basket), (raw, found)
        assert (found.items, found.id, found.ts, found.segment, found.raw) == (
            expected.items,
            expected.id,
            expected.ts,
            expected.segment,
            expected.raw,
        )
        assert type(found.id) is type(expected.id) and type(found.ts) is type(expected.ts)
    else:
        assert isinstance(found, DeadLetter), (raw, found)
        assert (found.reason, found.detail) == expected


EDGE_MESSAGES = [
    b'{"items": ["a", "b", "a"], "id": "x", "ts": 1709294400}',
    b'{"items": ["a"], "id": 123456789012345678901234567890}',  # beyond 64 bits: orjson reads a float
    b'{"items": ["a"], "id": -9223372036854775809}',
    b'{"items": ["a"], "id": 18446744073709551615}',
    b'{"items": ["a"], "ts": 123456789012345678901234567890}',
    b'{"items": ["a"], "ts": 1e400}',
    b'{"items": ["a"], "ts": NaN}',
    b'{"items": ["a"], "ts": 1709294400.123456789}',
    b'{"items": ["a"], "ts": 1709294400123}',
    b'{"items": ["a"], "ts": -0.0}',
    b'{"items": ["a"], "ts": "2024-03-01T12:00:00Z"}',
    b'{"items": ["a"], "ts": true}',
    b'{"items": ["a"], "id": true}',
    b'{"items": ["a"], "id": 1.5}',
    b'{"items": ["\\ud800"]}',  # a lone surrogate: the full path refuses it
    b'{"items": ["\\ud83d\\ude00"]}',
    b'\xef\xbb\xbf{"items": ["a"]}',  # a byte-order mark
    b'{"items": ["a"], "items": ["b"]}',
    b'{"items": ["a", {"sku": "b"}]}',
    b'{"items": [["a"]]}',
    b'{"items": []}',
    b'{"items": "a"}',
    b'{"items": ["a"], "store": 3}',
    b'{"items": ["a"], "store": "north"}',
    b'{"items": ["a"], "other": ' + b"9" * 5000 + b"}",  # json refuses over 4,300 digits
    b'{"items": ["a"], "other": ' + b"[" * 600 + b"]" * 600 + b"}",
    b'{"items": ["a\\u0000b", "caf\\u00e9"]}',
    b'{"items": ["a"]} ',
    b'{"items": ["a"]}x',
    b'["a"]',
    b'{"items": ["\xff"]}',
]


@pytest.mark.parametrize("raw", EDGE_MESSAGES)
@pytest.mark.parametrize(
    "fmt", [DEFAULT, MessageFormat(segment_field="store", time_unit="s"), MessageFormat(time_unit="ms")]
)
def test_fast_path_agrees_with_full_path(raw, fmt):
    assert_same_as_full_path(raw, fmt)


@settings(max_examples=500)
@given(message=MESSAGES, fmt=FORMATS)
def test_fast_path_agrees_with_full_path_on_json_values(message, fmt):
    assert_same_as_full_path(json.dumps(message).encode("utf-8"), fmt)


@settings(max_examples=200)
@given(
    items=st.lists(st.text(max_size=6), min_size=1, max_size=8),
    ts=st.floats(allow_nan=False) | st.integers(),
)
def test_fast_path_agrees_on_times_and_texts(items, ts):
    raw = json.dumps({"items": items, "ts": ts, "id": ts if isinstance(ts, int) else None}).encode()
    assert_same_as_full_path(raw)
