"""Independent pieces of one step's work on several processes (the campaign job's species, the report's figures).

The children are forked, so they inherit the work and its items as they are in this process: nothing of them is
pickled, only each item's index goes to a child and its result comes back. Results are in the items' order and
are what the same calls give in this process; an exception in a child is raised here.
"""

from __future__ import annotations

from collections.abc import Callable, Sequence
from typing import Any, TypeVar

__all__ = ["in_processes"]

T = TypeVar("T")
R = TypeVar("R")

#: The work and items of the call in progress, which the forked children read (set only during the call).
_CURRENT: tuple[Callable[[Any], Any], Sequence[Any]] | None = None


def _one(k: int) -> Any:
    work, items = _CURRENT
    return work(items[k])


def in_processes(work: Callable[[T], R], items: Sequence[T], workers: int) -> list[R]:
    """``[work(item) for item in items]``, on up to ``workers`` forked processes (in this one when ``workers`` is
    1 or there is at most one item). ``work`` must return something picklable; it may write files (each child
    writes its own) and log (children share the parent's log handlers)."""
    global _CURRENT
    items = list(items)
    if workers <= 1 or len(items) <= 1:
        return [work(item) for item in items]
    import multiprocessing
    from concurrent.futures import ProcessPoolExecutor

    if _CURRENT is not None:
        msg = "in_processes is not re-entrant: a child of one call started another"
        raise RuntimeError(msg)
    _CURRENT = (work, items)
    try:
        with ProcessPoolExecutor(max_workers=min(workers, len(items)),
                                 mp_context=multiprocessing.get_context("fork")) as pool:
            return list(pool.map(_one, range(len(items))))
    finally:
        _CURRENT = None
