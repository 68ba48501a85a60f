"""Independent pieces of one step's work on several processes (the campaign job's species, the report's figures).

The children are forked, so they inherit the work and its items as they are in this process: nothing of them is
pickled, only each item's index goes to a child and its result comes back. Results are in the items' order and
are what the same calls give in this process; an exception in a child is raised here. :func:`start_in_processes`
returns at once, so that this process can go on with other work while the children run (the campaign job draws
the cubes' figures while it computes the budget); :func:`in_processes` waits for the results.
"""

from __future__ import annotations

import itertools
from collections.abc import Callable, Sequence
from typing import Any, Generic, TypeVar

__all__ = ["in_processes", "start_in_processes", "Running"]

T = TypeVar("T")
R = TypeVar("R")

#: The work and items of each call in progress, by call number: a forked child finds its call's here.
_CALLS: dict[int, tuple[Callable[[Any], Any], Sequence[Any]]] = {}
_NUMBERS = itertools.count()


def _one(call: int, k: int) -> Any:
    work, items = _CALLS[call]
    return work(items[k])


class Running(Generic[R]):
    """Work started by :func:`start_in_processes`; :meth:`results` waits for it."""

    def __init__(self, work: Callable[[T], R], items: list[T], children: int, helping: bool = True) -> None:
        self._work, self._items, self._pool, self._futures = work, items, None, []
        self._helping = helping
        self._call = next(_NUMBERS)
        self._started = children >= 1 and len(items) >= 1
        if self._started:
            import multiprocessing
            from concurrent.futures import ProcessPoolExecutor

            _CALLS[self._call] = (work, items)
            self._pool = ProcessPoolExecutor(max_workers=min(children, len(items)),
                                             mp_context=multiprocessing.get_context("fork"))
            self._futures = [self._pool.submit(_one, self._call, k) for k in range(len(items))]

    def results(self) -> list[R]:
        """The results in the items' order (computed here, in turn, when no child was started). Items no child has
        started yet are computed here, from the last one back, while the children go on from the front."""
        if not self._started:
            return [self._work(item) for item in self._items]
        if self._pool is None:
            msg = "the work was closed before its results were taken"
            raise RuntimeError(msg)
        try:
            here = {}
            if self._helping:
                for k in reversed(range(len(self._futures))):
                    if not self._futures[k].cancel():           # a child has it (or had it): the rest too
                        break
                    here[k] = self._work(self._items[k])
            return [here[k] if k in here else f.result() for k, f in enumerate(self._futures)]
        finally:
            self.close()

    def close(self) -> None:
        """Stop what has not started and wait for the children (after a failure elsewhere, say)."""
        if self._pool is not None:
            self._pool.shutdown(wait=True, cancel_futures=True)
            self._pool = None
            _CALLS.pop(self._call, None)
            self._futures = []


def start_in_processes(work: Callable[[T], R], items: Sequence[T], children: int) -> Running[R]:
    """Start ``[work(item) for item in items]`` on up to ``children`` forked processes and return at once, so that
    this process can do other work meanwhile; :meth:`Running.results` then computes here what no child has started
    (with ``children`` 0 nothing starts, and it computes them all). A job given N threads starts N - 1 children
    beside its own work. Start no other children before :meth:`Running.results`: the pool runs a thread, and
    forking a process with threads is unsafe. ``work`` must return something picklable; it may write files (each
    child writes its own) and log (children share the parent's log handlers)."""
    return Running(work, list(items), children)


def in_processes(work: Callable[[T], R], items: Sequence[T], workers: int) -> list[R]:
    """``[work(item) for item in items]``, on up to ``workers`` forked processes while this one waits (in this one
    when ``workers`` is 1 or there is at most one item)."""
    return Running(work, list(items), workers if workers > 1 and len(items) > 1 else 0, helping=False).results()
