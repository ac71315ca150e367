"""The daily low-pressure script of the README runs and says what it should."""

from __future__ import annotations

import re
import subprocess
import sys

from conftest import EXAMPLE, HILLSIDE, REPO

README = REPO / "bindings" / "python" / "README.md"


def test_the_readme_shows_exactly_the_example_script():
    blocks = re.findall(r"```python\n(.*?)```", README.read_text(encoding="utf-8"), flags=re.S)
    assert EXAMPLE.read_text(encoding="utf-8") in blocks


def test_the_example_prints_the_lowest_pressure_of_each_hour(cli_json):
    proc = subprocess.run(
        [sys.executable, str(EXAMPLE), str(HILLSIDE)], capture_output=True, text=True, timeout=120
    )
    assert proc.returncode == 0, proc.stderr
    rows = re.findall(r"^(\d\d):00\s+(-?\d+\.\d\d)\s+(\S+)$", proc.stdout, flags=re.M)
    assert [int(h) for h, _, _ in rows] == list(range(24))
    lowest = {int(h): float(p) for h, p, _ in rows}
    # At 08:00 the demands are the model's own: the command-line program's lowest junction pressure.
    expected = cli_json(HILLSIDE)
    junctions = [n for n in expected["nodes"] if n["kind"] == "junction" and n["pressure"] is not None]
    worst = min(junctions, key=lambda n: n["pressure"])
    assert lowest[8] == round(worst["pressure"], 2)
    assert dict((int(h), n) for h, _, n in rows)[8] == worst["id"]
    # Pressures are highest in the small hours and lowest at the morning peak.
    assert max(lowest, key=lowest.get) in (2, 3)
    assert min(lowest, key=lowest.get) == 8
    assert "licensed" in proc.stdout
