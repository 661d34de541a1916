"""The one reduction tree of the partitioned engine: delayed pairwise merges over blocks."""

from __future__ import annotations

import functools


def tree(items: list, combine, *, final=None, split_every: int = 8):
    """A tree of delayed ``combine(a, b)`` reductions over ``items`` (dask objects)."""
    from dask import delayed

    def many(values):
        return functools.reduce(combine, values)

    level = list(items)
    if not level:
        raise ValueError("nothing to reduce")
    while len(level) > 1:
        level = [delayed(many)(level[i:i + split_every]) if len(level[i:i + split_every]) > 1
                 else level[i] for i in range(0, len(level), split_every)]
    root = level[0]
    return delayed(final)(root) if final is not None else root


__all__ = ["tree"]
