"""Speed of the Python package on a generated 10,000-junction network (figures for RESULTS.md).

    .venv/bin/pip install ./bindings/python      # the package with its library
    cargo build --release                        # the ringmain program, to generate the network
    .venv/bin/python benches/python_bindings.py [--junctions 10000] [--scenarios 1000]

Measures, in one run and on one network:

1. setting every demand: ``Model.set_demands(array)`` (one native call) against the loop of
   ``Model.set_demand(i, value)`` it replaces (the reference, measured here too);
2. one scenario from Python (set every demand, solve, read pressures and flows into numpy)
   against the bare native solve (``ringmain_model_solve`` called directly through ctypes, and
   its results freed): the difference is the Python overhead;
3. ``ringmain.sweep`` of N scenarios on a Dask ``LocalCluster`` of one worker and of two (one
   thread each), and locally.

Medians over repeated runs; times from ``time.perf_counter``. Speed is measured here, never
asserted in the tests.
"""

from __future__ import annotations

import argparse
import ctypes
import os
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

import ringmain
from ringmain import _ffi

ROOT = Path(__file__).resolve().parents[1]


def median_time(fn, repeat: int) -> float:
    times = []
    for _ in range(repeat):
        t0 = time.perf_counter()
        fn()
        times.append(time.perf_counter() - t0)
    return statistics.median(times)


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    parser.add_argument("--junctions", type=int, default=10_000)
    parser.add_argument("--scenarios", type=int, default=1000)
    parser.add_argument("--program", default=str(ROOT / "target" / "release" / "ringmain"))
    parser.add_argument("--no-dask", action="store_true")
    args = parser.parse_args()

    with tempfile.TemporaryDirectory() as tmp:
        path = Path(tmp) / f"town-{args.junctions}.json"
        subprocess.run(
            [args.program, "generate", "--junctions", str(args.junctions), "--output", str(path)], check=True
        )
        model = ringmain.Model.load(path)
    n_nodes, n_links = model.node_count, model.link_count
    print(f"network: {args.junctions} junctions generated (seed 1): {n_nodes} nodes, {n_links} links")
    print(f"library threads: {ringmain.threads()}, cpu_count: {os.cpu_count()}, python {sys.version.split()[0]}")
    model.solve().close()  # the analysis is done once, as in any scenario loop

    base = model.demands()
    junctions = [int(i) for i in np.flatnonzero(~np.isnan(base))]
    scaled = base * 1.1

    t_array = median_time(lambda: model.set_demands(scaled), 200)

    def one_by_one() -> None:
        for i in junctions:
            model.set_demand(i, float(scaled[i]))

    t_loop = median_time(one_by_one, 5)
    print("\n| measurement | median | reference (same run) |")
    print("| --- | --- | --- |")
    print(
        f"| set every demand ({len(junctions)} junctions), `set_demands(array)` | {t_array * 1e3:.3f} ms "
        f"| loop of `set_demand`: {t_loop * 1e3:.2f} ms |"
    )

    ptr = model._ptr
    out = ctypes.c_void_p()

    def bare_solve() -> None:
        code = _ffi.lib.ringmain_model_solve(ptr, ctypes.byref(out))
        assert code == 0
        _ffi.lib.ringmain_results_free(out.value)

    rng = np.random.default_rng(1)
    factors = rng.uniform(0.7, 1.3, size=64)
    state = {"k": 0}

    def scenario() -> None:
        f = factors[state["k"] % len(factors)]
        state["k"] += 1
        model.set_demands(base * f)
        with model.solve() as r:
            r.pressures
            r.flows

    # Interleaved, so that both see the same drift of the machine.
    solves, scenarios = [], []
    for _ in range(30):
        solves.append(median_time(bare_solve, 3))
        scenarios.append(median_time(scenario, 3))
    t_solve, t_scenario = statistics.median(solves), statistics.median(scenarios)
    overhead = t_scenario - t_solve
    print(f"| native solve (`ringmain_model_solve` through bare ctypes) | {t_solve * 1e3:.2f} ms | |")
    print(
        f"| scenario from Python (set every demand, solve, read pressures and flows) | {t_scenario * 1e3:.2f} ms "
        f"| overhead {overhead * 1e3:.3f} ms = {100 * overhead / t_solve:.1f} % of the solve |"
    )

    scen = [{"demand_factor": float(f)} for f in rng.uniform(0.7, 1.3, size=args.scenarios)]
    t0 = time.perf_counter()
    ringmain.sweep(model, scen, quantities=["pressure"])
    t_local = time.perf_counter() - t0
    print(f"| sweep of {args.scenarios} scenarios, local (threads: {os.cpu_count()}) | {t_local:.2f} s | |")
    if not args.no_dask:
        import distributed

        for workers in (1, 2):
            with distributed.LocalCluster(
                n_workers=workers, threads_per_worker=1, processes=True, dashboard_address=None
            ) as cluster, distributed.Client(cluster) as client:
                ringmain.sweep(model, scen[:8], client, quantities=["pressure"])  # workers load the model
                t0 = time.perf_counter()
                out = ringmain.sweep(model, scen, client, quantities=["pressure"])
                t = time.perf_counter() - t0
                assert out.errors == [None] * len(scen)
            print(f"| sweep of {args.scenarios} scenarios on Dask, {workers} worker(s) x 1 thread | {t:.2f} s | |")
    model.close()


if __name__ == "__main__":
    main()
