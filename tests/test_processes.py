"""pipeline.processes: work on forked processes gives what the same calls give in this one."""

import os

import pytest

from pipeline.processes import in_processes


def _square_and_pid(x: int) -> tuple[int, int]:
    return x * x, os.getpid()


def _slow_square_and_pid(x: int) -> tuple[int, int]:
    import time

    time.sleep(0.01)
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

    running = start_in_processes(_square_and_pid, range(4), children=2)
    assert [_square_and_pid(x)[0] for x in (5, 6)] == [25, 36]          # this process's own work meanwhile
    time.sleep(0.01)
    assert [r for r, _ in running.results()] == [0, 1, 4, 9]
    assert [r for r, _ in in_processes(_square_and_pid, [5, 6], workers=2)] == [25, 36]   # and a call after it
    closed = start_in_processes(_square_and_pid, range(3), children=2)
    closed.close()
    with pytest.raises(RuntimeError, match="closed before"):
        closed.results()
    (one,) = start_in_processes(_square_and_pid, [3], children=1).results()      # one item, in a child
    assert one[0] == 9 and one[1] != os.getpid()
    (here,) = start_in_processes(_square_and_pid, [3], children=0).results()     # no child: computed here
    assert here == (9, os.getpid())


def test_this_process_takes_the_items_no_child_has_started():
    # one child, many items: when the results are asked for at once, this process computes the items from the last
    # one back that the child has not started; every result is the one the work gives, in order
    import time

    from pipeline.processes import start_in_processes

    running = start_in_processes(_slow_square_and_pid, range(40), children=1)     # 10 ms per item
    time.sleep(0.2)                 # the child has taken the first items; it cannot have reached the last
    results = running.results()
    assert [r for r, _ in results] == [x * x for x in range(40)]
    pids = [pid for _, pid in results]
    assert os.getpid() in pids and len(set(pids)) == 2
    assert pids[-1] == os.getpid() and pids[0] != os.getpid()        # this process from the back, the child the front


def _refuses(name: str) -> None:
    import pipeline.errors as errors

    raise getattr(errors, name)(f"cube x.fits: {name} in a child")


def test_a_gasledger_error_in_a_child_arrives_whole():
    # a job's one-sentence error (pipeline.workflow.common.stage_errors catches GasledgerError) must survive the
    # trip back from a child: the same class and message
    import pipeline.errors as errors

    for name in ("ConfigError", "CubeError", "CoverageError", "LimitError", "GasledgerTypeError"):
        with pytest.raises(getattr(errors, name), match=f"^cube x.fits: {name} in a child$") as caught:
            in_processes(_refuses, [name, name], workers=2)
        assert isinstance(caught.value, errors.GasledgerError)
