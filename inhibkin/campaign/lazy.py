"""Per-compound fits of a campaign built when they are read, not when they are fitted.

The batched engine answers a whole chunk in arrays (:class:`~inhibkin.engine.MechanismBatch`);
the ranking rows are read from those arrays (:func:`~inhibkin.campaign.grid.facts_from_batch`),
and a compound's :class:`~inhibkin.mechanism.fit.MechanismFit` — a dozen small tables — is
built only when someone asks for it. :class:`BatchFit` is the recipe for one compound, and
:class:`LazyFits` the read-only mapping of :attr:`Campaign.fits` that follows the recipes on
first access (and keeps the result).
"""

from __future__ import annotations

from ..core.readonly import ReadOnlyMapping
from ..mechanism.fit import with_rate_flags

__all__ = ["BatchFit", "LazyFits"]


class BatchFit:
    """How to build compound ``c``'s MechanismFit from its chunk's batch (picklable: the
    compounds of one chunk share, and pickle, one batch)."""

    __slots__ = ("batch", "c", "labels", "flags")

    def __init__(self, batch, c, labels, flags=None):
        self.batch, self.c, self.labels, self.flags = batch, c, labels, flags

    def build(self):
        fit = self.batch.mechanism_fit(self.c, self.labels)
        return fit if self.flags is None else with_rate_flags(fit, self.flags)


class LazyFits(ReadOnlyMapping):
    """A read-only mapping whose :class:`BatchFit` values are built on first access."""

    __slots__ = ()

    def __getitem__(self, key):
        value = self._items[key]
        if isinstance(value, BatchFit):
            value = value.build()
            self._items[key] = value
        return value

    def __reduce__(self):
        return (LazyFits, (self._items,))

    def __repr__(self):
        return f"{type(self).__name__}({len(self)} fits)"

    def __eq__(self, other):
        return dict(self.items()) == dict(other) if isinstance(other, ReadOnlyMapping) or \
            hasattr(other, "items") else NotImplemented

    __hash__ = None
