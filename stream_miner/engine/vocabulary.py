"""Item vocabulary: arbitrary Unicode item names mapped to dense integer ids."""

from __future__ import annotations

from collections.abc import Iterable, Sequence


class ItemVocabulary:
    """Assigns dense ids 0, 1, 2, ... to item names in order of first sight.

    >>> vocab = ItemVocabulary()
    >>> vocab.encode(["tea", "scone", "tea"])
    [0, 1, 0]
    >>> vocab.name(1)
    'scone'
    """

    __slots__ = ("_ids", "_names")

    def __init__(self, names: Iterable[str] = ()) -> None:
        self._names: list[str] = []
        self._ids: dict[str, int] = {}
        for name in names:
            self.id_of(name)

    def __len__(self) -> int:
        return len(self._names)

    def id_of(self, name: str) -> int:
        """Return the id of ``name``, assigning the next free id if it is new. O(1)."""
        if not isinstance(name, str):
            raise _not_a_name(name)
        item_id = self._ids.get(name)
        if item_id is None:
            item_id = len(self._names)
            self._ids[name] = item_id
            self._names.append(name)
        return item_id

    def lookup(self, name: str) -> int | None:
        """Return the id of ``name`` or None when it was never seen (assigns nothing)."""
        return self._ids.get(name)

    def encode(self, names: Sequence[str]) -> list[int]:
        """Map names to ids, assigning ids to new names. A name that is not a str raises
        ValueError, and then no new name got an id."""
        ids = self._ids
        try:
            return [ids[name] for name in names]
        except (KeyError, TypeError):
            for name in names:
                if not isinstance(name, str):
                    raise _not_a_name(name) from None
            return [self.id_of(name) for name in names]

    def name(self, item_id: int) -> str:
        """Return the name of ``item_id``."""
        return self._names[item_id]

    def names(self) -> list[str]:
        """All names, indexed by id (a copy)."""
        return list(self._names)


def _not_a_name(value: object) -> ValueError:
    return ValueError(f"an item name must be a str, not {type(value).__name__}")
