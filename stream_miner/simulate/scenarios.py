"""Scenario files: a generated basket stream with planted changes, described as data.

A scenario is a TOML (or JSON) file with four parts::

    name = "sudden bundle"
    about = "one line on what happens"

    [stream]                     # the base stream
    popularity = "heavy-tailed"  # independent items, Zipf-like popularity (zipf_exponent)
                                 # or "quest": a pool of weighted potential itemsets (Agrawal &
                                 # Srikant 1994; patterns, pattern_size), so base items correlate
    catalogue = 300              # items in the base catalogue (item-0001 ...)
    basket_size = 4.0            # mean basket size
    per_hour = 600               # baskets per simulated hour on average, swinging by
    daily_swing = 0.5            # this share over a day (a cosine peaking at busiest_hour, UTC)
    busiest_hour = 17
    start = 2026-03-02T06:00:00Z # event time of the first basket (or seconds since the epoch)
    baskets = 30000              # length: a number of baskets, or days = 2.5
    seed = 7

    [settings]                   # the `run` options it is scored at
    window_size = 2000
    tick_every = 200
    min_support = 0.02
    min_confidence = 0.5
    min_lift = 1.5

    [[change]]                   # any number of planted changes (none: a stationary stream)
    kind = "emerge"
    items = ["fig jam", "oat crackers"]
    rate = 0.06
    start = 14000                # a basket number, or a time after the stream's start ("20h")

Change kinds (positions ``start``/``end`` as above, ``ramp`` in baskets):

- ``emerge``: ``items`` (two or more) join a ``rate`` share of the baskets from ``start`` on,
  climbing over ``ramp`` baskets (0: at once);
- ``fade``: ``items`` are in a ``rate`` share of the baskets from the beginning until ``end``,
  falling over the last ``ramp`` baskets;
- ``spike``: one item is in a ``rate`` share of the baskets from ``start`` to ``end``, with
  no pairing (a detector must not report it);
- ``wave``: a pair whose rate follows a slow cycle of ``period`` baskets from ``start``
  (default 0), between 0 and ``rate``;
- ``burst``: ``items`` in a ``rate`` share of the baskets from ``start`` to ``end`` only.

:func:`generate` builds the baskets and their event times; :mod:`stream_miner.simulate.truth`
gives the ground truth. Bad files raise a one-line :class:`ValueError` naming the file.
"""

from __future__ import annotations

import datetime as dt
import json
import math
from collections.abc import Iterable, Mapping, Sequence
from dataclasses import dataclass
from fractions import Fraction
from importlib import resources
from pathlib import Path
from typing import Any

import numpy as np

from stream_miner.simulate.planted import Plant, add_plants, item_names, write_jsonl, zipf_baskets

KINDS = ("emerge", "fade", "spike", "wave", "burst")
POPULARITY = ("heavy-tailed", "quest")
DEFAULT_START = dt.datetime(2026, 3, 2, tzinfo=dt.UTC).timestamp()
_UNITS = {"s": 1.0, "m": 60.0, "h": 3600.0, "d": 86400.0}
Position = int | float  # a basket number (int) or seconds after the stream's start (float)


@dataclass(frozen=True)
class Stream:
    """The base stream (see the module docstring for the fields); exactly one of ``baskets``
    and ``days`` is set."""

    popularity: str = "heavy-tailed"
    catalogue: int = 300
    basket_size: float = 4.0
    zipf_exponent: float = 1.1
    patterns: int = 100
    pattern_size: float = 3.0
    per_hour: float = 600.0
    daily_swing: float = 0.5
    busiest_hour: float = 17.0
    start: float = DEFAULT_START
    baskets: int | None = None
    days: float | None = None
    seed: int = 0

    def rate_at(self, ts: float) -> float:
        """Baskets per hour at event time ``ts`` (the daily rhythm)."""
        hour = (ts % 86400) / 3600
        return self.per_hour * (
            1 + self.daily_swing * math.cos(2 * math.pi * (hour - self.busiest_hour) / 24)
        )


@dataclass(frozen=True)
class Settings:
    """The ``run`` options a scenario is scored at (the drift options left at their defaults)."""

    window_size: int
    tick_every: int
    min_support: Fraction
    min_confidence: Fraction = Fraction(1, 2)
    min_lift: Fraction = Fraction(1)
    exit_fraction: Fraction = Fraction(4, 5)

    def options(self) -> list[str]:
        """The settings as ``stream-miner run`` options."""
        options = ["--window-size", str(self.window_size), "--tick-every", str(self.tick_every)]
        options += ["--min-support", str(self.min_support), "--min-confidence", str(self.min_confidence)]
        if self.min_lift > 1:
            options += ["--min-lift", str(self.min_lift)]
        if self.exit_fraction != Fraction(4, 5):
            options += ["--exit-fraction", str(self.exit_fraction)]
        return options


@dataclass(frozen=True)
class Change:
    """One planted change as the file gives it (positions not yet resolved to baskets)."""

    kind: str
    items: tuple[str, ...]
    rate: float
    start: Position | None = None
    end: Position | None = None
    ramp: int = 0
    period: int = 0


@dataclass(frozen=True)
class Scenario:
    name: str
    about: str
    stream: Stream
    settings: Settings
    changes: tuple[Change, ...]
    source: str = ""  # where it was read from


@dataclass(frozen=True)
class Generated:
    """A scenario's baskets (basket i has id ``b{i}``), their event times, and the plants
    the changes became (one per change, in order)."""

    scenario: Scenario
    baskets: list[list[str]]
    times: list[float]
    plants: tuple[Plant, ...]

    def write(self, path: str | Path) -> int:
        """Write the stream as JSON Lines (``id``, ``ts``, ``items``); return how many."""
        return write_jsonl(str(path), self.baskets, times=self.times)


# ---------------------------------------------------------------------- loading
def bundled() -> list[Path]:
    """The scenario files shipped with the package, by name."""
    folder = resources.files("stream_miner.simulate") / "scenarios"
    return sorted(Path(str(entry)) for entry in folder.iterdir() if entry.name.endswith(".toml"))


def load(path: str | Path) -> Scenario:
    """Read and check a scenario file (``.toml`` or ``.json``)."""
    path = Path(path)
    try:
        raw = path.read_bytes()
    except OSError as error:
        raise ValueError(f"scenario {str(path)!r}: cannot read it ({error.strerror})") from None
    try:
        if path.suffix == ".json":
            data = json.loads(raw)
        else:
            import tomllib

            data = tomllib.loads(raw.decode("utf-8"))
    except (ValueError, UnicodeDecodeError) as error:  # TOMLDecodeError and JSONDecodeError too
        first = str(error).splitlines()[0] if str(error) else type(error).__name__
        raise ValueError(f"scenario {str(path)!r}: not valid {path.suffix[1:] or 'toml'}: {first}") from None
    try:
        return parse(data, source=str(path))
    except ValueError as error:
        raise ValueError(f"scenario {str(path)!r}: {error}") from None


def parse(data: Any, *, source: str = "") -> Scenario:
    """A scenario from its file's data (a mapping); a ValueError says what is wrong."""
    top = _table(data, "the file", {"name", "about", "stream", "settings", "change"})
    stream = _stream(_table(top.get("stream", {}), "[stream]", set(Stream.__dataclass_fields__)))
    settings = _settings(_table(top.get("settings"), "[settings]", set(Settings.__dataclass_fields__)))
    entries = top.get("change", [])
    if not isinstance(entries, list):
        raise ValueError("change must be an array of tables ([[change]])")
    changes = tuple(_change(entry, k) for k, entry in enumerate(entries, 1))
    name = top.get("name", Path(source).stem)
    if not isinstance(name, str) or not isinstance(top.get("about", ""), str):
        raise ValueError("name and about must be strings")
    return Scenario(name, top.get("about", ""), stream, settings, changes, source)


def _table(value: Any, where: str, known: set[str]) -> dict[str, Any]:
    if value is None:
        raise ValueError(f"{where} is missing")
    if not isinstance(value, Mapping):
        raise ValueError(f"{where} must be a table")
    unknown = sorted(set(value) - known)
    if unknown:
        raise ValueError(f"{where}: unknown key {unknown[0]!r}")
    return dict(value)


def _stream(values: dict[str, Any]) -> Stream:
    for key in ("catalogue", "patterns", "seed", "baskets"):
        _whole(values, key, "[stream]")
    for key in (
        "basket_size",
        "zipf_exponent",
        "pattern_size",
        "per_hour",
        "daily_swing",
        "busiest_hour",
        "days",
    ):
        _number(values, key, "[stream]")
    if "start" in values:
        values["start"] = _instant(values["start"])
    stream = Stream(**values)
    if stream.popularity not in POPULARITY:
        raise ValueError(
            f"[stream]: popularity must be one of {', '.join(POPULARITY)}, got {stream.popularity!r}"
        )
    if (stream.baskets is None) == (stream.days is None):
        raise ValueError("[stream]: give exactly one of baskets and days")
    if (stream.baskets or 1) < 1 or (stream.days is not None and not stream.days > 0):
        raise ValueError("[stream]: the length must be positive")
    if stream.catalogue < 2 or stream.patterns < 1 or stream.basket_size < 1 or stream.pattern_size < 1:
        raise ValueError("[stream]: need catalogue >= 2, patterns >= 1 and mean sizes >= 1")
    if not stream.per_hour > 0 or not 0 <= stream.daily_swing < 1:
        raise ValueError("[stream]: per_hour must be positive and daily_swing in [0, 1)")
    return stream


def _settings(values: dict[str, Any]) -> Settings:
    for key in ("window_size", "tick_every"):
        _whole(values, key, "[settings]")
        if key not in values or values[key] < 1:
            raise ValueError(f"[settings]: {key} must be given, at least 1")
    for key in ("min_support", "min_confidence", "min_lift", "exit_fraction"):
        _number(values, key, "[settings]")
        if key in values:
            values[key] = Fraction(str(values[key]))
    if "min_support" not in values or not 0 < values["min_support"] <= 1:
        raise ValueError("[settings]: min_support must be given, in (0, 1]")
    settings = Settings(**values)
    if not 0 <= settings.min_confidence <= 1 or not 0 < settings.exit_fraction <= 1:
        raise ValueError("[settings]: min_confidence must lie in [0, 1] and exit_fraction in (0, 1]")
    return settings


def _change(entry: Any, k: int) -> Change:
    where = f"change {k}"
    values = _table(entry, where, set(Change.__dataclass_fields__))
    kind = values.get("kind")
    if kind not in KINDS:
        raise ValueError(f"{where}: kind must be one of {', '.join(KINDS)}, got {kind!r}")
    items = values.get("items")
    if not isinstance(items, list) or not all(isinstance(i, str) and i for i in items):
        raise ValueError(f"{where}: items must be a list of item names")
    if len(set(items)) != len(items):
        raise ValueError(f"{where}: an item is named twice")
    if kind == "spike" and len(items) != 1:
        raise ValueError(f"{where}: a spike is one item (a pairing is an emerge or a burst)")
    if kind != "spike" and len(items) < 2:
        raise ValueError(f"{where}: a {kind} needs two or more items")
    _number(values, "rate", where)
    if not 0 < values.get("rate", 0) <= 1:
        raise ValueError(f"{where}: rate must be given, in (0, 1]")
    for key in ("ramp", "period"):
        _whole(values, key, where)
        if values.get(key, 0) < 0:
            raise ValueError(f"{where}: {key} must not be negative")
    for key in ("start", "end"):
        if key in values:
            values[key] = _position(values[key], f"{where}: {key}")
    needs = {"emerge": ("start",), "fade": ("end",), "spike": ("start", "end"), "burst": ("start", "end")}
    for key in needs.get(kind, ()):
        if key not in values:
            raise ValueError(f"{where}: a {kind} needs {key}")
    unused = {"emerge": ("end", "period"), "fade": ("start", "period"), "wave": ("end", "ramp")}
    unused_here = [key for key in unused.get(kind, ("period",)) if key in values]
    if unused_here:
        raise ValueError(f"{where}: a {kind} takes no {unused_here[0]}")
    if kind == "wave" and values.get("period", 0) < 2:
        raise ValueError(f"{where}: a wave needs a period of at least 2 baskets")
    values["items"] = tuple(sorted(items))
    return Change(**values)


def _whole(values: dict[str, Any], key: str, where: str) -> None:
    value = values.get(key)
    if value is not None and (isinstance(value, bool) or not isinstance(value, int)):
        raise ValueError(f"{where}: {key} must be a whole number, got {value!r}")


def _number(values: dict[str, Any], key: str, where: str) -> None:
    value = values.get(key)
    if value is not None and (isinstance(value, bool) or not isinstance(value, int | float)):
        raise ValueError(f"{where}: {key} must be a number, got {value!r}")


def _instant(value: Any) -> float:
    """Seconds since the epoch from a TOML date-time (UTC when it has no offset), an ISO
    8601 string or a number."""
    if isinstance(value, str):
        try:
            value = dt.datetime.fromisoformat(value)
        except ValueError:
            raise ValueError(f"[stream]: start {value!r} is not a date-time") from None
    if isinstance(value, dt.datetime):
        return (value if value.tzinfo else value.replace(tzinfo=dt.UTC)).timestamp()
    if isinstance(value, int | float) and not isinstance(value, bool):
        return float(value)
    raise ValueError(f"[stream]: start must be a date-time or a number, got {value!r}")


def _position(value: Any, where: str) -> Position:
    """A basket number (a whole number) or a time after the stream's start ("36h", "1.5d")."""
    if isinstance(value, int) and not isinstance(value, bool):
        if value < 0:
            raise ValueError(f"{where} must not be negative")
        return value
    if isinstance(value, str) and value[-1:] in _UNITS:
        try:
            seconds = float(value[:-1]) * _UNITS[value[-1]]
        except ValueError:
            seconds = -1.0
        if seconds >= 0:
            return seconds
    raise ValueError(f"{where} must be a basket number or a time such as '20h', got {value!r}")


# ------------------------------------------------------------------- generating
def generate(scenario: Scenario) -> Generated:
    """The scenario's baskets and event times; the same seed gives the same stream."""
    times_rng, base_rng, plant_rng = (
        np.random.default_rng(s) for s in np.random.SeedSequence(scenario.stream.seed).spawn(3)
    )
    times = event_times(scenario.stream, times_rng)
    plants = tuple(_plant(change, times, scenario.stream.start) for change in scenario.changes)
    stream, n = scenario.stream, len(times)
    base: Iterable[list[str]]
    if stream.popularity == "quest":
        from stream_miner.simulate.quest import quest_baskets

        names = item_names(stream.catalogue)
        rows = quest_baskets(
            n,
            avg_size=stream.basket_size,
            avg_pattern_size=stream.pattern_size,
            n_patterns=stream.patterns,
            n_items=stream.catalogue,
            seed=int(base_rng.integers(2**63)),
        )
        base = ([names[k] for k in row] for row in rows)
    else:
        base = zipf_baskets(
            n, base_rng, catalogue=stream.catalogue, mean_size=stream.basket_size, skew=stream.zipf_exponent
        )
    return Generated(scenario, list(add_plants(base, plants, plant_rng)), times, plants)


def event_times(stream: Stream, rng: np.random.Generator) -> list[float]:
    """Arrival times with the daily rhythm: gaps exponential with the current hourly rate."""
    times: list[float] = []
    ts, last = stream.start, stream.start + (stream.days or 0) * 86400
    while len(times) < stream.baskets if stream.baskets is not None else ts < last:
        times.append(round(ts, 3))
        ts += rng.exponential(3600 / stream.rate_at(ts))
    return times


def _plant(change: Change, times: Sequence[float], start: float) -> Plant:
    def at(position: Position | None) -> int | None:
        if position is None or isinstance(position, int):
            return position
        return int(np.searchsorted(times, start + position))

    begin = 0 if change.kind == "fade" else at(change.start) or 0
    return Plant(change.items, change.rate, begin, at(change.end), change.ramp, change.period)
