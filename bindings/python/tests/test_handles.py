"""Handles close with `with`, `close()` or collection, and none leaks."""

from __future__ import annotations

import gc

from conftest import HILLSIDE

import ringmain


def test_open_and_close_many_models_leaks_nothing():
    before = ringmain.live_handles()
    for i in range(300):
        if i % 3 == 0:
            with ringmain.Model.load(HILLSIDE) as m, m.solve() as r:
                assert r.iterations >= 1  # an answer (a solve that does not converge raises SolveError)
        elif i % 3 == 1:
            m = ringmain.Model.load(HILLSIDE)
            r = m.solve()
            r.close()
            m.close()
        else:
            # Left to the garbage collector.
            ringmain.Model.load(HILLSIDE).solve()
    gc.collect()
    assert ringmain.live_handles() == before


def test_handles_are_counted_while_alive():
    before_models, before_results = ringmain.live_handles()
    m = ringmain.Model.load(HILLSIDE)
    r1, r2 = m.solve(), m.solve()
    assert ringmain.live_handles() == (before_models + 1, before_results + 2)
    del m
    gc.collect()
    # Results outlive their model.
    assert ringmain.live_handles() == (before_models, before_results + 2)
    assert r1.node_head(0) == r2.node_head(0)
    r1.close()
    del r2
    gc.collect()
    assert ringmain.live_handles() == (before_models, before_results)


def test_a_copy_is_independent():
    with ringmain.Model.load(HILLSIDE) as m, m.copy() as c:
        assert not c.warm_start
        c.set_demand("J-109", 25.0)
        assert m.demand("J-109") != 25.0
        with m.solve() as a, c.solve() as b:
            assert b.node_pressure("J-109") < a.node_pressure("J-109")
