"""PartThreads (model/part_threads.py): results in part order, the caller runs the first part, and no
part is still running when run() returns or raises."""

from __future__ import annotations

import threading
import time

import pytest

from rntn_engine.model.part_threads import PartThreads


@pytest.mark.parametrize("threads", [1, 2, 3])
def test_results_in_part_order_and_the_caller_takes_the_first_part(threads):
    runner = PartThreads(threads)
    caller = threading.get_ident()
    seen = {}

    def work(part):
        time.sleep(0.01 * (5 - part))  # later parts finish first
        seen[part] = threading.get_ident()
        return part * part

    try:
        assert runner.run(work, list(range(5))) == [0, 1, 4, 9, 16]
    finally:
        runner.close()
    assert seen[0] == caller
    if threads > 1:
        assert any(ident != caller for ident in seen.values())
    else:
        assert set(seen.values()) == {caller}


def test_a_failing_first_part_waits_for_the_others_before_raising():
    runner = PartThreads(2)
    finished = []

    def work(part):
        if part == 0:
            raise ValueError("first part failed")
        time.sleep(0.05)
        finished.append(part)

    with pytest.raises(ValueError, match="first part failed"):
        runner.run(work, [0, 1])
    assert finished == [1]  # the other part had ended when the error reached the caller
    runner.close()


def test_an_error_in_another_part_reaches_the_caller_and_close_keeps_it_usable():
    runner = PartThreads(2)

    def work(part):
        if part == 1:
            raise KeyError(part)
        return part

    with pytest.raises(KeyError):
        runner.run(work, [0, 1])
    runner.close()
    assert runner.run(lambda part: part + 1, [1, 2]) == [2, 3]  # after close: on the calling thread
