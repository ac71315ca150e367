"""Darcy friction factor of `ringmain friction-factor` against outside references.

* Turbulent flow: the Colebrook-White equation (Colebrook 1939, J. ICE 11(4)) as solved by the
  `fluids` package, `fluids.friction.Colebrook`, whose default is the closed-form solution through
  the Lambert W function (falling back to its own iterative solution where that form overflows).
* Laminar flow: f = 64/Re, the Hagen-Poiseuille result (any fluid-mechanics textbook).
* A Moody chart reading (common practice).
"""

from __future__ import annotations

import warnings

import numpy as np
import pytest
from fluids.friction import Colebrook

# Reynolds numbers from the start of the turbulent range to 1e8, log-spaced, plus round values.
TURBULENT_RE = sorted({*np.geomspace(4e3, 1e8, 15).tolist(), 4e3, 1e4, 1e5, 1e6, 1e7, 1e8})
# Relative roughness from hydraulically smooth (0) to very rough (5e-2).
RELATIVE_ROUGHNESS = [0.0, 1e-6, 1e-5, 1e-4, 1e-3, 1e-2, 5e-2]

# Tolerance against fluids' Colebrook: 1e-12 relative. How precise the reference is was measured
# with fluids 1.3.1 on this very grid: its default closed-form (Lambert W) value differs from its
# own iterative solution run to tol = 1e-15 by at most 3.1e-14 relative (the closed form loses a few
# digits to cancellation at large Re * e/D), and the Colebrook residual at its value implies an error
# of the same size. ringmain's Newton solution stops within a few ulp, and the JSON output prints
# the shortest representation that round-trips, so nothing is lost in transit. 1e-12 leaves a
# factor of 30 over the reference's own error while still catching any wrong constant (e.g. 2.51 vs
# 2.5 changes f by ~1e-3) or an unconverged iteration.
COLEBROOK_RTOL = 1e-12


def fluids_colebrook(re: float, rr: float) -> float:
    """fluids' Colebrook solution; its closed form overflows at large Re * e/D, which fluids
    announces with a numpy RuntimeWarning before falling back to its iterative solution."""
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)
        return Colebrook(re, rr)


@pytest.fixture(scope="module")
def friction(ringmain_json):
    def f(re: float, rr: float) -> float:
        out = ringmain_json("friction-factor", "--reynolds", repr(float(re)), "--relative-roughness", repr(float(rr)))
        return out["friction_factor"]

    return f


@pytest.mark.parametrize("rr", RELATIVE_ROUGHNESS)
def test_colebrook_white_matches_fluids(friction, rr):
    bad = []
    for re in TURBULENT_RE:
        got = friction(re, rr)
        ref = fluids_colebrook(re, rr)  # fluids.friction.Colebrook (Colebrook 1939 equation)
        if not abs(got - ref) <= COLEBROOK_RTOL * ref:
            bad.append(f"Re={re:.6g}: ringmain {got!r}, fluids {ref!r}, rel. diff {abs(got - ref) / ref:.2e}")
    assert not bad, f"e/D={rr}: Colebrook-White differs from fluids beyond {COLEBROOK_RTOL}:\n" + "\n".join(bad)


@pytest.mark.parametrize("rr", [0.0, 1e-3, 5e-2])
@pytest.mark.parametrize("re", [1.0, 10.0, 100.0, 640.0, 1000.0, 1500.0, 1999.0])
def test_laminar_is_hagen_poiseuille(friction, re, rr):
    # f = 64/Re (Hagen-Poiseuille, textbook), independent of roughness. The same one division in
    # IEEE doubles on both sides, so equal to rounding.
    assert friction(re, rr) == pytest.approx(64.0 / re, rel=1e-15, abs=0.0)


@pytest.mark.parametrize("rr", [0.0, 1e-4, 1e-3, 1e-2, 5e-2])
def test_continuous_at_regime_limits(friction, rr):
    # Just below and just above Re = 2000 and Re = 4000 (one part in 1e9 away) the factor must tend
    # to the same limit: 64/2000 (Hagen-Poiseuille) at 2000, fluids' Colebrook value at 4000. Over a
    # step of 2e-9 Re the factor itself changes by only ~|d ln f/d ln Re| * 2e-9 <= 2e-9 relative in
    # either law, so 1e-8 relative catches any jump in the transition law while allowing the slope.
    delta = 1e-9
    limits = {2000.0: 64.0 / 2000.0, 4000.0: fluids_colebrook(4000.0, rr)}  # textbook; fluids
    for re, limit in limits.items():
        below = friction(re * (1.0 - delta), rr)
        above = friction(re * (1.0 + delta), rr)
        assert below == pytest.approx(limit, rel=1e-8), f"Re just below {re}, e/D={rr}"
        assert above == pytest.approx(limit, rel=1e-8), f"Re just above {re}, e/D={rr}"
        assert below == pytest.approx(above, rel=1e-8), f"jump at Re={re}, e/D={rr}"


def test_moody_chart_reading(friction):
    # Moody chart (Moody 1944, Trans. ASME 66): f ~ 0.0216 at Re = 1.39e5 and e/D = 0.001 -- a chart
    # reading of common practice, quoted from memory rather than read off a printed chart here. A
    # reading off a log-log chart is good to about 2 %.
    assert friction(1.39e5, 0.001) == pytest.approx(0.0216, rel=0.02)
