"""One bad-input corpus, every format: `mine` and `run` set aside the same records for the
same reasons, take the same baskets, and drop nothing without a count."""

from __future__ import annotations

import base64
import json

import pytest

from stream_miner.cli.main import main
from stream_miner.decoding.records import REASONS

CAP = 3  # --max-basket-items for every case below

# (line content, reason or None for a good basket); line numbers are positions from 1.
JSONL = [
    (b'{"id": "a1", "items": ["tea", "jam"]}', None),
    (b'{"items": ["tea", "jam",}', "invalid JSON"),
    (b'{"items": ["\xff"]}', "invalid UTF-8"),
    (b'["tea"]', "not a JSON object"),
    (b'{"id": "x"}', "no items"),
    (b'{"items": "tea jam"}', "items not a list"),
    (b'{"items": ["tea", 3]}', "bad item"),
    (b'{"items": []}', "empty basket"),
    (b'{"items": ["a", "b", "c", "d"]}', "basket too large"),
    (b'{"items": ["a", "b", "c", "c", "a"]}', None),  # three distinct items: within the cap
    (b'{"items": ["tea"], "id": 1.5}', "bad id"),
    (b'{"items": ["tea"], "ts": "soon"}', "bad event time"),
    (b'{"items": ["tea", {"sku": "scone"}], "ts": 1700000000}', None),
    (b'{"items": ["tea", "jam"]}', None),
]
FIMI = [
    (b"tea jam", None),
    (b"tea \xc3\x28", "invalid UTF-8"),
    (b"", "empty basket"),
    (b"a b c d", "basket too large"),
    (b"a b c c", None),
    (b"tea scone", None),
]
CSV_ROWS = [
    (b"transaction_id,item", None),  # header
    (b"T1,tea", None),
    (b"T1,jam", None),
    (b"T2,a,extra", "wrong number of fields"),
    (b"T2,", "empty field"),
    (b"T2,\xff", "invalid UTF-8"),
    (b"T3,a", None),
    (b"T3,b", None),
    (b"T3,c", None),
    (b"T3,d", None),  # T3 has four items: too large, reported at its first row (7)
    (b"T1,scone", "transaction not contiguous"),
    (b"T4,tea", None),
    (b"T4,scone", None),
]
CSV_EXPECTED = [
    (4, "wrong number of fields"),
    (5, "empty field"),
    (6, "invalid UTF-8"),
    (7, "basket too large"),
    (11, "transaction not contiguous"),
]


def expected_letters(corpus: list[tuple[bytes, str | None]]) -> list[tuple[int, str]]:
    return [(line, reason) for line, (_, reason) in enumerate(corpus, start=1) if reason]


CASES = {
    "jsonl": (JSONL, expected_letters(JSONL), 4),
    "fimi": (FIMI, expected_letters(FIMI), 3),
    "csv": (CSV_ROWS, CSV_EXPECTED, 2),
}


def letters_in(path) -> list[tuple[int, str]]:
    records = [json.loads(line) for line in path.read_text().splitlines()]
    for record in records:
        assert record["reason"] in REASONS
        assert base64.b64decode(record["raw_base64"]) or record["reason"] == "empty basket"
    return [(record["offset"], record["reason"]) for record in records]


@pytest.mark.parametrize("fmt", CASES)
def test_mine_and_run_give_the_same_verdicts(tmp_path, capsys, fmt):
    corpus, expected, good = CASES[fmt]
    data = tmp_path / f"input.{fmt}"
    data.write_bytes(b"\n".join(line for line, _ in corpus) + b"\n")
    mined_letters, run_letters, snapshot = (
        tmp_path / "mine.jsonl",
        tmp_path / "run.jsonl",
        tmp_path / "snap.jsonl",
    )
    common = ["--format", fmt, "--max-basket-items", str(CAP), "--min-count", "1"]

    assert (
        main(
            [
                "mine",
                str(data),
                *common,
                "--bad-records",
                "skip",
                "--dead-letter-out",
                str(mined_letters),
                "--json",
            ]
        )
        == 0
    )
    mined = [json.loads(line) for line in capsys.readouterr().out.splitlines()]
    run_args = ["--source", f"file:{data}", "--window-size", "100", "--tick-every", "1000"]
    assert (
        main(
            [
                "run",
                *run_args,
                *common,
                "--dead-letter-out",
                str(run_letters),
                "--snapshot-out",
                str(snapshot),
            ]
        )
        == 0
    )
    err = capsys.readouterr().err

    assert letters_in(mined_letters) == letters_in(run_letters) == expected
    header, *run_records = [json.loads(line) for line in snapshot.read_text().splitlines()]
    assert header["consumed"] == header["size"] == good  # every basket either counted or set aside
    assert {tuple(r["items"]): r["count"] for r in mined} == {
        tuple(r["items"]): r["count"] for r in run_records
    }
    reasons = {}
    for _, reason in expected:
        reasons[reason] = reasons.get(reason, 0) + 1
    assert "dead letters: " + ", ".join(f"{r} {n}" for r, n in sorted(reasons.items())) in err


def test_every_reason_is_documented_in_the_readme():
    from pathlib import Path

    readme = (Path(__file__).parents[1] / "README.md").read_text()
    for reason in REASONS:
        assert f"`{reason}`" in readme, reason
