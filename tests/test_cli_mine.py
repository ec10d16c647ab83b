"""The ``stream-miner mine`` command, checked against an independent brute force.

Expected itemsets and rules are computed here from the input baskets by counting every
subset of every basket (``itertools.combinations``) and applying the textbook formulas in
exact fractions; nothing is copied from the program's own output.
"""

from __future__ import annotations

import json
import math
import random
import shutil
import subprocess
from collections import Counter, defaultdict
from fractions import Fraction
from importlib import resources
from itertools import combinations

import pytest

from stream_miner.cli.main import main

# Ten small baskets used by the rule tests. Hand counts (N = 10): bread 7, milk 7, jam 5,
# tea 4, eggs 3; {bread, milk} 5, {bread, jam} 4, {jam, milk} 4, {bread, jam, milk} 3.
# So {bread, milk} -> {jam} has confidence 3/5 exactly and {jam} -> {bread} has lift
# (4/5) / (7/10) = 8/7 exactly.
BASKETS = [
    ["bread", "milk"],
    ["bread", "jam", "milk"],
    ["bread", "eggs"],
    ["bread", "jam"],
    ["milk", "eggs", "tea"],
    ["bread", "milk", "eggs", "jam"],
    ["tea"],
    ["bread", "milk", "tea"],
    ["jam", "milk"],
    ["bread", "milk", "jam", "tea"],
]
ITEMSET_KEYS = {"type", "items", "count", "support"}
RULE_KEYS = {
    "type",
    "antecedent",
    "consequent",
    "count",
    "support",
    "confidence",
    "lift",
    "leverage",
    "conviction",
}


# ----------------------------------------------------------------------- brute force
def subset_counts(baskets, max_len=None):
    """Number of baskets containing each itemset (sorted tuple)."""
    counts = Counter()
    for basket in baskets:
        items = sorted(set(basket))
        for size in range(1, min(len(items), max_len or len(items)) + 1):
            counts.update(combinations(items, size))
    return counts


def frequent(baskets, min_count, max_len=None):
    return {s: c for s, c in subset_counts(baskets, max_len).items() if c >= min_count}


def all_rules(baskets, min_count):
    """Every split of every frequent itemset, with exact measures (conviction None when infinite)."""
    n = len(baskets)
    counts = subset_counts(baskets)
    rules = {}
    for itemset, count in counts.items():
        if count < min_count:
            continue
        for size in range(1, len(itemset)):
            for left in combinations(itemset, size):
                right = tuple(i for i in itemset if i not in left)
                confidence = Fraction(count, counts[left])
                p_right = Fraction(counts[right], n)
                rules[left, right] = {
                    "count": count,
                    "support": Fraction(count, n),
                    "confidence": confidence,
                    "lift": confidence / p_right,
                    "leverage": Fraction(count, n) - Fraction(counts[left] * counts[right], n * n),
                    "conviction": None if confidence == 1 else (1 - p_right) / (1 - confidence),
                }
    return rules


# ----------------------------------------------------------------------- running
def run(capsys, *args):
    code = main(["mine", *map(str, args)])
    out, err = capsys.readouterr()
    return code, out, err


def run_json(capsys, *args):
    code, out, err = run(capsys, *args, "--json")
    assert code == 0, err
    return [json.loads(line) for line in out.splitlines()], err


def itemsets_of(records):
    return {tuple(r["items"]): r["count"] for r in records if r["type"] == "itemset"}


def rules_of(records):
    return {(tuple(r["antecedent"]), tuple(r["consequent"])): r for r in records if r["type"] == "rule"}


def write_fimi(path, baskets):
    path.write_text("".join(" ".join(b) + "\n" for b in baskets))
    return path


def write_jsonl(path, baskets):
    path.write_text("".join(json.dumps({"items": b}) + "\n" for b in baskets))
    return path


def write_csv(path, baskets, id_column="transaction_id", item_column="item"):
    rows = [f"{id_column},{item_column}"]
    rows += [f"T{n},{item}" for n, basket in enumerate(baskets) for item in basket]
    path.write_text("\n".join(rows) + "\n")
    return path


def assert_rules_match(got, expected):
    assert set(got) == set(expected)
    for key, want in expected.items():
        rule = got[key]
        assert rule["count"] == want["count"]
        for name in ("support", "confidence", "lift", "leverage"):
            assert rule[name] == pytest.approx(float(want[name]), rel=1e-12, abs=1e-15), (key, name)
        if want["conviction"] is None:
            assert rule["conviction"] is None
        else:
            assert rule["conviction"] == pytest.approx(float(want["conviction"]), rel=1e-12)


def run_script(*args, stdin=b""):
    script = shutil.which("stream-miner")
    assert script, "the stream-miner console script is not on PATH"
    return subprocess.run([script, "mine", *args], input=stdin, capture_output=True, timeout=60)


# ----------------------------------------------------------------------- formats
@pytest.mark.parametrize(
    "name, writer",
    [
        ("b.dat", write_fimi),
        ("b.txt", write_fimi),
        ("b.fimi", write_fimi),
        ("B.DAT", write_fimi),
        ("b.jsonl", write_jsonl),
        ("b.ndjson", write_jsonl),
        ("b.csv", write_csv),
    ],
)
def test_format_detected_from_extension(capsys, tmp_path, name, writer):
    path = writer(tmp_path / name, BASKETS)
    records, _ = run_json(capsys, path, "--min-count", 2)
    assert itemsets_of(records) == frequent(BASKETS, 2)
    for record in records:
        assert record["support"] == record["count"] / len(BASKETS)


def test_csv_custom_columns_and_extra_columns(capsys, tmp_path):
    # Columns in an unusual order, with an unrelated column; basket "o2" has a repeated item.
    path = tmp_path / "orders.csv"
    path.write_text(
        "product,store,order\n"
        "tea,north,o1\nscone,north,o1\n"
        "tea,south,o2\ntea,south,o2\njam,south,o2\n"
        "scone,east,o3\njam,east,o3\ntea,east,o3\n"
    )
    records, _ = run_json(
        capsys, path, "--csv-id-column", "order", "--csv-item-column", "product", "--min-count", 1
    )
    baskets = [["tea", "scone"], ["tea", "jam"], ["scone", "jam", "tea"]]
    assert itemsets_of(records) == frequent(baskets, 1)


def test_format_option_overrides_extension(capsys, tmp_path):
    path = write_jsonl(tmp_path / "baskets.txt", BASKETS)
    records, _ = run_json(capsys, path, "--format", "jsonl", "--min-count", 2)
    assert itemsets_of(records) == frequent(BASKETS, 2)
    # Read as FIMI (the extension), the JSON text splits into odd "items" instead.
    as_fimi, _ = run_json(capsys, path, "--min-count", 2)
    assert ("bread",) not in itemsets_of(as_fimi)


def test_unknown_extension_without_format_exits_2(capsys, tmp_path):
    path = write_fimi(tmp_path / "baskets.xlsx", BASKETS)
    code, out, err = run(capsys, path)
    assert code == 2
    assert out == ""
    assert "baskets.xlsx" in err and "--format" in err
    assert len(err.strip().splitlines()) == 1


def test_missing_file_exits_2(capsys, tmp_path):
    code, _, err = run(capsys, tmp_path / "absent.dat")
    assert code == 2
    assert "cannot read" in err and "absent.dat" in err


@pytest.mark.parametrize("fmt, writer", [("fimi", write_fimi), ("jsonl", write_jsonl), ("csv", write_csv)])
def test_console_script_reads_stdin(tmp_path, fmt, writer):
    data = writer(tmp_path / "input", BASKETS).read_bytes()
    done = run_script("-", "--format", fmt, "--json", "--min-count", "3", stdin=data)
    assert done.returncode == 0, done.stderr
    records = [json.loads(line) for line in done.stdout.decode().splitlines()]
    assert itemsets_of(records) == frequent(BASKETS, 3)


def test_console_script_bad_input_exits_2_without_traceback(tmp_path):
    path = tmp_path / "b.jsonl"
    path.write_text('{"items": ["a"]}\n{"items": ["a", 7]}\n')
    done = run_script(str(path))
    err = done.stderr.decode()
    assert done.returncode == 2
    assert "Traceback" not in err
    assert len(err.strip().splitlines()) == 1
    assert "line 2" in err and "bad item" in err


def test_console_script_stdin_needs_format():
    done = run_script("-", stdin=b"a b\n")
    err = done.stderr.decode()
    assert done.returncode == 2
    assert "Traceback" not in err and "--format" in err


# ----------------------------------------------------------------------- window and ticks
def test_window_keeps_only_the_last_n_baskets(capsys, tmp_path):
    path = write_fimi(tmp_path / "b.dat", BASKETS)
    records, _ = run_json(capsys, path, "--window-size", 4, "--min-count", 2)
    last = BASKETS[-4:]
    assert itemsets_of(records) == frequent(last, 2)
    for record in records:
        assert record["support"] == record["count"] / 4


def test_window_larger_than_input(capsys, tmp_path):
    path = write_fimi(tmp_path / "b.dat", BASKETS)
    records, _ = run_json(capsys, path, "--window-size", 50, "--min-count", 2)
    assert itemsets_of(records) == frequent(BASKETS, 2)


def random_baskets(count, seed):
    rng = random.Random(seed)
    # "staple" in every basket, so every window has a frequent itemset (and every tick a line).
    return [["staple", *rng.sample("abcdef", rng.randint(0, 4))] for _ in range(count)]


@pytest.mark.parametrize("n, window, every", [(12, 4, 3), (10, 4, 2), (7, 5, 1), (7, 20, 3), (9, 9, 4)])
def test_every_emits_ticks_over_the_right_windows(capsys, tmp_path, n, window, every):
    baskets = random_baskets(n, seed=n * 100 + window * 10 + every)
    path = write_fimi(tmp_path / "b.dat", baskets)
    records, _ = run_json(
        capsys, path, "--window-size", window, "--tick-every", every, "--min-support", "0.3"
    )
    # A tick after every `every` accepted baskets from the start, plus a final one.
    ends = list(range(every, n + 1, every))
    if not ends or ends[-1] != n:
        ends.append(n)
    by_tick = defaultdict(list)
    for record in records:
        by_tick[record["tick"]].append(record)
    assert sorted(by_tick) == list(range(len(ends)))
    for tick, end in enumerate(ends):
        current = baskets[max(0, end - window) : end]
        threshold = math.ceil(Fraction(3, 10) * len(current))
        assert itemsets_of(by_tick[tick]) == frequent(current, threshold), tick
        for record in by_tick[tick]:
            assert record["support"] == record["count"] / len(current)


def test_every_counts_only_accepted_baskets(capsys, tmp_path):
    # Empty lines are empty baskets, set aside and counted: only the 3 real baskets tick
    # (every 1); the empty lines between them must not cause ticks.
    path = tmp_path / "b.dat"
    path.write_text("a b\n\n\na\n\nb c\n\n")
    records, err = run_json(capsys, path, "--window-size", 2, "--tick-every", 1, "--min-count", 1)
    ticks = sorted({r["tick"] for r in records})
    assert ticks == [0, 1, 2]
    assert itemsets_of([r for r in records if r["tick"] == 0]) == frequent([["a", "b"]], 1)
    assert itemsets_of([r for r in records if r["tick"] == 1]) == frequent([["a", "b"], ["a"]], 1)
    assert itemsets_of([r for r in records if r["tick"] == 2]) == frequent([["a"], ["b", "c"]], 1)
    assert "dead letters: empty basket 4" in err


# ----------------------------------------------------------------------- thresholds
@pytest.mark.parametrize("fraction, n, threshold", [("0.07", 100, 7), ("0.07", 300, 21), ("0.14", 100, 14)])
def test_min_support_threshold_is_exact(capsys, tmp_path, fraction, n, threshold):
    # In floats 0.07 * 100 = 7.000000000000001 (ceil 8), 0.07 * 300 = 21.000000000000004
    # (ceil 22), 0.14 * 100 = 14.000000000000002 (ceil 15); the exact threshold is
    # ceil(7/100 * 100) = 7, 21 and 14. "hit" is in exactly `threshold` baskets, "miss" in one fewer.
    baskets = [["hit"]] * threshold + [["miss"]] * (threshold - 1)
    baskets += [["filler"]] * (n - len(baskets))
    path = write_fimi(tmp_path / "b.dat", baskets)
    records, _ = run_json(capsys, path, "--min-support", fraction)
    found = itemsets_of(records)
    assert found.get(("hit",)) == threshold
    assert ("miss",) not in found
    assert math.ceil(Fraction(fraction) * n) == threshold  # the arithmetic in the comment


def test_min_support_default_is_one_percent(capsys, tmp_path):
    # 200 baskets: default 0.01 gives threshold 2; "twice" (2 baskets) in, "once" out.
    baskets = [["twice"]] * 2 + [["once"]] + [["filler"]] * 197
    records, _ = run_json(capsys, write_fimi(tmp_path / "b.dat", baskets))
    assert itemsets_of(records) == {("twice",): 2, ("filler",): 197}


@pytest.mark.parametrize("min_count", [1, 3, 5, 7])
def test_min_count(capsys, tmp_path, min_count):
    records, _ = run_json(capsys, write_fimi(tmp_path / "b.dat", BASKETS), "--min-count", min_count)
    expected = frequent(BASKETS, min_count)
    assert itemsets_of(records) == expected
    assert min(expected.values()) == min_count  # the boundary count itself is exercised


def test_max_len(capsys, tmp_path):
    records, _ = run_json(capsys, write_fimi(tmp_path / "b.dat", BASKETS), "--min-count", 1, "--max-size", 2)
    found = itemsets_of(records)
    assert found == frequent(BASKETS, 1, max_len=2)
    assert max(map(len, found)) == 2


def test_include_and_exclude_are_repeatable(capsys, tmp_path):
    path = write_fimi(tmp_path / "b.dat", BASKETS)
    records, _ = run_json(
        capsys, path, "--min-count", 2, "--include", "bread", "--include", "milk", "--include", "jam"
    )
    kept = [[i for i in b if i in {"bread", "milk", "jam"}] for b in BASKETS]
    assert itemsets_of(records) == frequent(kept, 2)
    # Support is still over all ten baskets, not only those holding included items.
    assert all(r["support"] == r["count"] / 10 for r in records)

    records, _ = run_json(capsys, path, "--min-count", 2, "--exclude", "bread", "--exclude", "tea")
    kept = [[i for i in b if i not in {"bread", "tea"}] for b in BASKETS]
    assert itemsets_of(records) == frequent(kept, 2)


# ----------------------------------------------------------------------- rules
def test_rules_and_measures_match_the_formulas(capsys, tmp_path):
    path = write_fimi(tmp_path / "b.dat", BASKETS)
    records, _ = run_json(capsys, path, "--min-count", 2, "--rules", "--min-confidence", 0)
    expected = all_rules(BASKETS, 2)
    assert any(r["conviction"] is None for r in expected.values())  # confidence-1 rules exist
    assert_rules_match(rules_of(records), expected)


def test_min_confidence_boundary_is_inclusive(capsys, tmp_path):
    path = write_fimi(tmp_path / "b.dat", BASKETS)
    records, _ = run_json(capsys, path, "--min-count", 3, "--rules", "--min-confidence", "0.6")
    expected = {k: r for k, r in all_rules(BASKETS, 3).items() if r["confidence"] >= Fraction(3, 5)}
    got = rules_of(records)
    assert_rules_match(got, expected)
    assert (("bread", "milk"), ("jam",)) in got  # confidence exactly 3/5
    assert (("bread",), ("jam",)) not in got  # confidence 4/7, just below


def test_default_min_confidence_is_one_half(capsys, tmp_path):
    records, _ = run_json(capsys, write_fimi(tmp_path / "b.dat", BASKETS), "--min-count", 2, "--rules")
    expected = {k: r for k, r in all_rules(BASKETS, 2).items() if r["confidence"] >= Fraction(1, 2)}
    assert_rules_match(rules_of(records), expected)


def test_min_lift_boundary_is_inclusive(capsys, tmp_path):
    path = write_fimi(tmp_path / "b.dat", BASKETS)
    records, _ = run_json(
        capsys, path, "--min-count", 2, "--rules", "--min-confidence", 0, "--min-lift", "8/7"
    )
    expected = {k: r for k, r in all_rules(BASKETS, 2).items() if r["lift"] >= Fraction(8, 7)}
    got = rules_of(records)
    assert_rules_match(got, expected)
    assert (("jam",), ("bread",)) in got  # lift exactly 8/7
    assert (("bread",), ("milk",)) not in got  # lift 50/49


def test_rule_side_sizes(capsys, tmp_path):
    path = write_fimi(tmp_path / "b.dat", BASKETS)
    records, _ = run_json(
        capsys,
        path,
        "--min-count",
        1,
        "--rules",
        "--min-confidence",
        0,
        "--max-antecedent",
        2,
        "--max-consequent",
        1,
    )
    expected = {(a, c): r for (a, c), r in all_rules(BASKETS, 1).items() if len(a) <= 2 and len(c) <= 1}
    assert_rules_match(rules_of(records), expected)


def test_rule_side_items_are_repeatable(capsys, tmp_path):
    path = write_fimi(tmp_path / "b.dat", BASKETS)
    records, _ = run_json(
        capsys,
        path,
        "--min-count",
        2,
        "--rules",
        "--min-confidence",
        0,
        "--antecedent-item",
        "bread",
        "--antecedent-item",
        "jam",
        "--consequent-item",
        "milk",
        "--consequent-item",
        "tea",
    )
    left, right = {"bread", "jam"}, {"milk", "tea"}
    expected = {
        (a, c): r for (a, c), r in all_rules(BASKETS, 2).items() if set(a) <= left and set(c) <= right
    }
    assert expected
    assert_rules_match(rules_of(records), expected)


@pytest.mark.parametrize("measure", ["confidence", "lift", "leverage", "conviction", "support", "count"])
def test_max_rules_keeps_the_best_by_rank(capsys, tmp_path, measure):
    path = write_fimi(tmp_path / "b.dat", BASKETS)
    records, _ = run_json(
        capsys,
        path,
        "--min-count",
        2,
        "--rules",
        "--min-confidence",
        0,
        "--max-rules",
        4,
        "--rank-by",
        measure,
    )
    candidates = all_rules(BASKETS, 2)

    def rank(item):  # documented order: measure (higher first), then count, then names
        (left, right), rule = item
        value = math.inf if rule[measure] is None else rule[measure]
        return (-value, -rule["count"], left, right)

    expected = dict(sorted(candidates.items(), key=rank)[:4])
    assert_rules_match(rules_of(records), expected)


@pytest.mark.parametrize(
    "option",
    [
        ["--min-lift", "1"],
        ["--max-antecedent", "1"],
        ["--max-consequent", "1"],
        ["--antecedent-item", "bread"],
        ["--consequent-item", "milk"],
        ["--max-rules", "3"],
    ],
)
def test_rule_options_without_rules_exit_2(capsys, tmp_path, option):
    code, out, err = run(capsys, write_fimi(tmp_path / "b.dat", BASKETS), *option)
    assert code == 2
    assert out == ""
    assert "--rules" in err


@pytest.mark.parametrize("option", [["--min-confidence", "0.9"], ["--rank-by", "lift"]])
def test_other_rule_options_without_rules_exit_2(capsys, tmp_path, option):
    # These rule options have defaults, so the CLI cannot tell them apart from "not given"
    # and silently ignores them without --rules (unlike the options above).
    code, _, err = run(capsys, write_fimi(tmp_path / "b.dat", BASKETS), *option)
    assert code == 2
    assert "--rules" in err


# ----------------------------------------------------------------------- output
def test_json_schema_and_order(capsys, tmp_path):
    # Items are written in an unsorted order; the output must sort them.
    baskets = [list(reversed(b)) for b in BASKETS]
    records, _ = run_json(capsys, write_fimi(tmp_path / "b.dat", baskets), "--min-count", 2, "--rules")
    types = [r["type"] for r in records]
    assert types == sorted(types)  # every itemset line before every rule line ("itemset" < "rule")
    itemsets = [r for r in records if r["type"] == "itemset"]
    rules = [r for r in records if r["type"] == "rule"]
    assert itemsets and rules
    for r in itemsets:
        assert set(r) == ITEMSET_KEYS
        assert r["items"] == sorted(r["items"])
        assert isinstance(r["count"], int) and isinstance(r["support"], float)
    assert [(len(r["items"]), r["items"]) for r in itemsets] == sorted(
        (len(r["items"]), r["items"]) for r in itemsets
    )
    for r in rules:
        assert set(r) == RULE_KEYS
        assert r["antecedent"] == sorted(r["antecedent"]) and r["consequent"] == sorted(r["consequent"])
        assert (r["conviction"] is None) == (r["confidence"] == 1.0)
    keys = [(r["antecedent"], r["consequent"]) for r in rules]
    assert keys == sorted(keys)


def test_output_is_deterministic(capsys, tmp_path):
    path = write_fimi(tmp_path / "b.dat", random_baskets(60, seed=7))
    args = ["--min-count", 3, "--rules", "--min-confidence", 0, "--json"]
    first = run(capsys, path, *args)
    second = run(capsys, path, *args)
    assert first[0] == 0 and first[1]
    assert first == second


def test_table_output_is_readable(capsys, tmp_path):
    code, out, _ = run(capsys, write_fimi(tmp_path / "b.dat", BASKETS), "--min-count", 2, "--rules")
    assert code == 0
    expected = frequent(BASKETS, 2)
    rules = {k: r for k, r in all_rules(BASKETS, 2).items() if r["confidence"] >= Fraction(1, 2)}
    lines = [line.split() for line in out.splitlines()]
    assert "window of 10 baskets; an itemset needs 2" in out
    assert f"frequent itemsets: {len(expected)}" in out
    assert f"rules: {len(rules)}" in out
    assert "confidence" in out and "conviction" in out and "leverage" in out
    for items, count in expected.items():
        row = [str(count), f"{count / 10:.4f}", *", ".join(items).split()]
        assert row in lines, items
    assert sum(" -> " in line for line in out.splitlines()) == len(rules)
    assert "bread + tea -> milk" in out
    assert "infinite" in out  # {bread, tea} -> {milk} has confidence 1 (baskets 8 and 10)
    assert not out.lstrip().startswith("{")


def test_table_output_shows_ticks(capsys, tmp_path):
    code, out, _ = run(capsys, write_fimi(tmp_path / "b.dat", BASKETS), "--window-size", 4, "--tick-every", 3)
    # Ends at baskets 3, 6, 9 and 10: four ticks, the first over 3 baskets, then full windows of 4.
    assert code == 0
    headings = [line for line in out.splitlines() if line.startswith("tick")]
    assert [h.split(":")[0] for h in headings] == ["tick 0", "tick 1", "tick 2", "tick 3"]
    assert ["window of 3 baskets" in h for h in headings] == [True, False, False, False]
    assert all("window of 4 baskets" in h for h in headings[1:])


# ----------------------------------------------------------------------- hygiene
def test_repeated_items_count_once(capsys, tmp_path):
    path = tmp_path / "b.dat"
    path.write_text("a a a b\na\nb b\n")
    records, _ = run_json(capsys, path, "--min-count", 1)
    assert itemsets_of(records) == {("a",): 2, ("b",): 2, ("a", "b"): 1}
    assert all(r["support"] == r["count"] / 3 for r in records)


def test_oversized_baskets_skipped(capsys, tmp_path):
    # Cap 2: "a b c" (3 distinct) is skipped and not in N; "a a b" has 2 distinct and stays.
    path = tmp_path / "b.dat"
    path.write_text("a b c\na a b\nb\n")
    records, err = run_json(capsys, path, "--min-count", 1, "--max-basket-items", 2)
    assert itemsets_of(records) == frequent([["a", "b"], ["b"]], 1)
    assert all(r["support"] == r["count"] / 2 for r in records)
    assert "dead letters: basket too large 1" in err


def test_oversized_baskets_truncated(capsys, tmp_path):
    # Cap 2, truncate: "c a a b d" keeps its first two distinct items, c and a; N stays 3.
    path = tmp_path / "b.dat"
    path.write_text("c a a b d\na b\nb\n")
    records, err = run_json(capsys, path, "--min-count", 1, "--max-basket-items", 2, "--oversize", "truncate")
    assert itemsets_of(records) == frequent([["c", "a"], ["a", "b"], ["b"]], 1)
    assert all(r["support"] == r["count"] / 3 for r in records)
    assert "1 oversized baskets truncated" in err


@pytest.mark.parametrize(
    "name, text",
    [
        ("b.dat", "a b\n\n   \na\n"),
        # a blank JSON Lines line is not a record at all, so only the two empty item lists count
        ("b.jsonl", '{"items": ["a"]}\n{"items": []}\n\n{"items": ["a", "b"]}\n{"items": []}\n'),
    ],
)
def test_empty_baskets_are_set_aside_and_reported(capsys, tmp_path, name, text):
    path = tmp_path / name
    path.write_text(text)
    records, err = run_json(capsys, path, "--min-count", 1)
    assert itemsets_of(records) == {("a",): 2, ("b",): 1, ("a", "b"): 1}
    assert all(r["support"] == r["count"] / 2 for r in records)
    assert "dead letters: empty basket 2" in err


def test_clean_run_reports_nothing(capsys, tmp_path):
    _, err = run_json(capsys, write_fimi(tmp_path / "b.dat", BASKETS), "--min-count", 2)
    assert err == ""


# ----------------------------------------------------------------------- bad input
GOOD = [["a", "b"], ["a", "c"], ["a", "b", "c"]]
BIG_INT = "1" + "0" * 400  # a JSON integer too large for a float


def jsonl_with(bad: bytes) -> bytes:
    lines = [json.dumps({"items": b}).encode() for b in GOOD]
    return b"\n".join([lines[0], bad, *lines[1:]]) + b"\n"


def fimi_with(bad: bytes) -> bytes:
    return b"\n".join([b"a b", bad, b"a c", b"a b c"]) + b"\n"


def csv_with(bad: bytes) -> bytes:
    return b"transaction_id,item\nT1,a\nT1,b\nT2,a\nT2,c\n" + bad + b"\nT3,a\nT3,b\nT3,c\n"


BAD_INPUTS = [
    # (name, file suffix, content, line of the bad record, reason)
    ("invalid json", ".jsonl", jsonl_with(b'{"items": ["a",}'), 2, "invalid JSON"),
    ("invalid utf-8 jsonl", ".jsonl", jsonl_with(b'{"items": ["\xff\xfe"]}'), 2, "invalid UTF-8"),
    ("invalid utf-8 fimi", ".dat", fimi_with(b"a \xc3\x28"), 2, "invalid UTF-8"),
    ("not an object", ".jsonl", jsonl_with(b'["a", "b"]'), 2, "not a JSON object"),
    ("missing items", ".jsonl", jsonl_with(b'{"id": "x"}'), 2, "no items"),
    ("items not a list", ".jsonl", jsonl_with(b'{"items": "a b"}'), 2, "items not a list"),
    ("non-string item", ".jsonl", jsonl_with(b'{"items": ["a", 3]}'), 2, "bad item"),
    ("bad id", ".jsonl", jsonl_with(b'{"items": ["a"], "id": 1.5}'), 2, "bad id"),
    ("bad ts text", ".jsonl", jsonl_with(b'{"items": ["a"], "ts": "yesterday"}'), 2, "bad event time"),
    ("bad ts bool", ".jsonl", jsonl_with(b'{"items": ["a"], "ts": true}'), 2, "bad event time"),
    ("bad ts nan", ".jsonl", jsonl_with(b'{"items": ["a"], "ts": NaN}'), 2, "bad event time"),
    (
        "bad ts huge int",
        ".jsonl",
        jsonl_with(b'{"items": ["a"], "ts": ' + BIG_INT.encode() + b"}"),
        2,
        "bad event time",
    ),
    (
        "int over digit limit",
        ".jsonl",
        jsonl_with(b'{"items": ["a"], "n": ' + b"1" * 5000 + b"}"),
        2,
        "invalid JSON",
    ),
    ("json nested too deep", ".jsonl", jsonl_with(b"[" * 100_000 + b"]" * 100_000), 2, "invalid JSON"),
    ("csv field count", ".csv", csv_with(b"T2,x,extra"), 6, "wrong number of fields"),
    ("csv empty item", ".csv", csv_with(b"T2,"), 6, "empty field"),
    ("csv empty id", ".csv", csv_with(b",x"), 6, "empty field"),
    ("csv invalid utf-8", ".csv", csv_with(b"T2,\xff"), 6, "invalid UTF-8"),
    ("csv not contiguous", ".csv", csv_with(b"T1,c"), 6, "transaction not contiguous"),
]


@pytest.mark.parametrize(
    "suffix, content, line, reason", [case[1:] for case in BAD_INPUTS], ids=[case[0] for case in BAD_INPUTS]
)
def test_bad_input_fails_by_default(capsys, tmp_path, suffix, content, line, reason):
    path = tmp_path / f"b{suffix}"
    path.write_bytes(content)
    code, out, err = run(capsys, path, "--min-count", 1)
    assert code == 2
    assert out == ""
    assert len(err.strip().splitlines()) == 1
    assert f"line {line}: {reason}" in err
    assert "--bad-records skip" in err


@pytest.mark.parametrize(
    "suffix, content, line, reason", [case[1:] for case in BAD_INPUTS], ids=[case[0] for case in BAD_INPUTS]
)
def test_bad_input_skipped_and_counted(capsys, tmp_path, suffix, content, line, reason):
    path = tmp_path / f"b{suffix}"
    path.write_bytes(content)
    records, err = run_json(capsys, path, "--min-count", 1, "--bad-records", "skip")
    assert itemsets_of(records) == frequent(GOOD, 1)
    assert all(r["support"] == r["count"] / 3 for r in records)
    assert f"dead letters: {reason} 1" in err


def test_skip_summary_counts_each_reason(capsys, tmp_path):
    path = tmp_path / "b.jsonl"
    path.write_text('{"items": ["a"]}\nnope\n{"id": 1}\n{"items": ["a"]}\n{oops\n')
    records, err = run_json(capsys, path, "--min-count", 1, "--bad-records", "skip")
    assert itemsets_of(records) == {("a",): 2}
    assert "dead letters: invalid JSON 2, no items 1" in err


@pytest.mark.parametrize("mode", ["stop", "skip"])
def test_csv_missing_column_is_fatal(capsys, tmp_path, mode):
    path = write_csv(tmp_path / "b.csv", GOOD, id_column="order", item_column="product")
    code, out, err = run(capsys, path, "--bad-records", mode)
    assert code == 2
    assert out == ""
    assert "transaction_id" in err and "--csv-id-column" in err
    assert len(err.strip().splitlines()) == 1


@pytest.mark.parametrize(
    "option",
    [
        ["--window-size", "0"],
        ["--tick-every", "0"],
        ["--window", "0"],
        ["--max-size", "0"],
        ["--bad-records", "fail"],
        ["--min-support", "1.5"],
        ["--min-support", "abc"],
        ["--min-count", "0"],
        ["--min-lift", "-1"],
        ["--min-support", "0.1", "--min-count", "2"],
        ["--format", "xml"],
        ["--oversize", "drop"],
    ],
)
def test_bad_options_are_usage_errors(capsys, tmp_path, option):
    with pytest.raises(SystemExit) as exit_info:
        main(["mine", str(write_fimi(tmp_path / "b.dat", BASKETS)), *option])
    assert exit_info.value.code == 2
    assert "error" in capsys.readouterr().err


def test_zero_min_support_exits_2(capsys, tmp_path):
    code, _, err = run(capsys, write_fimi(tmp_path / "b.dat", BASKETS), "--min-support", "0")
    assert code == 2
    assert "min support" in err


# ----------------------------------------------------------------------- bundled demo
def test_bundled_demo_without_input(capsys):
    records, _ = run_json(capsys, "--min-support", "0.05")
    text = resources.files("stream_miner.data").joinpath("larkspur_market.jsonl").read_text("utf-8")
    baskets = [json.loads(line)["items"] for line in text.splitlines() if line.strip()]
    baskets = [b for b in baskets if b]
    threshold = math.ceil(Fraction(5, 100) * len(baskets))
    expected = frequent(baskets, threshold)
    assert expected and all(r["type"] == "itemset" for r in records)
    assert itemsets_of(records) == expected


def test_json_lines_through_both_decoding_paths_mine_like_brute_force(capsys, tmp_path):
    # Short messages of string items take the fast (orjson) path; objects as items, a
    # byte-order mark, huge integer ids and long messages take the full path. Both must
    # give the same baskets, so the counts are the brute force's.
    rng = random.Random(12)
    names = [f"sku-{k}" for k in range(12)] + ["caf\u00e9", "tea \\ jam", "\U0001f34e"]
    baskets, lines = [], []
    for i in range(300):
        basket = rng.sample(names, rng.randint(1, 6))
        repeated = basket + basket[:1]
        kind = i % 5
        if kind == 0:
            message = {"id": f"t{i}", "items": repeated}
        elif kind == 1:
            message = {"id": 10**30 + i, "items": [{"sku": name, "qty": 2} for name in repeated]}
        elif kind == 2:
            message = {"id": i, "ts": 1_700_000_000 + i, "items": repeated, "note": "x" * 1100}
        else:
            message = {"items": repeated, "ts": f"2024-03-01T12:00:{i % 60:02d}Z"}
        line = json.dumps(message, ensure_ascii=kind != 3)
        lines.append(("\ufeff" + line) if kind == 4 else line)
        baskets.append(basket)
    path = tmp_path / "mixed.jsonl"
    path.write_text("\n".join(lines) + "\n", encoding="utf-8")
    records, _ = run_json(capsys, path, "--min-count", "6")
    assert itemsets_of(records) == frequent(baskets, 6)
