"""pipeline.processes: work on forked processes gives what the same calls give in this one."""

import os

import pytest

from pipeline.processes import in_processes


def _square_and_pid(x: int) -> tuple[int, int]:
    return x * x, os.getpid()


def _fails_on_three(x: int) -> int:
    if x == 3:
        raise ValueError(f"item {x} refused")
    return x


def test_results_in_order_and_from_children():
    items = list(range(7))
    serial = in_processes(_square_and_pid, items, workers=1)
    parallel = in_processes(_square_and_pid, items, workers=2)
    assert [r for r, _ in parallel] == [r for r, _ in serial] == [x * x for x in items]
    assert {pid for _, pid in serial} == {os.getpid()}
    assert os.getpid() not in {pid for _, pid in parallel}          # the work ran in the children


def test_a_child_s_error_is_raised_here():
    with pytest.raises(ValueError, match="item 3 refused"):
        in_processes(_fails_on_three, range(5), workers=2)
    assert in_processes(_fails_on_three, [1, 2], workers=2) == [1, 2]   # and the next call works


def test_unpicklable_items_are_inherited_not_sent():
    # the items reach the children by the fork; a lambda inside an item could not be pickled
    items = [(k, lambda y: y + 1) for k in range(3)]
    assert in_processes(lambda item: item[1](item[0]), items, workers=2) == [1, 2, 3]


def test_started_work_runs_while_this_process_goes_on():
    import time

    from pipeline.processes import start_in_processes

    running = start_in_processes(_square_and_pid, range(4), workers=2)
    nested = in_processes(_square_and_pid, [5, 6], workers=2)      # another call while the first one runs
    assert [r for r, _ in nested] == [25, 36]
    time.sleep(0.01)
    assert [r for r, _ in running.results()] == [0, 1, 4, 9]
    closed = start_in_processes(_square_and_pid, range(3), workers=2)
    closed.close()
    with pytest.raises(RuntimeError, match="closed before"):
        closed.results()
    assert start_in_processes(_square_and_pid, [3], workers=2).results()[0][0] == 9   # one item: computed here
