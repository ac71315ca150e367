"""Shared fixtures of the tests of the Python package.

The package under test is the installed ``ringmain`` (``pip install ./bindings/python``), which
finds the native library as documented in ``ringmain._ffi``. The command-line program, for the
comparisons, is found through RINGMAIN_BIN, else in the workspace's release directory
($CARGO_TARGET_DIR/release when that is set, else target/release).
"""

from __future__ import annotations

import json
import os
import subprocess
from pathlib import Path

import pytest

REPO = Path(__file__).resolve().parents[3]
HEADER = REPO / "ffi" / "include" / "ringmain.h"
HILLSIDE = REPO / "examples" / "hillside.toml"
TWO_LOOP = REPO / "tests" / "data" / "two-loop.toml"
EXAMPLE = REPO / "bindings" / "python" / "examples" / "daily_low_pressures.py"


def _release_dir() -> Path:
    target = os.environ.get("CARGO_TARGET_DIR")
    return (REPO / target if target else REPO / "target") / "release"


@pytest.fixture(scope="session")
def cli_json():
    """Runs `ringmain solve MODEL --format json` and returns the parsed results."""
    given = os.environ.get("RINGMAIN_BIN")
    binary = Path(given) if given else _release_dir() / "ringmain"
    if not binary.is_file():
        pytest.fail(f"the ringmain program is not at {binary}; run `cargo build --release` or set RINGMAIN_BIN")

    def run(model: Path) -> dict:
        proc = subprocess.run(
            [str(binary), "solve", str(model), "--format", "json"],
            capture_output=True,
            text=True,
            timeout=60,
            stdin=subprocess.DEVNULL,
        )
        assert proc.returncode == 0, proc.stderr
        return json.loads(proc.stdout)

    return run


HILLSIDE_DAY = REPO / "examples" / "hillside-day.toml"


def cli_binary() -> Path:
    given = os.environ.get("RINGMAIN_BIN")
    return Path(given) if given else _release_dir() / "ringmain"


@pytest.fixture(scope="session")
def generated(tmp_path_factory):
    """A generated street network of the given number of junctions (JSON model file)."""
    made: dict[int, Path] = {}

    def make(junctions: int) -> Path:
        if junctions not in made:
            path = tmp_path_factory.mktemp("generated") / f"town-{junctions}.json"
            proc = subprocess.run(
                [str(cli_binary()), "generate", "--junctions", str(junctions), "--output", str(path)],
                capture_output=True,
                text=True,
                timeout=120,
                stdin=subprocess.DEVNULL,
            )
            assert proc.returncode == 0, proc.stderr
            made[junctions] = path
        return made[junctions]

    return make
