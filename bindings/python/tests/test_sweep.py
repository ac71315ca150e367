"""Scenario sweeps, locally on all cores and on a Dask cluster of two workers: the same arrays as
solving each scenario alone."""

from __future__ import annotations

import numpy as np
import pytest
from conftest import HILLSIDE

import ringmain


def _scenarios(model: ringmain.Model) -> list[dict]:
    rng = np.random.default_rng(20261202)  # seeded: the same scenarios on every run
    base = model.demands()
    pipes = model.link_ids("pipe")
    out: list[dict] = []
    for s in range(24):
        scenario: dict = {"demands": base * rng.uniform(0.5, 1.5, size=base.shape)}
        if s % 3 == 0:
            scenario["statuses"] = {pipes[s % len(pipes)]: "closed"}
        if s % 4 == 1:
            scenario["demand_factor"] = 1.3
            del scenario["demands"]
        out.append(scenario)
    return out


def _one_by_one(model: ringmain.Model, scenarios: list[dict]) -> tuple[np.ndarray, np.ndarray]:
    pressures, flows = [], []
    for scenario in scenarios:
        with model.copy() as m:
            if "demands" in scenario:
                m.set_demands(scenario["demands"])
            if "demand_factor" in scenario:
                m.set_demands(m.demands() * scenario["demand_factor"])
            for link, status in scenario.get("statuses", {}).items():
                m.set_link_status(link, status)
            with m.solve() as r:
                pressures.append(r.pressures.copy())
                flows.append(r.flows.copy())
    return np.array(pressures), np.array(flows)


def test_a_local_sweep_matches_one_solve_per_scenario():
    with ringmain.Model.load(HILLSIDE) as model:
        scenarios = _scenarios(model)
        before = model.to_json()
        out = ringmain.sweep(model, scenarios, workers=3, chunk_size=5)
        assert model.to_json() == before  # the base model is not changed
        pressures, flows = _one_by_one(model, scenarios)
        np.testing.assert_array_equal(out["pressure"], pressures)
        np.testing.assert_array_equal(out["flow"], flows)
        assert out.errors == [None] * len(scenarios) and len(out) == len(scenarios)


def test_a_failed_scenario_is_named_or_recorded():
    with ringmain.Model.load(HILLSIDE) as model:
        scenarios = [{"demand_factor": 1.0}, {"pump_speeds": {model.link_ids("pipe")[0]: 1.0}}]
        with pytest.raises(ringmain.WrongKindError, match="scenario 1"):
            ringmain.sweep(model, scenarios, workers=1)
        out = ringmain.sweep(model, scenarios, workers=1, on_error="record")
        assert out.errors[0] is None and "scenario 1" in out.errors[1]
        assert np.all(np.isnan(out["pressure"][1])) and not np.any(np.isnan(out["pressure"][0][1:]))
        with pytest.raises(ringmain.InvalidValueError, match="unknown key 'demand'"):
            ringmain.sweep(model, [{"demand": 2.0}])


def test_a_sweep_on_a_dask_cluster_of_two_workers():
    distributed = pytest.importorskip("distributed")
    with ringmain.Model.load(HILLSIDE) as model:
        scenarios = _scenarios(model)
        local = ringmain.sweep(model, scenarios, quantities=["head", "pressure", "flow"])
        with distributed.LocalCluster(
            n_workers=2, threads_per_worker=1, processes=True, dashboard_address=None
        ) as cluster, distributed.Client(cluster) as client:
            out = ringmain.sweep(model, scenarios, client, quantities=["head", "pressure", "flow"], chunk_size=4)
            # Each worker loaded the model once, not once per chunk.
            loads = client.run(lambda: len(__import__("ringmain._sweep", fromlist=["x"])._WORKER_MODELS))
            assert sorted(loads.values()) == [1, 1]
        for q in ("head", "pressure", "flow"):
            np.testing.assert_array_equal(out[q], local[q])
