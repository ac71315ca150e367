"""Water properties of `ringmain water-properties` against the `iapws` package.

* Density: IAPWS Industrial Formulation 1997 (IF97) at 0.101325 MPa, `iapws.IAPWS97(T=, P=).rho`.
* Dynamic viscosity: IAPWS 2008 formulation for the viscosity of ordinary water substance
  (Huber et al. 2009, J. Phys. Chem. Ref. Data 38(2)), `iapws._iapws._Viscosity(rho, T)` without the
  critical enhancement (no phase data passed), at the IF97 density above.
* Kinematic viscosity at 20 deg C: a handbook value of common practice.
"""

from __future__ import annotations

import pytest
from iapws import IAPWS97
from iapws._iapws import _Viscosity

ATMOSPHERE_MPA = 0.101325  # standard atmosphere, 101.325 kPa (ISO 2533)
ZERO_CELSIUS_K = 273.15  # 0 deg C in kelvin (SI definition of the Celsius scale)

# 0 to 99 deg C: the liquid range at one atmosphere that ringmain accepts, ends included.
TEMPERATURES_C = [0.0, 1.0, 4.0, 10.0, 15.0, 20.0, 25.0, 30.0, 37.5, 40.0, 50.0, 60.0, 70.0, 80.0, 90.0, 95.0, 99.0]

# Tolerance: 1e-12 relative. Both sides evaluate the same published polynomials in IEEE doubles,
# only in a different order of summation; the differences measured on this grid are at most
# 1.6e-14 relative (viscosity at 0 deg C) and below 5e-16 for density. 1e-12 is a wide margin over
# rounding yet ~1e5 times tighter than a single mistyped coefficient digit would allow.
RTOL = 1e-12


def iapws_reference(celsius: float) -> tuple[float, float]:
    t = celsius + ZERO_CELSIUS_K
    state = IAPWS97(T=t, P=ATMOSPHERE_MPA)  # IAPWS-IF97 via the iapws package
    assert state.region == 1, f"{celsius} deg C at one atmosphere should be IF97 region 1 (liquid)"
    rho = state.rho
    mu = _Viscosity(rho, t)  # IAPWS 2008 viscosity via the iapws package, no critical enhancement
    return rho, mu


@pytest.mark.parametrize("celsius", TEMPERATURES_C)
def test_density_and_viscosity_match_iapws(ringmain_json, celsius):
    got = ringmain_json("water-properties", "--temperature", repr(celsius))
    rho, mu = iapws_reference(celsius)
    assert got["density"] == pytest.approx(rho, rel=RTOL), "density, kg/m3 (IAPWS-IF97)"
    assert got["dynamic_viscosity"] == pytest.approx(mu, rel=RTOL), "dynamic viscosity, Pa s (IAPWS 2008)"
    assert got["kinematic_viscosity"] == pytest.approx(mu / rho, rel=RTOL), "kinematic viscosity = mu/rho, m2/s"


def test_kinematic_viscosity_handbook_value(ringmain_json):
    # About 1.004e-6 m2/s for water at 20 deg C: the handbook value of common practice (from memory),
    # quoted to four figures, so +/-0.5 %.
    got = ringmain_json("water-properties", "--temperature", "20")
    assert got["kinematic_viscosity"] == pytest.approx(1.004e-6, rel=5e-3)


@pytest.mark.parametrize("celsius", ["-1", "99.5", "150"])
def test_temperature_outside_liquid_range_is_refused(run_ringmain, celsius):
    # Outside 0..99 deg C the formulations above no longer describe liquid water at one atmosphere
    # (ice below 0, boiling at ~100 deg C: common practice); the program must refuse with exit 2.
    # (`--temperature=` form, so that "-1" reaches the program and is not taken for an option.)
    proc = run_ringmain("water-properties", f"--temperature={celsius}", "--format", "json", expect=2)
    assert "--temperature must be between 0 and 99" in proc.stderr, proc.stderr
