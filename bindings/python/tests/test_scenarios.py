"""Hundreds of demand scenarios on one model, without rebuilding it."""

from __future__ import annotations

import math
import random

from conftest import HILLSIDE

import ringmain

SCENARIOS = 300


def _base_demands(model):
    return {j: model.demand(j) for j in model.node_ids("junction")}


def test_a_loop_of_demand_scenarios_on_one_model():
    rng = random.Random(20240611)  # seeded: the same scenarios on every run
    models_before, results_before = ringmain.live_handles()
    with ringmain.Model.load(HILLSIDE) as model:
        base = _base_demands(model)
        junctions = list(base)
        index = {j: model.node_index(j) for j in junctions}
        lowest = []
        for s in range(SCENARIOS):
            factor = 0.4 + 1.2 * s / (SCENARIOS - 1)  # from 0.4 to 1.6 times the model's demands
            for j in junctions:
                model.set_demand(index[j], base[j] * factor)
            with model.solve() as results:
                assert results.iterations >= 1  # an answer (a solve that does not converge raises SolveError)
                mass, energy = results.residuals
                assert mass < 1e-6 and energy < 1e-3
                # The solved demands are the ones just set.
                demands = results.demands
                for j in rng.sample(junctions, 5):
                    assert math.isclose(demands[index[j]], base[j] * factor, rel_tol=1e-12, abs_tol=1e-15)
                lowest.append(results.lowest_pressure()[1])
            # Only this model is alive: no handle made per scenario survives it.
            assert ringmain.live_handles() == (models_before + 1, results_before)
        # More demand, more head loss: the lowest pressure never rises.
        assert all(b <= a + 1e-9 for a, b in zip(lowest, lowest[1:]))
        assert lowest[-1] < lowest[0]


def test_changed_values_give_the_answer_of_a_fresh_model():
    """A model changed and solved many times answers as a model read afresh with those values."""
    rng = random.Random(7)
    with ringmain.Model.load(HILLSIDE) as model:
        base = _base_demands(model)
        for _ in range(20):
            factors = {j: rng.uniform(0.5, 1.5) for j in base}
            for j, f in factors.items():
                model.set_demand(j, base[j] * f)
            with model.solve() as reused:
                with ringmain.Model.from_toml(model.to_toml()) as fresh, fresh.solve() as reference:
                    for a, b in zip(reused.heads, reference.heads):
                        assert math.isclose(a, b, rel_tol=1e-9, abs_tol=1e-9)


def test_warm_start_gives_the_same_answers():
    with ringmain.Model.load(HILLSIDE) as cold, ringmain.Model.load(HILLSIDE) as warm:
        warm.warm_start = True
        assert warm.warm_start
        base = _base_demands(cold)
        for factor in (0.6, 0.8, 1.0, 1.2, 1.4):
            for m in (cold, warm):
                for j, d in base.items():
                    m.set_demand(j, d * factor)
            with cold.solve() as a, warm.solve() as b:
                for x, y in zip(a.heads, b.heads):
                    assert abs(x - y) < 1e-3  # both meet the head tolerance of 1e-4 m
