"""Pump curves and operating points against independent references.

* The monotone cubic through four or more curve points is Fritsch & Carlson's (1980) shape-
  preserving interpolant; scipy's `PchipInterpolator` is a published general-purpose
  implementation of the same construction (weighted harmonic-mean slopes inside, the
  shape-preserving three-point formula at the ends).
* The three-point curve is the quadratic through its points (numpy's exact polynomial fit).
* The operating point of a pump lifting from a sump into a tank through one pipe is where the
  pump curve meets the system curve H = lift + h_pipe(Q); the test finds it with scipy's brentq,
  the pipe loss by Hazen-Williams written here from V = 0.849 C R^0.63 S^0.54, R = D/4.
* Hydraulic power is rho g Q H with rho from `iapws` at 20 deg C.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from iapws import IAPWS97
from scipy.interpolate import PchipInterpolator
from scipy.optimize import brentq

G = 9.80665  # standard gravity, m/s2 (CGPM 1901)

SUMP = 5.0  # m
TANK_FLOOR = 50.0
TANK_LEVEL = 4.0
LENGTH = 1200.0  # m
DIAMETER = 0.25  # m
C = 125.0

CURVES = {
    # (flow L/s, head m): an invented three-point curve and an invented five-point curve.
    "three": [(0.0, 72.0), (40.0, 62.0), (60.0, 50.0)],
    "five": [(0.0, 75.0), (20.0, 73.0), (40.0, 67.0), (60.0, 56.0), (80.0, 38.0)],
}


def hazen_williams_loss(q: float) -> float:
    area = math.pi * DIAMETER**2 / 4.0
    v = q / area
    s = (v / (0.849 * C * (DIAMETER / 4.0) ** 0.63)) ** (1.0 / 0.54)
    return s * LENGTH


def reference_curve(points):
    q = np.array([p[0] for p in points]) * 1e-3
    h = np.array([p[1] for p in points])
    if len(points) == 3:
        coef = np.polyfit(q, h, 2)
        return lambda x: float(np.polyval(coef, x))
    pchip = PchipInterpolator(q, h, extrapolate=False)
    return lambda x: float(pchip(x))


def model_for(points, speed: float) -> dict:
    return {
        "title": "pump into a tank",
        "nodes": [
            {"id": "Sump", "kind": "reservoir", "head": SUMP},
            {"id": "J", "elevation": SUMP},
            {"id": "Tank", "kind": "tank", "elevation": TANK_FLOOR, "level": TANK_LEVEL},
        ],
        "links": [
            {
                "id": "PU",
                "kind": "pump",
                "from": "Sump",
                "to": "J",
                "head_curve": [list(p) for p in points],
                "efficiency": 75.0,
                "speed": speed,
            },
            {"id": "Main", "from": "J", "to": "Tank", "length": LENGTH, "diameter": DIAMETER * 1e3, "roughness": C},
        ],
    }


@pytest.mark.parametrize("curve", sorted(CURVES))
@pytest.mark.parametrize("speed", [1.0, 0.9])
def test_operating_point_is_the_intersection_of_pump_and_system_curves(curve, speed, write_model, solve_model):
    points = CURVES[curve]
    h = reference_curve(points)
    lift = TANK_FLOOR + TANK_LEVEL - SUMP

    def pump_head(q):  # affinity laws: H(Q, s) = s^2 h(Q/s)
        return speed**2 * h(q / speed)

    q_max = points[-1][0] * 1e-3 * speed
    q_ref = brentq(lambda q: pump_head(q) - lift - hazen_williams_loss(q), 1e-9, q_max, xtol=1e-15, rtol=1e-15)
    result = solve_model(write_model(model_for(points, speed)))
    links = {l["id"]: l for l in result["links"]}
    q = links["PU"]["flow"] * 1e-3
    # The intersection lies inside the curve's points, so no extrapolation is involved. Both sides
    # solve to ~1e-12; 1e-9 relative leaves room for the different arithmetic.
    assert q == pytest.approx(q_ref, rel=1e-9)
    assert links["PU"]["head_gain"] == pytest.approx(pump_head(q_ref), abs=1e-7)
    rho = IAPWS97(T=293.15, P=0.101325).rho
    hydraulic_kw = rho * G * q_ref * pump_head(q_ref) / 1e3
    assert links["PU"]["hydraulic_power"] == pytest.approx(hydraulic_kw, rel=1e-8)
    assert links["PU"]["shaft_power"] == pytest.approx(hydraulic_kw / 0.75, rel=1e-8)


@pytest.mark.parametrize("lift", [40.0, 50.0, 60.0, 70.0, 74.0])
def test_monotone_cubic_matches_scipy_pchip_between_points(lift, write_model, solve_model):
    """A pump straight between two reservoirs delivers the flow at which its curve equals the lift:
    this reads the fitted curve at many heads, compared with scipy's PCHIP."""
    points = CURVES["five"]
    h = reference_curve(points)
    model = {
        "nodes": [
            {"id": "A", "kind": "reservoir", "head": 0.0},
            {"id": "B", "kind": "reservoir", "head": lift},
        ],
        "links": [{"id": "PU", "kind": "pump", "from": "A", "to": "B", "head_curve": [list(p) for p in points]}],
    }
    q_ref = brentq(lambda q: h(q) - lift, 0.0, points[-1][0] * 1e-3, xtol=1e-15, rtol=1e-15)
    result = solve_model(write_model(model))
    q = result["links"][0]["flow"] * 1e-3
    assert q == pytest.approx(q_ref, rel=1e-9, abs=1e-12)
