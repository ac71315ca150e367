"""The lowest service pressure of each hour of a day, from one model and a diurnal demand curve.

    python daily_low_pressures.py [MODEL]

MODEL defaults to the demo network examples/hillside.toml of the ringmain repository. Every
junction's demand follows the same curve of 24 hourly factors; the model is solved once per hour
without being rebuilt, and the lowest junction pressure of each hour is printed.

Results are only as good as the model and its data; designs must be checked by a licensed engineer
against local codes and the utility's standards.
"""

import sys
from pathlib import Path

import ringmain

# Hourly demand factors of a typical residential day, 00:00 to 23:00 (common practice, not from a
# measured system: a night minimum near half the average, a morning peak near 1.5 times it and an
# evening peak near 1.4). They average 1.0.
FACTORS = [
    0.50, 0.50, 0.45, 0.45, 0.50, 0.65, 0.95, 1.35, 1.50, 1.45, 1.25, 1.10,
    1.10, 1.10, 1.05, 1.05, 1.10, 1.20, 1.35, 1.40, 1.30, 1.10, 0.90, 0.70,
]
# The demo model's demands are those of the morning peak hour, 08:00 to 09:00.
MODEL_HOUR = 8


def main(path: Path) -> None:
    with ringmain.Model.load(path) as model:
        junctions = model.node_ids("junction")
        # Each junction's average-hour demand: its demand in the model over that hour's factor.
        base = {j: model.demand(j) / FACTORS[MODEL_HOUR] for j in junctions}
        unit = model.units["pressure"]
        print(f"hour   lowest pressure ({unit})  at")
        for hour, factor in enumerate(FACTORS):
            for j in junctions:
                model.set_demand(j, base[j] * factor)
            with model.solve() as results:
                node, pressure = results.lowest_pressure()
            print(f"{hour:02d}:00  {pressure:19.2f}  {node}")
    print("Results are only as good as the model and its data; designs must be checked by a licensed")
    print("engineer against local codes and the utility's standards.")


if __name__ == "__main__":
    default = Path(__file__).resolve().parents[3] / "examples" / "hillside.toml"
    main(Path(sys.argv[1]) if len(sys.argv) > 1 else default)
