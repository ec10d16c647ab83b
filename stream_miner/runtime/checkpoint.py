"""Durable, versioned checkpoints of a :class:`WindowMiner` plus caller metadata (no pickle).

A checkpoint is one ``checkpoint.npz`` file (``np.savez``; every array is numeric, so it
loads with ``allow_pickle=False``) in a directory of the caller's choice:

- ``header``: a JSON object as UTF-8 bytes (uint8 array): ``format`` (:data:`FORMAT`),
  ``version`` (:data:`VERSION`), ``window`` (``{"kind": "count", "size": N}``,
  ``{"kind": "time", "seconds": S}`` or ``{"kind": "unbounded"}``), ``policy``
  (``max_items``, ``oversize``), ``verdicts`` (verdict value -> count), ``engine`` (tree
  item order state), ``ticks`` (``next``: the next tick's number; ``last``: null before
  the first tick, else the last tick's ``n_baskets`` and ``min_count``) and ``metadata``
  (the caller's dict, which must round-trip through JSON exactly: offsets, consumed count,
  dedup state, ...);
- ``names``: the vocabulary as a JSON list (UTF-8 bytes, uint8 array), index = item id;
- ``items`` (int32), ``start`` (int64): the window's baskets, oldest first, in CSR form;
- ``ts`` (float64): their event times, NaN when unknown;
- ``tags`` (int64): their origin tags, -1 when none (the runtime tags each basket with the
  partition and offset it was read from, so a handover can withdraw exactly those);
- ``newest_ts`` (float64, one value): the engine's newest event time (-inf when none);
- ``rank`` (int64): the tree's item order, so a restored miner mines in the same order
  (same itemset and rule ordering) and re-orders on the same schedule;
- ``pending_items`` (int32), ``pending_start`` (int64), ``pending_ts`` (float64),
  ``pending_tags`` (int64): baskets accepted but not yet applied (the engine's buffer), in
  arrival order, already cleaned;
- ``past_items`` (int32), ``past_start`` (int64), ``past_ts`` (float64), ``past_tags``
  (int64, all -1): baskets that left the window and are kept for the drift detector's
  comparisons, with their positions in ``past_ts`` (see :mod:`stream_miner.engine.past`);
  absent in checkpoints made before 0.4 (read as none);
- the last tick's result, which the next tick's delta is taken against: ``last_items``
  (int32), ``last_start`` (int64) its itemsets as item ids in CSR form (items in name
  order), ``last_counts`` (int64) their counts, ``last_rules`` (int64, one row per rule)
  the positions of each rule's antecedent and consequent among those itemsets (a rule's
  counts are those of its antecedent, consequent and their union).

Writes are atomic: a temporary file in the same directory is written, flushed and fsynced,
then renamed onto ``checkpoint.npz`` with ``os.replace`` and the directory is fsynced. A
crash at any point leaves either the previous checkpoint or the new one, never a partial
file. Temporary files (``.checkpoint.npz.*.tmp``) are never read; stale ones left by a
crash are removed by the next save, and a save that fails removes its own. One writer per
directory is assumed. A save the system refuses (disk full, no permission, the directory or
the file's path taken by something else) raises :class:`CheckpointWriteError`, an OSError
whose one-line message names the file and the cause.

Loading checks everything it reads and raises :class:`CheckpointError` (one line, naming
the problem and the caller's start-fresh option) for a file that is not a readable npz,
a truncated or inconsistent file, a foreign file, another format version (version 1, made
by an older stream-miner, held no tick state; version 2 files, which held no origin tags,
are read with none), or a window / basket policy different from the one the caller runs
with; a file the system will not let it read (a directory in its place, no permission) is a
:class:`CheckpointError` naming the path and the cause. It never resets silently.
"""

from __future__ import annotations

import json
import math
import os
import pathlib
import zipfile
from collections import Counter
from typing import Any, BinaryIO

import numpy as np

from stream_miner.engine.baskets import BasketArrays
from stream_miner.engine.hygiene import BasketPolicy, Verdict
from stream_miner.engine.miner import DEFAULT_BATCH, MinerState, WindowMiner
from stream_miner.engine.result import MiningResult
from stream_miner.engine.rule_set import RuleSet
from stream_miner.engine.rules import Rule
from stream_miner.engine.window import CountWindow, TimeWindow
from stream_miner.runtime.atomic_file import remove_stale_temporaries, replace_atomically

FORMAT = "stream-miner-checkpoint"
VERSION = 3
TAGS_SINCE = 3  # the first version with origin tags
CHECKPOINT_NAME = "checkpoint.npz"
DEFAULT_FRESH_OPTION = "--start-fresh"
_DEFAULT_POLICY = BasketPolicy()
_KEYS = (
    "header",
    "names",
    "items",
    "start",
    "ts",
    "tags",
    "newest_ts",
    "rank",
    "pending_items",
    "pending_start",
    "pending_ts",
    "pending_tags",
    "last_items",
    "last_start",
    "last_counts",
    "last_rules",
)
_PAST_KEYS = ("past_items", "past_start", "past_ts", "past_tags")  # written since 0.4, optional to read
_HEADER_KEYS = ("window", "policy", "verdicts", "engine", "ticks", "metadata")


class CheckpointError(ValueError):
    """A checkpoint that cannot be used: unreadable, corrupted, foreign, too new, or made with
    another window or basket policy. The message is one line; it names the start-fresh
    option unless the file could not be read at all."""


class CheckpointWriteError(OSError):
    """A checkpoint the system would not let us write; the message is one line naming the
    file and the cause. A temporary file that cannot be removed (a read-only directory) is
    removed by the next write that works."""


# ---------------------------------------------------------------------------- save
def save_checkpoint(directory: str | os.PathLike, miner: WindowMiner, metadata: dict) -> pathlib.Path:
    """Write ``miner``'s window and ``metadata`` atomically to ``directory/checkpoint.npz``.

    Read-only: the miner's buffered (not yet applied) baskets are saved as a buffer.
    ``metadata`` must survive a JSON round trip unchanged (str keys; dict, list, str, int,
    float, bool, None values; no NaN), else ValueError and nothing is written.
    Returns the checkpoint's path; raises :class:`CheckpointWriteError` when it cannot be
    written.
    """
    if not isinstance(metadata, dict):
        raise TypeError(f"metadata must be a dict, got {type(metadata).__name__}")
    try:
        metadata_json = json.dumps(metadata, allow_nan=False, ensure_ascii=True)
    except (TypeError, ValueError) as error:
        raise ValueError(f"checkpoint metadata is not plain JSON: {error}") from None
    mismatch = _json_mismatch(json.loads(metadata_json), metadata)
    if mismatch:
        raise ValueError(f"checkpoint metadata must round-trip through JSON exactly: {mismatch}")

    state = miner.state()  # read only: saving changes nothing in the miner
    header = {
        "format": FORMAT,
        "version": VERSION,
        "window": _window_config(miner.window),
        "policy": _policy_config(miner.policy),
        "verdicts": {str(Verdict(v).value): int(n) for v, n in state.verdicts.items() if n},
        "engine": {
            "ranked": state.ranked,
            "applied_since_order": state.applied_since_order,
            "left_total": state.left_total,
            "keeping_past": state.keeping_past,
        },
        "ticks": {"next": state.next_tick, "last": _last_header(state.last_result)},
        "metadata": json.loads(metadata_json),
    }
    arrays = {
        "header": _json_bytes(header),
        "names": _json_bytes(state.names),
        "items": state.baskets.items.astype(np.int32),
        "start": state.baskets.start.astype(np.int64),
        "ts": np.asarray(state.ts, dtype=np.float64),
        "tags": np.asarray(state.tags, dtype=np.int64),
        "newest_ts": np.array([state.newest_ts], dtype=np.float64),
        "rank": state.rank.astype(np.int64),
        "pending_items": state.pending.items.astype(np.int32),
        "pending_start": state.pending.start.astype(np.int64),
        "pending_ts": state.pending_ts,
        "pending_tags": state.pending_tags,
        "past_items": state.past.items.astype(np.int32),
        "past_start": state.past.start.astype(np.int64),
        "past_ts": np.asarray(state.past_positions, dtype=np.float64),
        "past_tags": np.full(len(state.past), -1, dtype=np.int64),
        **_last_arrays(state.last_result, state.names),
    }

    directory = pathlib.Path(directory)
    final = directory / CHECKPOINT_NAME
    try:
        directory.mkdir(parents=True, exist_ok=True)
    except FileExistsError:  # exist_ok covers directories only: a file holds the path
        raise CheckpointWriteError(
            f"cannot write checkpoint {final}: {directory} is not a directory"
        ) from None
    except OSError as error:
        raise _write_error(final, error) from None
    try:
        remove_stale_temporaries(final)
        return replace_atomically(final, lambda handle: np.savez(handle, **arrays))  # type: ignore[arg-type]
    except OSError as error:
        raise _write_error(final, error) from None


def _write_error(path: pathlib.Path, error: OSError) -> CheckpointWriteError:
    return CheckpointWriteError(f"cannot write checkpoint {path}: {error.strerror or _one_line(error)}")


# ---------------------------------------------------------------------------- load
def load_checkpoint(
    directory: str | os.PathLike,
    *,
    window: CountWindow | TimeWindow | None,
    policy: BasketPolicy = _DEFAULT_POLICY,
    batch_size: int = DEFAULT_BATCH,
    fresh_option: str = DEFAULT_FRESH_OPTION,
) -> tuple[WindowMiner, dict] | None:
    """Restore ``(miner, metadata)`` from ``directory/checkpoint.npz``; None when there is none.

    ``window`` and ``policy`` must equal those the checkpoint was made with; ``fresh_option``
    is the caller's option for discarding the checkpoint, quoted in every error message.
    Raises :class:`CheckpointError` for anything unusable.
    """
    path = pathlib.Path(directory) / CHECKPOINT_NAME

    def fail(problem: str) -> CheckpointError:
        return CheckpointError(
            f"checkpoint {path}: {problem}; pass {fresh_option} to discard it and start from an empty window"
        )

    try:
        with open(path, "rb") as stream:
            data = _read_arrays(stream, fail)
    except (FileNotFoundError, NotADirectoryError):
        return None
    except OSError as error:  # opening it: a directory in its place, no permission
        raise CheckpointError(
            f"cannot read checkpoint {path}: {error.strerror or _one_line(error)}"
        ) from None
    if "header" not in data:
        raise fail(f"foreign file, not a {FORMAT} (no header)")
    header = _decode_json(data["header"], "header", fail)
    if not isinstance(header, dict) or header.get("format") != FORMAT:
        found = header.get("format") if isinstance(header, dict) else None
        raise fail(f"foreign file, not a {FORMAT} (format {found!r})")
    version = header.get("version")
    if type(version) is not int or version < 1:
        raise fail(f"corrupted: bad version {version!r}")
    if version > VERSION:
        raise fail(
            f"incompatible: version {version} is newer than supported ({VERSION}), upgrade stream-miner"
        )
    if version < TAGS_SINCE - 1:
        raise fail(
            f"incompatible: made by an older stream-miner (version {version}, this one reads {VERSION})"
        )
    if version < TAGS_SINCE:
        data |= {
            f"{prefix}tags": np.full(data[f"{prefix}ts"].shape, -1, dtype=np.int64)
            for prefix in ("", "pending_")
            if f"{prefix}ts" in data
        }
    missing = [key for key in _KEYS if key not in data]
    missing += [key for key in _HEADER_KEYS if key not in header]
    if missing:
        raise fail(f"corrupted: missing {', '.join(missing)}")

    want_window, want_policy = _window_config(window), _policy_config(policy)
    if header["window"] != want_window or header["policy"] != want_policy:
        raise fail(
            f"incompatible: made with window {_describe(header['window'])} and policy "
            f"{_describe(header['policy'])}, but this run uses window {_describe(want_window)} "
            f"and policy {_describe(want_policy)} (restart with the checkpoint's settings)"
        )

    state = _validate(data, header, window, policy, fail)
    miner = WindowMiner.restored(MinerState(**state), window, policy, batch_size)
    return miner, header["metadata"]


def _read_arrays(stream: BinaryIO, fail) -> dict[str, np.ndarray]:
    try:
        loaded = np.load(stream, allow_pickle=False)
        if not isinstance(loaded, np.lib.npyio.NpzFile):
            raise fail("foreign file, a single .npy array rather than a checkpoint")
        with loaded as npz:
            return {key: npz[key] for key in npz.files}
    except CheckpointError:
        raise
    except (OSError, ValueError, EOFError, KeyError, zipfile.BadZipFile, zipfile.LargeZipFile) as error:
        raise fail(
            f"corrupted: not a readable npz file ({type(error).__name__}: {_one_line(error)})"
        ) from None


def _validate(data, header, window, policy, fail) -> dict[str, Any]:
    """Check every array and header field; return the restore arguments."""
    names = _decode_json(data["names"], "names", fail)
    if not isinstance(names, list) or not all(isinstance(n, str) for n in names):
        raise fail("corrupted: names are not a list of strings")
    if len(set(names)) != len(names):
        raise fail("corrupted: repeated item names")
    if not isinstance(header["metadata"], dict):
        raise fail("corrupted: metadata is not an object")

    newest, rank = data["newest_ts"], data["rank"]
    for key, array, kind in (("newest_ts", newest, "f"), ("rank", rank, "i")):
        if array.ndim != 1 or array.dtype.kind not in kind:
            raise fail(f"corrupted: array {key} has dtype {array.dtype} and shape {array.shape}")
    if newest.size != 1 or math.isnan(float(newest[0])) or float(newest[0]) == math.inf:
        raise fail("corrupted: bad newest event time")
    newest_ts = float(newest[0])
    baskets, ts, tags = _baskets(data, "", len(names), policy, fail)
    pending, pending_ts, pending_tags = _baskets(data, "pending_", len(names), policy, fail)
    past, past_positions = BasketArrays.empty(), np.empty(0)
    if "past_items" in data:  # checkpoints before 0.4 kept no past baskets
        past, past_positions, _ = _baskets(data, "past_", len(names), policy, fail)
    n = len(baskets)
    if isinstance(window, CountWindow) and n > window.size:
        raise fail(f"corrupted: {n} baskets in a window of {window.size}")
    if isinstance(window, TimeWindow) and (np.isnan(ts).any() or np.isnan(pending_ts).any()):
        raise fail("corrupted: a basket in a time window has no event time")

    engine = header["engine"]
    ranked = engine.get("ranked") if isinstance(engine, dict) else None
    applied = engine.get("applied_since_order") if isinstance(engine, dict) else None
    left_total = engine.get("left_total", 0) if isinstance(engine, dict) else None
    keeping_past = engine.get("keeping_past", False) if isinstance(engine, dict) else None
    if type(ranked) is not bool or type(applied) is not int or applied < 0:
        raise fail("corrupted: bad engine state")
    if type(left_total) is not int or left_total < 0 or type(keeping_past) is not bool:
        raise fail("corrupted: bad engine state (past baskets)")
    if rank.size > len(names) or not np.array_equal(np.sort(rank), np.arange(rank.size)):
        raise fail("corrupted: the item order is not a permutation")
    if n and (not ranked or baskets.items.max() >= rank.size):
        raise fail("corrupted: the item order does not cover the window's items")

    next_tick, last_result = _last_result(data, header["ticks"], names, fail)
    verdicts = header["verdicts"]
    if not isinstance(verdicts, dict):
        raise fail("corrupted: bad verdict counters")
    known = {v.value for v in Verdict}
    counts: Counter[Verdict] = Counter()
    for value, count in verdicts.items():
        if value not in known or type(count) is not int or count < 0:
            raise fail(f"corrupted: bad verdict counter {value!r}: {count!r}")
        counts[Verdict(value)] = count
    return {
        "names": names,
        "baskets": baskets,
        "ts": ts,
        "tags": tags,
        "pending": pending,
        "pending_ts": pending_ts,
        "pending_tags": pending_tags,
        "newest_ts": newest_ts,
        "rank": rank.astype(np.int64),
        "ranked": ranked,
        "applied_since_order": applied,
        "verdicts": counts,
        "next_tick": next_tick,
        "last_result": last_result,
        "past": past,
        "past_positions": past_positions,
        "left_total": left_total,
        "keeping_past": keeping_past,
    }


def _baskets(
    data, prefix: str, n_names: int, policy: BasketPolicy, fail
) -> tuple[BasketArrays, np.ndarray, np.ndarray]:
    """The baskets stored under ``prefix`` (window or buffer), checked: non-empty, distinct
    known items within the policy's size cap, one event time and one origin tag each."""
    baskets = _rows(data, prefix, n_names, fail)
    ts, tags = data[f"{prefix}ts"], data[f"{prefix}tags"]
    for key, array, kind in (("ts", ts, "f"), ("tags", tags, "i")):
        if array.ndim != 1 or array.dtype.kind != kind:
            raise fail(f"corrupted: array {prefix}{key} has dtype {array.dtype} and shape {array.shape}")
        if array.size != len(baskets):
            raise fail(f"corrupted: {prefix}{key} does not match the baskets")
    if tags.size and tags.min() < -1:
        raise fail(f"corrupted: a negative origin tag in {prefix}tags")
    if len(baskets) and int(baskets.lengths().max()) > policy.max_items:
        raise fail(f"corrupted: a basket in {prefix}items is larger than the policy allows")
    return baskets, ts.astype(np.float64), tags.astype(np.int64)


def _rows(data, prefix: str, n_names: int, fail) -> BasketArrays:
    """The rows of item ids stored under ``prefix`` in CSR form, checked: non-empty rows of
    distinct item ids of the vocabulary."""
    items, start = data[f"{prefix}items"], data[f"{prefix}start"]
    for key, array, kind in (("items", items, "iu"), ("start", start, "i")):
        if array.ndim != 1 or array.dtype.kind not in kind:
            raise fail(f"corrupted: array {prefix}{key} has dtype {array.dtype} and shape {array.shape}")
    if start.size < 1 or start[0] != 0 or start[-1] != items.size or (np.diff(start) < 1).any():
        raise fail(f"corrupted: {prefix}start offsets are inconsistent")
    if items.size and (items.min() < 0 or items.max() >= n_names):
        raise fail(f"corrupted: an item id in {prefix}items lies outside the vocabulary")
    rows = BasketArrays.from_lengths(items.astype(np.int64), np.diff(start))
    keys = np.sort((rows.row_of_items() << 32) | rows.items)
    if (keys[1:] == keys[:-1]).any():
        raise fail(f"corrupted: a row of {prefix}items repeats an item")
    return rows


def _last_result(data, ticks: Any, names: list[str], fail) -> tuple[int, MiningResult | None]:
    """The next tick's number and the last tick's result, checked: itemsets of known items
    in name order, each once, counted between the threshold and the window size; rules made
    of two disjoint itemsets whose union is an itemset."""
    next_tick = ticks.get("next") if isinstance(ticks, dict) else None
    last = ticks.get("last") if isinstance(ticks, dict) else None
    if type(next_tick) is not int or next_tick < 0 or (next_tick == 0) != (last is None):
        raise fail("corrupted: bad tick state")
    rows, counts, rules = _rows(data, "last_", len(names), fail), data["last_counts"], data["last_rules"]
    if counts.ndim != 1 or counts.dtype.kind != "i" or counts.size != len(rows):
        raise fail("corrupted: last_counts does not match the last result's itemsets")
    if rules.ndim != 2 or rules.shape[1] != 2 or rules.dtype.kind != "i":
        raise fail(f"corrupted: array last_rules has dtype {rules.dtype} and shape {rules.shape}")
    if last is None:
        if len(rows) or len(rules):
            raise fail("corrupted: a last result without a last tick")
        return next_tick, None
    n_baskets = last.get("n_baskets") if isinstance(last, dict) else None
    min_count = last.get("min_count") if isinstance(last, dict) else None
    if type(n_baskets) is not int or type(min_count) is not int or n_baskets < 0 or min_count < 1:
        raise fail("corrupted: bad last result header")
    if counts.size and (counts.min() < min_count or counts.max() > n_baskets):
        raise fail("corrupted: a count in the last result lies outside [min_count, n_baskets]")
    keys = [tuple(names[i] for i in row) for row in rows.to_lists()]
    if any(list(key) != sorted(set(key)) for key in keys):
        raise fail("corrupted: an itemset of the last result is not in name order")
    itemsets = dict(zip(keys, counts.tolist(), strict=True))
    if len(itemsets) != len(keys):
        raise fail("corrupted: the last result repeats an itemset")
    if rules.size and (rules.min() < 0 or rules.max() >= len(keys)):
        raise fail("corrupted: a rule of the last result refers to no itemset")
    out = []
    for left, right in rules.tolist():
        antecedent, consequent = keys[left], keys[right]
        union = tuple(sorted(antecedent + consequent))
        if set(antecedent) & set(consequent) or union not in itemsets:
            raise fail("corrupted: a rule of the last result does not split an itemset")
        count = itemsets[union]
        out.append(Rule(antecedent, consequent, count, itemsets[antecedent], itemsets[consequent], n_baskets))
    return next_tick, MiningResult(n_baskets, min_count, itemsets, out)


# ---------------------------------------------------------------------------- helpers
def _last_header(last: MiningResult | None) -> dict[str, int] | None:
    return None if last is None else {"n_baskets": last.n_baskets, "min_count": last.min_count}


def _last_arrays(last: MiningResult | None, names: list[str]) -> dict[str, np.ndarray]:
    """The last tick's itemsets (item ids, CSR) and counts, and its rules as positions of
    their two sides among those itemsets."""
    itemsets = {} if last is None else last.itemsets
    id_of = {name: i for i, name in enumerate(names)} if itemsets else {}
    position = {items: i for i, items in enumerate(itemsets)}
    rows = BasketArrays.from_lists([[id_of[name] for name in items] for items in itemsets])
    rules = RuleSet.of([] if last is None else last.rules, 0)
    at = np.fromiter(map(position.__getitem__, rules.sides), np.int64, len(rules.sides))
    return {
        "last_items": rows.items.astype(np.int32),
        "last_start": rows.start.astype(np.int64),
        "last_counts": np.array(list(itemsets.values()), dtype=np.int64),
        "last_rules": np.stack([at[rules.antecedent], at[rules.consequent]], axis=1).reshape(len(rules), 2),
    }


def _window_config(window: CountWindow | TimeWindow | None) -> dict[str, Any]:
    if isinstance(window, CountWindow):
        return {"kind": "count", "size": int(window.size)}
    if isinstance(window, TimeWindow):
        return {"kind": "time", "seconds": float(window.seconds)}
    if window is None:
        return {"kind": "unbounded"}
    raise TypeError(f"unsupported window {window!r}")


def _policy_config(policy: BasketPolicy) -> dict[str, Any]:
    return {"max_items": int(policy.max_items), "oversize": str(policy.oversize.value)}


def _describe(config: Any) -> str:
    if isinstance(config, dict):
        return "(" + ", ".join(f"{k}={v}" for k, v in config.items()) + ")"
    return repr(config)


def _json_bytes(value: Any) -> np.ndarray:
    text = json.dumps(value, ensure_ascii=True, allow_nan=False, separators=(",", ":"))
    return np.frombuffer(text.encode("ascii"), dtype=np.uint8).copy()


def _decode_json(array: np.ndarray, key: str, fail) -> Any:
    if array.dtype != np.uint8 or array.ndim != 1:
        raise fail(f"corrupted: {key} is not a byte string")
    try:
        return json.loads(array.tobytes().decode("utf-8"))
    except (UnicodeDecodeError, ValueError):
        raise fail(f"corrupted: {key} is not valid JSON") from None


def _json_mismatch(loaded: Any, original: Any, where: str = "metadata") -> str | None:
    """Where ``original`` differs from its JSON round trip ``loaded`` (same types all the
    way down: a tuple is not a list, an int key is not a str key), or None."""
    if type(loaded) is not type(original):
        return f"{where} is a {type(original).__name__}, read back as a {type(loaded).__name__}"
    if isinstance(original, dict):
        if list(loaded) != list(original):
            return f"{where} has non-str keys"
        for key in original:
            found = _json_mismatch(loaded[key], original[key], f"{where}[{key!r}]")
            if found:
                return found
    elif isinstance(original, list):
        for i, (x, y) in enumerate(zip(loaded, original, strict=True)):
            found = _json_mismatch(x, y, f"{where}[{i}]")
            if found:
                return found
    elif loaded != original:
        return f"{where} changes value"
    return None


def _one_line(error: BaseException) -> str:
    return " ".join(str(error).split())[:200]
