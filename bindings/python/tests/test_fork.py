"""Processes made by fork after a solve can solve: the library's worker threads do not survive a
fork, and the library makes a new pool in the child (before the fix, the child's first solve of a
new network waited for ever on threads that did not exist)."""

from __future__ import annotations

import multiprocessing
import os
import signal

import numpy as np
import pytest

import ringmain


def _solve_in_child(path: str) -> list[float]:
    with ringmain.Model.load(path) as m, m.solve() as r:
        return r.heads[:5].tolist()


@pytest.mark.skipif(not hasattr(os, "fork"), reason="fork is a POSIX call")
def test_a_forked_pool_solves_after_the_parent_solved(generated):
    path = str(generated(3000))  # large enough for the solver to use its worker threads
    ringmain.set_threads(4)
    try:
        with ringmain.Model.load(path) as m, m.solve() as r:
            expected = r.heads[:5].tolist()
        ctx = multiprocessing.get_context("fork")
        with ctx.Pool(2) as pool:
            results = pool.map_async(_solve_in_child, [path] * 4).get(timeout=120)
        for heads in results:
            np.testing.assert_array_equal(heads, expected)
    finally:
        ringmain.set_threads(0)


@pytest.mark.skipif(not hasattr(os, "fork"), reason="fork is a POSIX call")
def test_a_bare_fork_solves_in_the_child(generated):
    path = str(generated(3000))
    with ringmain.Model.load(path) as m, m.solve() as r:
        expected = float(r.heads[3])
    read, write = os.pipe()
    pid = os.fork()
    if pid == 0:  # the child: solve, report, leave without running the parent's clean-up
        code = 1
        try:
            signal.alarm(120)
            os.close(read)
            with ringmain.Model.load(path) as m, m.solve() as r:
                os.write(write, repr(float(r.heads[3])).encode())
            code = 0
        finally:
            os._exit(code)
    os.close(write)
    _, status = os.waitpid(pid, 0)
    got = os.read(read, 64).decode()
    os.close(read)
    assert os.WIFEXITED(status) and os.WEXITSTATUS(status) == 0, f"child ended with status {status}"
    assert float(got) == expected


def test_the_thread_count_is_settable():
    try:
        ringmain.set_threads(3)
        assert ringmain.threads() == 3
        with pytest.raises(ValueError):
            ringmain.set_threads(5000)
        with pytest.raises(TypeError):
            ringmain.set_threads(True)
        with pytest.raises(TypeError):
            ringmain.set_threads("2")
    finally:
        ringmain.set_threads(0)
    assert ringmain.threads() == (os.cpu_count() or 1) or ringmain.threads() >= 1
