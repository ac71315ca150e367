"""The package gives the command-line program's answers on the example models.

Both go through the same core; this checks the boundary: unit conversions, ids, order, states and
statistics must come out exactly as `ringmain solve --format json` writes them.
"""

from __future__ import annotations

import math

import pytest
from conftest import HILLSIDE, TWO_LOOP

import ringmain


def _same(a, b, key):
    if isinstance(b, float) or isinstance(a, float):
        if b is None or a is None:
            assert a is None and b is None, key
        else:
            assert math.isclose(a, b, rel_tol=1e-12, abs_tol=1e-12), f"{key}: {a} != {b}"
    else:
        assert a == b, f"{key}: {a!r} != {b!r}"


@pytest.mark.parametrize("path", [HILLSIDE, TWO_LOOP], ids=["hillside", "two-loop"])
def test_results_equal_the_command_line_program(path, cli_json):
    expected = cli_json(path)
    with ringmain.Model.load(path) as model:
        results = model.solve()
        assert model.title == expected["title"]
        units = model.units
    with results:
        _check_against_cli(results, units, expected)


def _check_against_cli(results, units, expected):
    # Results exist only for a converged solve (else SolveError); the CLI still says so.
    assert expected["converged"] is True
    assert results.iterations == expected["iterations"]
    assert results.status_changes == expected["status_changes"]
    for quantity, label in expected["units"].items():
        assert units[quantity] == label, quantity
    mass, energy = results.residuals
    _same(mass, expected["summary"]["max_mass_residual"], "max_mass_residual")
    _same(energy, expected["summary"]["max_energy_residual"], "max_energy_residual")

    nodes = results.nodes()
    assert [n["id"] for n in nodes] == [n["id"] for n in expected["nodes"]]
    for got, want in zip(nodes, expected["nodes"]):
        assert set(got) == set(want), got["id"]
        for key in want:
            _same(got[key], want[key], f"node {want['id']} {key}")
        if want["head"] is not None:
            _same(results.node_head(want["id"]), want["head"], "node_head")
            _same(results.node_pressure(want["id"]), want["pressure"], "node_pressure")

    links = results.links()
    assert [k["id"] for k in links] == [k["id"] for k in expected["links"]]
    # Device details that the program's JSON carries from the model rather than from the results,
    # and the minor-loss details of the named fittings (k_total, minor_share), which the C library
    # does not report yet.
    from_model = {"speed", "beyond_curve", "valve", "setting", "k_total", "minor_share"}
    for got, want in zip(links, expected["links"]):
        assert set(got) == set(want) - from_model, got["id"]
        for key in got:
            _same(got[key], want[key], f"link {want['id']} {key}")
        _same(results.link_flow(want["id"]), want["flow"], "link_flow")
        if want["velocity"] is not None:
            _same(results.link_velocity(want["id"]), want["velocity"], "link_velocity")
        else:
            assert math.isnan(results.link_velocity(want["id"]))
        assert results.link_status(want["id"]) == want["status"]
    assert results.warnings == expected["warnings"]


def test_numpy_arrays_hold_the_same_values(cli_json):
    np = pytest.importorskip("numpy")
    expected = cli_json(HILLSIDE)
    with ringmain.Model.load(HILLSIDE) as model, model.solve() as results:
        assert isinstance(results.heads, np.ndarray) and results.heads.dtype == np.float64
        assert results.heads.shape == (len(expected["nodes"]),)
        assert results.flows.shape == (len(expected["links"]),)
        want = np.array([k["flow"] for k in expected["links"]])
        np.testing.assert_allclose(results.flows, want, rtol=1e-12, atol=1e-12)
        pressures = np.array([np.nan if n["pressure"] is None else n["pressure"] for n in expected["nodes"]])
        np.testing.assert_allclose(results.pressures, pressures, rtol=1e-12, atol=1e-12)
        assert not results.heads.flags.writeable
