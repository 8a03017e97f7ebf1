"""A mapping of figures computed when asked for, holding only the last few (the report's
per-corner figures, so that a report of a thousand corners never holds them all)."""

from __future__ import annotations

from collections import OrderedDict
from collections.abc import Callable, Mapping

__all__ = ["LazyFigures"]


class LazyFigures(Mapping):
    """Corner name -> a figure computed from the journal when it is asked for.

    The names are known from results.json alone (no journal read); each value is computed
    by ``load(name)`` on access, and only the last ``keep`` are held, so that a report of
    a thousand corners never holds a thousand corners' arrays.

    Parameters
    ----------
    names
        The corners that have this figure, in the job's order.
    load
        Computes the figure of one corner.
    keep
        How many computed figures are held for another access.
    """

    def __init__(self, names, load: Callable[[str], object], keep: int = 2) -> None:
        self._names = list(names)
        self._known = set(self._names)
        self._load, self._keep = load, keep
        self._held: OrderedDict[str, object] = OrderedDict()

    def __getitem__(self, name: str):
        if name not in self._known:
            raise KeyError(name)
        if name in self._held:
            self._held.move_to_end(name)
            return self._held[name]
        value = self._load(name)
        self._held[name] = value
        while len(self._held) > self._keep:
            self._held.popitem(last=False)
        return value

    def get(self, name, default=None):
        """The figure of ``name``, ``default`` when it has none (an error computing it is
        raised, not taken for a missing figure)."""
        return self[name] if name in self._known else default

    def __iter__(self):
        return iter(self._names)

    def __len__(self) -> int:
        return len(self._names)

    def __contains__(self, name) -> bool:
        return name in self._known
