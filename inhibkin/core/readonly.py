"""Read-only containers for result objects.

A frozen dataclass stops ``fit.params = x`` but not ``fit.params.loc["kic", "estimate"]
= x`` nor ``fit.models["mixed"] = x``: the containers inside it stay mutable. Results wrap
them here, once, when they are built: :class:`ReadOnlyFrame` refuses every assignment
(and operations on it give ordinary, writable frames, so ``frame.copy()`` is the way to
an editable table); :class:`ReadOnlyMapping` is a mapping without item assignment that,
unlike ``types.MappingProxyType``, can be pickled (results travel back from worker
processes).
"""

from __future__ import annotations

from collections.abc import Mapping

import numpy as np
import pandas as pd

# Copy-on-write (always on from pandas 3) keeps a result's frame apart from the frame it
# was built from without a copy; before it, the frame is copied.
_COPY_ON_WRITE = int(pd.__version__.split(".")[0]) >= 3

__all__ = ["ReadOnlyFrame", "ReadOnlyMapping", "readonly_frame", "readonly_array",
           "readonly_mapping"]

_REFUSED = ("this table belongs to a result and is read-only; edit a copy "
            "(result.to_frame() or table.copy())")


class _ReadOnlyIndexer:
    """An indexer (``loc``, ``iloc``, ``at``, ``iat``) that reads but never writes."""

    __slots__ = ("_indexer",)

    def __init__(self, indexer):
        self._indexer = indexer

    def __getitem__(self, key):
        return self._indexer[key]

    def __setitem__(self, key, value):
        raise TypeError(_REFUSED)

    def __call__(self, *args, **kwargs):
        return _ReadOnlyIndexer(self._indexer(*args, **kwargs))


class ReadOnlyFrame(pd.DataFrame):
    """A DataFrame that refuses assignment; whatever is computed from it is an ordinary
    DataFrame."""

    @property
    def _constructor(self):
        return pd.DataFrame

    def __setitem__(self, key, value):
        raise TypeError(_REFUSED)

    def __delitem__(self, key):
        raise TypeError(_REFUSED)

    def insert(self, *args, **kwargs):
        raise TypeError(_REFUSED)

    def pop(self, *args, **kwargs):
        raise TypeError(_REFUSED)

    def _update_inplace(self, *args, **kwargs):
        # Every ``inplace=True`` method (fillna, drop, rename, sort_values...) ends here.
        raise TypeError(_REFUSED)

    @property
    def loc(self):
        return _ReadOnlyIndexer(super().loc)

    @property
    def iloc(self):
        return _ReadOnlyIndexer(super().iloc)

    @property
    def at(self):
        return _ReadOnlyIndexer(super().at)

    @property
    def iat(self):
        return _ReadOnlyIndexer(super().iat)


def readonly_frame(frame: pd.DataFrame) -> ReadOnlyFrame:
    """``frame`` as a :class:`ReadOnlyFrame`.

    Under pandas' copy-on-write (pandas ≥ 3) no data are copied: the new frame shares the
    arrays lazily, a later edit of ``frame`` copies them first and never reaches the
    result, and the arrays a result hands out (``table["estimate"].to_numpy()``) are
    read-only. With older pandas the frame is copied.
    """
    if isinstance(frame, ReadOnlyFrame):
        return frame
    return ReadOnlyFrame(frame if _COPY_ON_WRITE else frame.copy())


def readonly_array(array):
    """A read-only copy of ``array`` (None stays None)."""
    if array is None:
        return None
    out = np.array(array, copy=True)
    out.flags.writeable = False
    return out


class ReadOnlyMapping(Mapping):
    """A mapping that cannot be changed after it is built, and can be pickled."""

    __slots__ = ("_items",)

    def __init__(self, items=()):
        object.__setattr__(self, "_items", dict(items))

    def __getitem__(self, key):
        return self._items[key]

    def __iter__(self):
        return iter(self._items)

    def __len__(self):
        return len(self._items)

    def __setitem__(self, key, value):
        raise TypeError("a result's mapping is read-only")

    def __delitem__(self, key):
        raise TypeError("a result's mapping is read-only")

    def __setattr__(self, name, value):
        raise TypeError("a result's mapping is read-only")

    def __reduce__(self):
        return (ReadOnlyMapping, (self._items,))

    def __repr__(self):
        return f"{type(self).__name__}({self._items!r})"

    def __eq__(self, other):
        return dict(self._items) == dict(other) if isinstance(other, Mapping) else \
            NotImplemented

    __hash__ = None


def readonly_mapping(items, *, nested=True) -> ReadOnlyMapping:
    """A read-only mapping of ``items``; with ``nested``, dict values become read-only
    mappings too (``options["units"]``)."""
    if isinstance(items, ReadOnlyMapping):
        return items
    return ReadOnlyMapping({k: readonly_mapping(v) if nested and isinstance(v, dict) else v
                            for k, v in dict(items).items()})
