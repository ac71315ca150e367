"""Shared fixtures of the Python reference checks.

These tests check ringmain against sources outside the project: reference libraries from the
package registries (`fluids`, `iapws`, `scipy`), published benchmark networks and handbook values.
They drive the release command-line program, found through the environment variable
RINGMAIN_BIN or else at <repo>/target/release/ringmain (build it with `cargo build --release`).

Results are only as good as the model and its data; designs must be checked by a licensed engineer
against local codes and the utility's standards.
"""

from __future__ import annotations

import json
import math
import os
import subprocess
import tomllib
from pathlib import Path

import pytest

REPO = Path(__file__).resolve().parents[2]
DATA = REPO / "tests" / "data"

# How long one run of the program may take before the test fails, s. The largest case here solves
# in milliseconds; the limit only keeps a hung run from blocking the suite.
RUN_TIMEOUT = 60

# Unit factors into SI, written here independently of ringmain's sources. Exact by definition:
# 1 in = 0.0254 m and 1 ft = 0.3048 m (international yard and pound agreement, 1959);
# 1 US gallon = 231 in3 = 3.785411784 L. The default of each quantity (used when the model's
# [units] table leaves it out) is the one ringmain's model format documents: m, mm, L/s, m, mm.
LENGTH_TO_M = {"m": 1.0, "ft": 0.3048}
DIAMETER_TO_M = {"mm": 1e-3, "m": 1.0, "in": 0.0254, "ft": 0.3048}
ROUGHNESS_TO_M = DIAMETER_TO_M
FLOW_TO_M3S = {
    "L/s": 1e-3,
    "m3/s": 1.0,
    "m3/h": 1.0 / 3600.0,
    "ML/d": 1e3 / 86400.0,
    "gpm": 3.785411784e-3 / 60.0,
    "cfs": 0.3048**3,
    "Mgal/d": 1e6 * 3.785411784e-3 / 86400.0,
}
UNIT_DEFAULTS = {"length": "m", "diameter": "mm", "flow": "L/s", "pressure": "m", "roughness": "mm"}


def _locate_binary() -> Path:
    given = os.environ.get("RINGMAIN_BIN")
    if given:
        path = Path(given)
        where = f"RINGMAIN_BIN={given}"
    else:
        path = REPO / "target" / "release" / "ringmain"
        where = f"the default location {path}"
    if not path.is_file() or not os.access(path, os.X_OK):
        pytest.fail(
            f"ringmain binary not found or not executable at {where}; build it with "
            f"`cargo build --release` in {REPO}, or point RINGMAIN_BIN at a built binary",
            pytrace=False,
        )
    return path


@pytest.fixture(scope="session")
def ringmain_bin() -> Path:
    """Path of the ringmain program under test."""
    return _locate_binary()


@pytest.fixture(scope="session")
def run_ringmain(ringmain_bin):
    """Runs ringmain with arguments; checks the exit code (default 0) and returns the process."""

    def run(*args, expect: int = 0) -> subprocess.CompletedProcess:
        cmd = [str(ringmain_bin), *map(str, args)]
        proc = subprocess.run(cmd, capture_output=True, text=True, timeout=RUN_TIMEOUT, stdin=subprocess.DEVNULL)
        assert proc.returncode == expect, (
            f"`{' '.join(cmd)}` exited with {proc.returncode}, expected {expect}\n"
            f"stdout:\n{proc.stdout}\nstderr:\n{proc.stderr}"
        )
        return proc

    return run


@pytest.fixture(scope="session")
def ringmain_json(run_ringmain):
    """Runs ringmain with `--format json` appended, checks exit code 0, returns the parsed JSON."""

    def run(*args) -> dict:
        proc = run_ringmain(*args, "--format", "json")
        try:
            return json.loads(proc.stdout)
        except json.JSONDecodeError as e:
            pytest.fail(f"ringmain {' '.join(map(str, args))} printed no valid JSON ({e}):\n{proc.stdout}")

    return run


@pytest.fixture(scope="session")
def solve_model(ringmain_json):
    """Solves a model file with `ringmain solve`; returns the JSON results (checked converged)."""

    def solve(path) -> dict:
        result = ringmain_json("solve", path)
        assert result["converged"] is True, f"{path}: solve returned converged = {result['converged']}"
        return result

    return solve


def read_model(path) -> dict:
    """Reads a TOML model file with the standard library's TOML reader."""
    with open(path, "rb") as f:
        return tomllib.load(f)


def unit_of(model: dict, quantity: str) -> str:
    """The unit the model writes `quantity` in (its [units] entry, else the format's default)."""
    return model.get("units", {}).get(quantity, UNIT_DEFAULTS[quantity])


def _toml_value(value) -> str:
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, int):
        return str(value)
    if isinstance(value, float):
        if not math.isfinite(value):
            raise ValueError(f"cannot write {value} to a model file")
        return repr(value)
    if isinstance(value, str):
        return json.dumps(value)  # a JSON string literal is a valid TOML basic string
    if isinstance(value, (list, tuple)):
        return "[" + ", ".join(_toml_value(v) for v in value) + "]"
    raise TypeError(f"cannot write a {type(value).__name__} to a model file")


def dump_model(model: dict) -> str:
    """Writes a model (tables of scalars and arrays of such tables, as ringmain models are) as TOML."""
    lines = []
    scalars = {k: v for k, v in model.items() if not isinstance(v, (dict, list))}
    for key, value in scalars.items():
        lines.append(f"{key} = {_toml_value(value)}")
    for key, value in model.items():
        if isinstance(value, dict):
            lines.append(f"\n[{key}]")
            lines.extend(f"{k} = {_toml_value(v)}" for k, v in value.items())
    for key, value in model.items():
        if isinstance(value, list):
            for entry in value:
                lines.append(f"\n[[{key}]]")
                lines.extend(f"{k} = {_toml_value(v)}" for k, v in entry.items())
    return "\n".join(lines) + "\n"


@pytest.fixture
def write_model(tmp_path):
    """Writes a model dict to a TOML file in the test's temporary folder; returns its path."""

    def write(model: dict, name: str = "model.toml") -> Path:
        path = tmp_path / name
        path.write_text(dump_model(model), encoding="utf-8")
        # The writer must round-trip, or the test would solve a different model than it reasons about.
        assert read_model(path) == model
        return path

    return write
