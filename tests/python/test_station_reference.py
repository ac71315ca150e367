"""Pump stations: named fittings, the system curve, the operating point, NPSH and the motor.

References, named beside each check:
* Fitting K: the `fluids` package's fittings module (Crane TP-410 f_T and valve K, Hooper's 2-K and
  Darby's 3-K tables, Rennels & Hudson's bend), over a grid of sizes and Reynolds numbers; the sharp
  entrance 0.5 and the exit 1.0 are common practice.
* Friction factor: Colebrook-White solved here with `scipy.optimize.brentq`.
* Water: `iapws` (IAPWS-IF97 density and saturation pressure).
* Air: ISO 2533:1975 standard atmosphere, computed by fluids' ATMOSPHERE_1976 (the same model).
* Motor ratings: IEC 60072-1 preferred rated outputs (from memory).

The scenarios are invented. Results are only as good as the model and its data; designs must be
checked by a licensed engineer against local codes and the utility's standards.
"""

from __future__ import annotations

import json
import math

import pytest
from fluids import fittings as F
from fluids.atmosphere import ATMOSPHERE_1976
from fluids.friction import Colebrook
from iapws import IAPWS97
from iapws.iapws97 import _PSat_T
from scipy.optimize import brentq

G = 9.80665  # standard gravity, m/s2 (CGPM 1901, exact)
INCH = 0.0254  # m (international inch, exact)
NU = 1.0e-6  # kinematic viscosity given to the models, m2/s (close to water at 20 deg C)
ZERO_C = 273.15

KINDS = [
    "entrance-sharp",
    "elbow-90",
    "bend",
    "gate-valve",
    "globe-valve",
    "check-valve-swing",
    "tee-branch",
    "tee-run",
    "exit",
]
# The flanged/welded rows of each table, by the names the `fluids` package gives them.
HOOPER = {
    "elbow-90": "Elbow, 90°, Standard (R/D = 1), Flanged/welded",
    "tee-branch": "Elbow, Elbow, Standard, Flanged/welded",
    "tee-run": "Tee, Through, Flanged or welded",
    "gate-valve": "Valve, Gate, Full line size, Beta = 1",
    "globe-valve": "Valve, Globe, Standard",
    "check-valve-swing": "Valve, Check, Swing",
}
DARBY = {
    "elbow-90": "Elbow, 90°, flanged, welded, bends, (r/D = 1)",
    "tee-branch": "Tee, Through-branch, (as elbow), flanged, (r/D = 1)",
    "tee-run": "Tee, Run-through, flanged, (r/D = 1)",
    "gate-valve": "Valve, Gate valve, standard, β = 1",
    "globe-valve": "Valve, Globe valve, standard, β = 1",
    "check-valve-swing": "Valve, Swing check",
}
# Crane TP-410 L/D of the tees (as the issue lists them; fluids has no plain tee function).
CRANE_TEE_L_OVER_D = {"tee-run": 20.0, "tee-branch": 60.0}
# Perry's Chemical Engineers' Handbook, 7th ed., Table 6-4: gate valve K at 1/2 open and fully open.
PERRY_GATE_HALF, PERRY_GATE_OPEN = 4.5, 0.17
BEND = {"radius": 2.0, "angle": 60.0}


def colebrook(re: float, rel: float) -> float:
    """Colebrook-White Darcy factor, solved with scipy's brentq."""
    return brentq(lambda f: 1 / math.sqrt(f) + 2 * math.log10(rel / 3.7 + 2.51 / (re * math.sqrt(f))), 1e-4, 1.0)


def reference_k(kind: str, method: str, d: float, re: float, f: float) -> float:
    if kind == "exit":
        return F.exit_normal()  # 1.0
    if kind == "bend":
        return F.bend_rounded(Di=d, angle=BEND["angle"], fd=f, rc=BEND["radius"] * d, method="Rennels")
    if kind == "entrance-sharp":
        if method == "equivalent-length":
            return F.entrance_sharp(method="Crane")  # 0.5
        return 160.0 / re + 0.5  # Hooper (1981) entrance form, no size term
    if method == "equivalent-length":
        ft = F.ft_Crane(d)
        if kind == "elbow-90":
            return 30.0 * ft  # Crane TP-410 standard elbow, L/D 30
        if kind == "gate-valve":
            return F.K_gate_valve_Crane(d, d, 0.0, fd=ft)
        if kind == "globe-valve":
            return F.K_globe_valve_Crane(d, d, fd=ft)
        if kind == "check-valve-swing":
            return F.K_swing_check_valve_Crane(fd=ft, angled=True)
        return CRANE_TEE_L_OVER_D[kind] * ft
    if method == "two-k":
        return F.Hooper2K(Di=d / INCH, Re=re, name=HOOPER[kind])
    return F.Darby3K(NPS=d / INCH, Re=re, name=DARBY[kind])


def fitting_entry(kind: str) -> dict:
    entry = {"kind": kind}
    if kind == "bend":
        entry.update(BEND)
    return entry


def pipes_model(method: str, d: float, drop: float, roughness_mm: float = 0.05) -> dict:
    """Two reservoirs `drop` metres apart joined by one 40 m pipe per fitting kind."""
    links = [
        {
            "id": f"P-{kind}",
            "from": "Upper",
            "to": "Lower",
            "length": 40.0,
            "diameter": d * 1000.0,
            "roughness": roughness_mm,
            "fittings": [fitting_entry(kind)],
        }
        for kind in KINDS
    ]
    return {
        "title": "Fitting check bench",
        "hydraulics": {"headloss": "darcy-weisbach", "kinematic_viscosity": NU, "fittings_method": method},
        "nodes": [
            {"id": "Upper", "kind": "reservoir", "head": 100.0 + drop},
            {"id": "Lower", "kind": "reservoir", "head": 100.0},
        ],
        "links": links,
    }


def write_json_model(tmp_path, model: dict, name: str = "model.json"):
    path = tmp_path / name
    path.write_text(json.dumps(model), encoding="utf-8")
    return path


@pytest.mark.parametrize("method", ["equivalent-length", "two-k", "three-k"])
@pytest.mark.parametrize("d", [0.05, 0.15, 0.4, 0.9])
@pytest.mark.parametrize("drop", [0.02, 0.5, 12.0])
def test_every_fitting_kind_against_fluids(tmp_path, ringmain_json, method, d, drop):
    result = ringmain_json("solve", write_json_model(tmp_path, pipes_model(method, d, drop)))
    area = math.pi * d * d / 4
    for link in result["links"]:
        kind = link["id"][2:]
        q = link["flow"] * 1e-3
        v = q / area
        re = v * d / NU
        f = colebrook(re, 0.05e-3 / d) if re > 4000 else 64 / re
        if kind == "bend" and re < 4000:
            continue  # the bend correlation is for turbulent flow
        want = reference_k(kind, method, d, re, f)
        # `fluids` writes the roughness fit's constant as 3.4126825e-5, the issue (and ringmain)
        # as the published 3.4127e-5: f_T differs by about 1.4e-6 relative.
        tol = 1e-5 if method == "equivalent-length" else 1e-6
        assert link["k_total"] == pytest.approx(want, rel=tol), f"{kind} {method} D={d} Re={re:.0f}"
        # The solved flow meets the pipe's energy equation with that K (the solver uses it).
        if re > 4000:
            loss = (f * 40.0 / d + want) * v * v / (2 * G)
            assert loss == pytest.approx(drop, rel=1e-5), f"{kind}: head loss {loss} vs drop {drop}"
            assert link["minor_share"] == pytest.approx(want / (f * 40.0 / d + want), rel=1e-5)


@pytest.mark.parametrize("method", ["equivalent-length", "two-k", "three-k"])
def test_half_open_gate_valve_in_the_chart_band(tmp_path, ringmain_json, method):
    model = pipes_model(method, 0.2, 2.0)
    model["links"] = [dict(model["links"][3], fittings=[{"kind": "gate-valve", "opening": 0.5}])]
    (link,) = ringmain_json("solve", write_json_model(tmp_path, model))["links"]
    re = link["flow"] * 1e-3 / (math.pi * 0.04 / 4) * 0.2 / NU
    opened = reference_k("gate-valve", method, 0.2, re, 0.0)
    # Chart readings at half open fall between 2 and 6 (common practice); the rise over the open K
    # is Perry's Table 6-4 curve, 4.5 - 0.17.
    assert 2.0 <= link["k_total"] <= 6.0
    assert link["k_total"] == pytest.approx(opened + PERRY_GATE_HALF - PERRY_GATE_OPEN, rel=1e-7)


def test_k_total_is_null_at_zero_flow(tmp_path, ringmain_json):
    model = pipes_model("three-k", 0.2, 0.0)
    links = ringmain_json("solve", write_json_model(tmp_path, model))["links"]
    for link in links:
        assert link["flow"] == pytest.approx(0.0, abs=1e-9)
        if link["flow"] == 0.0:
            assert link["k_total"] is None and link["minor_share"] is None


# --- the system curve, operating point, NPSH and motor of a small invented pumping station ------

SUCTION_FITTINGS = [{"kind": "entrance-sharp"}, {"kind": "elbow-90"}, {"kind": "gate-valve"}]
DISCHARGE_FITTINGS = [
    {"kind": "check-valve-swing"},
    {"kind": "gate-valve"},
    {"kind": "elbow-90", "count": 3},
    {"kind": "bend", "radius": 3.0, "angle": 45.0},
    {"kind": "exit"},
]
PUMP_CURVE = [[0.0, 58.0], [40.0, 50.0], [70.0, 36.0]]  # L/s, m (invented)
EFFICIENCY = 74.0  # percent
SUMP_LEVEL, RISE_LEVEL = 12.0, 41.0  # m
PUMP_Z = 14.5  # m: the pump sits above the sump water (a suction lift)
SITE = 1500.0  # m above sea level
D_S, L_S, D_D, L_D = 0.30, 9.0, 0.25, 850.0
ROUGH = 0.1e-3  # m


def station_model(site=SITE) -> dict:
    return {
        "title": "Brookmere lift station (invented)",
        "hydraulics": {
            "headloss": "darcy-weisbach",
            "water_temperature": 20.0,
            "fittings_method": "three-k",
            "site_elevation": site,
        },
        "nodes": [
            {"id": "Sump", "kind": "reservoir", "head": SUMP_LEVEL},
            {"id": "PU-in", "elevation": PUMP_Z, "demand": 0.0},
            {"id": "PU-out", "elevation": PUMP_Z, "demand": 0.0},
            {"id": "Hilltop", "kind": "reservoir", "head": RISE_LEVEL},
        ],
        "links": [
            {"id": "P-suction", "from": "Sump", "to": "PU-in", "length": L_S, "diameter": D_S * 1e3,
             "roughness": ROUGH * 1e3, "fittings": SUCTION_FITTINGS},
            {"id": "PU-1", "kind": "pump", "from": "PU-in", "to": "PU-out", "head_curve": PUMP_CURVE,
             "efficiency": EFFICIENCY, "elevation": PUMP_Z,
             "npsh_required_curve": [[0.0, 2.0], [40.0, 3.0], [80.0, 5.5]]},
            {"id": "P-rising", "from": "PU-out", "to": "Hilltop", "length": L_D, "diameter": D_D * 1e3,
             "roughness": ROUGH * 1e3, "fittings": DISCHARGE_FITTINGS},
        ],
    }


def water_20c():
    t = 20.0 + ZERO_C
    rho = IAPWS97(T=t, P=0.101325).rho  # IF97 density at one atmosphere
    nu = IAPWS97(T=t, P=0.101325).nu  # kinematic viscosity (iapws)
    p_v = _PSat_T(t) * 1e6  # IF97 region 4 saturation pressure (iapws), Pa
    return rho, nu, p_v


def pipe_loss(q: float, d: float, length: float, fittings: list, nu: float) -> float:
    """(f L/D + sum K) V^2/2g, Colebrook f by brentq, K by `fluids`."""
    if q == 0:
        return 0.0
    area = math.pi * d * d / 4
    v = q / area
    re = v * d / nu
    f = colebrook(re, ROUGH / d)
    k = 0.0
    for fit in fittings:
        kind = fit["kind"]
        if kind == "bend":
            one = F.bend_rounded(Di=d, angle=fit["angle"], fd=f, rc=fit["radius"] * d, method="Rennels")
        elif kind == "exit":
            one = F.exit_normal()
        elif kind == "entrance-sharp":
            one = 160.0 / re + 0.5
        else:
            one = F.Darby3K(NPS=d / INCH, Re=re, name=DARBY[kind])
        k += fit.get("count", 1) * one
    return (f * length / d + k) * v * v / (2 * G)


def system_head(q: float, nu: float) -> float:
    return RISE_LEVEL - SUMP_LEVEL + pipe_loss(q, D_S, L_S, SUCTION_FITTINGS, nu) + pipe_loss(
        q, D_D, L_D, DISCHARGE_FITTINGS, nu
    )


def pump_head(q_ls: float, speed: float) -> float:
    # The quadratic through the three points (Newton's divided differences), affinity laws.
    (x0, y0), (x1, y1), (x2, y2) = PUMP_CURVE
    x = q_ls / speed
    d01, d12 = (y1 - y0) / (x1 - x0), (y2 - y1) / (x2 - x1)
    c = (d12 - d01) / (x2 - x0)
    return speed * speed * (y0 + d01 * (x - x0) + c * (x - x0) * (x - x1))


def test_system_curve_operating_point_npsh_and_motor(tmp_path, ringmain_json):
    path = write_json_model(tmp_path, station_model())
    got = ringmain_json("duty", path, "--pump", "PU-1", "--flows", "0:80:5", "--speeds", "0.9,1.0")
    rho, nu, p_v = water_20c()
    assert got["pump"] == "PU-1"
    assert [p[0] for p in got["system_curve"]] == pytest.approx([5.0 * i for i in range(17)])
    for q_ls, head in got["system_curve"]:
        assert head == pytest.approx(system_head(q_ls * 1e-3, nu), rel=1e-6, abs=1e-9), f"Q = {q_ls} L/s"
    # ISO 2533 standard atmosphere (identical to the U.S. Standard Atmosphere 1976 below 32 km),
    # computed by fluids' ATMOSPHERE_1976 at the site's geometric elevation (84 559.7 Pa at
    # 1 500 m; 84 556 Pa is the table value at 1 500 m geopotential).
    p_atm = ATMOSPHERE_1976(Z=SITE).P
    assert got["atmospheric_pressure_kpa"] * 1e3 == pytest.approx(p_atm, abs=1.0)
    p_atm = got["atmospheric_pressure_kpa"] * 1e3
    assert got["vapour_pressure_kpa"] * 1e3 == pytest.approx(p_v, rel=1e-9)
    for point in got["operating_points"]:
        s = point["speed"]
        q = brentq(lambda x: pump_head(x * 1e3, s) - system_head(x, nu), 1e-4, 0.2)
        assert point["flow"] == pytest.approx(q * 1e3, rel=1e-5), f"speed {s}"
        assert point["head"] == pytest.approx(system_head(q, nu), rel=1e-5)
        assert point["efficiency"] == pytest.approx(EFFICIENCY)
        shaft = rho * G * q * point["head"] / (EFFICIENCY / 100) / 1e3
        assert point["shaft_power"] == pytest.approx(shaft, rel=1e-5)
        # IEC 60072-1 preferred rated outputs, kW (from memory), smallest at or above 1.1 x shaft.
        iec = [5.5, 7.5, 11.0, 15.0, 18.5, 22.0, 30.0, 37.0, 45.0, 55.0, 75.0]
        assert point["motor_rating"] == next(r for r in iec if r >= 1.1 * shaft)
        # NPSH available: suction head at the pump minus its elevation, plus the velocity head.
        v_s = q / (math.pi * D_S**2 / 4)
        h_s = SUMP_LEVEL - pipe_loss(q, D_S, L_S, SUCTION_FITTINGS, nu)
        npsha = (p_atm - p_v) / (rho * G) + (h_s - PUMP_Z) + v_s * v_s / (2 * G)
        assert point["npsh_available"] == pytest.approx(npsha, rel=1e-6)
        # Required: linear between (40, 3.0) and (80, 5.5) L/s at speed 1, s^2 NPSHr(Q/s).
        qs = q * 1e3 / s
        assert point["npsh_required"] == pytest.approx(s * s * (3.0 + 2.5 * (qs - 40.0) / 40.0), rel=1e-9)


def test_sea_level_atmosphere(tmp_path, ringmain_json):
    got = ringmain_json("duty", write_json_model(tmp_path, station_model(site=0.0)), "--pump", "PU-1")
    # ISO 2533 at 0 m: 101 325 Pa (the standard's sea-level pressure).
    assert got["atmospheric_pressure_kpa"] == pytest.approx(101.325, abs=1e-9)
    # Default flows: 0 to 1.5 x the curve's last flow (70 L/s) in 40 steps.
    flows = [p[0] for p in got["system_curve"]]
    assert len(flows) == 41 and flows[-1] == pytest.approx(105.0)


@pytest.mark.parametrize("celsius", [1.0, 10.0, 20.0, 40.0, 60.0, 80.0, 99.0])
def test_vapour_pressure_against_iapws(ringmain_json, celsius):
    got = ringmain_json("water-properties", "--temperature", repr(celsius))
    want = _PSat_T(celsius + ZERO_C) * 1e6  # IF97 region 4 saturation pressure (iapws), Pa
    assert got["vapour_pressure"] == pytest.approx(want, rel=1e-10)


@pytest.mark.parametrize("site", [-100.0, 0.0, 400.0, 1500.0, 2800.0, 4000.0])
def test_atmospheric_pressure_follows_the_standard_atmosphere_at_every_site(tmp_path, ringmain_json, site):
    # ISO 2533 / U.S. Standard Atmosphere 1976, computed by fluids' ATMOSPHERE_1976 at the
    # geometric elevation of the site (the class of the check above, across the elevations
    # where water is pumped).
    path = write_json_model(tmp_path, station_model(site))
    got = ringmain_json("duty", path, "--pump", "PU-1", "--flows", "0:80:5", "--speeds", "1.0")
    assert got["atmospheric_pressure_kpa"] * 1e3 == pytest.approx(ATMOSPHERE_1976(Z=site).P, abs=1.0)
