"""Water quality at steady state against an independent solve of the linear mixing equations.

With constant demands and fixed heads, the flows are steady and, once the starting water has
been flushed out, every junction's value is the flow-weighted mean of the values arriving along
its inflowing pipes, each pipe adding its travel time to the age, multiplying a first-order
substance by exp(k tau) and carrying a source percentage unchanged. That is a linear system in
the junction values; it is solved here with numpy, from the flows ringmain reports and the pipe
geometry of the model file, and compared with the values ringmain reports at the end of the run.

The first-order rate of each pipe follows Rossman, Clark & Grayman (1994), J. Environ. Eng.
120(4): k = k_b + k_w k_f / (R_h (k_w + k_f)), R_h = d/4, k_f = Sh D/d, with the Sherwood number
of Notter & Sleicher (1971) above Re = 2300 and of Edwards et al. (1976) below (the correlations
as recalled from those papers); the water's kinematic viscosity at 20 deg C comes from the
`iapws` package (IAPWS-95 density, IAPWS 2008 viscosity).

Accuracy asked of ringmain at its default tolerance: 0.2 % for substances and sources, 0.05 h
for ages.
"""

from __future__ import annotations

import math
import tomllib

import numpy as np
from iapws import IAPWS95

MODEL = """
title = "Steady loop of two works"
[simulation]
duration = "7d"
hydraulic_step = "2h"
report_interval = "12h"
[hydraulics]
water_temperature = 20.0
[[quality]]
id = "age"
kind = "age"
[[quality]]
id = "chlorine"
kind = "substance"
bulk_rate = -0.4
wall_rate = -0.12
diffusivity = 1.21e-9
[[quality]]
id = "from-east"
kind = "source"
source = "East Works"
[[quality]]
id = "from-west"
kind = "source"
source = "West Works"
[[nodes]]
id = "East Works"
kind = "reservoir"
head = 95.0
quality = { chlorine = 1.3 }
[[nodes]]
id = "West Works"
kind = "reservoir"
head = 90.0
quality = { chlorine = 0.9 }
[[nodes]]
id = "N1"
elevation = 30.0
demand = 12.0
[[nodes]]
id = "N2"
elevation = 32.0
demand = 9.0
[[nodes]]
id = "N3"
elevation = 28.0
demand = 7.5
[[nodes]]
id = "N4"
elevation = 35.0
demand = 6.0
[[nodes]]
id = "N5"
elevation = 31.0
demand = 8.0
[[nodes]]
id = "N6"
elevation = 29.0
demand = 4.5
[[links]]
id = "E1"
from = "East Works"
to = "N1"
length = 900.0
diameter = 300
roughness = 120
[[links]]
id = "W1"
from = "West Works"
to = "N4"
length = 700.0
diameter = 250
roughness = 120
[[links]]
id = "L12"
from = "N1"
to = "N2"
length = 600.0
diameter = 200
roughness = 115
[[links]]
id = "L23"
from = "N2"
to = "N3"
length = 550.0
diameter = 150
roughness = 110
[[links]]
id = "L14"
from = "N1"
to = "N4"
length = 800.0
diameter = 150
roughness = 110
[[links]]
id = "L45"
from = "N4"
to = "N5"
length = 500.0
diameter = 200
roughness = 115
[[links]]
id = "L56"
from = "N5"
to = "N6"
length = 650.0
diameter = 150
roughness = 110
[[links]]
id = "L36"
from = "N3"
to = "N6"
length = 700.0
diameter = 100
roughness = 100
[[links]]
id = "L25"
from = "N2"
to = "N5"
length = 750.0
diameter = 150
roughness = 110
"""


def sherwood(re: float, sc: float, d: float, length: float) -> float:
    if re >= 2300.0:
        return 0.0149 * re**0.88 * sc ** (1.0 / 3.0)
    g = (d / length) * re * sc
    return 3.65 + 0.0668 * g / (1.0 + 0.04 * g ** (2.0 / 3.0))


def test_steady_values_solve_the_mixing_equations(tmp_path, ringmain_json):
    path = tmp_path / "loop.toml"
    path.write_text(MODEL, encoding="utf-8")
    model = tomllib.loads(MODEL)
    result = ringmain_json("simulate", path)
    last = result["series"][-1]
    flows = {l["id"]: l["flow"] * 1e-3 for l in last["links"]}  # L/s -> m3/s
    reported = {n["id"]: n["quality"] for n in last["nodes"]}

    water = IAPWS95(T=293.15, P=0.101325)
    nu = water.mu / water.rho
    q = {c["id"]: c for c in model["quality"]}
    kb = q["chlorine"]["bulk_rate"] / 86400.0
    kw = abs(q["chlorine"]["wall_rate"]) / 86400.0
    dm = q["chlorine"]["diffusivity"]
    sources = {n["id"]: n for n in model["nodes"] if n.get("kind") == "reservoir"}
    junctions = [n["id"] for n in model["nodes"] if n.get("kind", "junction") == "junction"]
    index = {j: i for i, j in enumerate(junctions)}

    def source_value(node: str, constituent: str) -> float:
        if constituent == "age":
            return 0.0
        if constituent == "chlorine":
            return sources[node]["quality"]["chlorine"]
        return 100.0 if q[constituent]["source"] == node else 0.0

    for constituent in ["age", "chlorine", "from-east", "from-west"]:
        n = len(junctions)
        a = np.zeros((n, n))
        b = np.zeros(n)
        for link in model["links"]:
            flow = flows[link["id"]]
            if abs(flow) < 1e-9:
                continue
            up, down = (link["from"], link["to"]) if flow > 0 else (link["to"], link["from"])
            d = link["diameter"] / 1000.0
            area = math.pi * d * d / 4.0
            tau = area * link["length"] / abs(flow)
            re = 4.0 * abs(flow) / (math.pi * d * nu)
            kf = sherwood(re, nu / dm, d, link["length"]) * dm / d
            k = kb - (4.0 / d) * kw * kf / (kw + kf)
            factor, add = {
                "age": (1.0, tau / 3600.0),
                "chlorine": (math.exp(k * tau), 0.0),
            }.get(constituent, (1.0, 0.0))
            if down not in index:
                continue
            i = index[down]
            a[i, i] += abs(flow)
            if up in index:
                a[i, index[up]] -= abs(flow) * factor
                b[i] += abs(flow) * add
            else:
                b[i] += abs(flow) * (factor * source_value(up, constituent) + add)
        exact = np.linalg.solve(a, b)
        for j in junctions:
            got = reported[j][constituent]
            want = exact[index[j]]
            if constituent == "age":
                assert abs(got - want) < 0.05, f"{j} age: {got} h, mixing equations {want} h"
            else:
                assert abs(got - want) <= 2e-3 * max(abs(want), 1e-9) + 1e-9, (
                    f"{j} {constituent}: {got}, mixing equations {want}"
                )
    # One trace per source: the percentages add up to 100 everywhere.
    for j in junctions:
        assert abs(reported[j]["from-east"] + reported[j]["from-west"] - 100.0) < 1e-6
