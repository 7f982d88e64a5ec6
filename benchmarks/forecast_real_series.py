"""Change forecasting on three real public series against the forecasting baselines.

    python benchmarks/forecast_real_series.py           # default-size sweeps (20 trials)
    python benchmarks/forecast_real_series.py --quick   # 2 trials of 2 epochs each

The series ship with statsmodels: ``co2`` (weekly CO2 at Mauna Loa, 1958-2001, a trend and
a yearly season; 59 missing weeks, filled linearly), ``elnino`` (monthly sea surface
temperature, 1950-2010, a yearly season) and ``sunspots`` (yearly sunspot numbers,
1700-2008, a cycle of about 11 years). Each is exported to CSV, swept by `sweeper run`
(the default 20 trials; 20 epochs, 40 for elnino) with ``predict = "change"``, and its best
configuration retrained by `sweeper best --retrain --save`; the saved model's info holds
the final model's and every baseline's scores on the test rows in data units. Wall time
counts both commands.
"""

from __future__ import annotations

import argparse
import os
import sys
import tempfile
from pathlib import Path

import numpy as np
from measure import machine_line, print_table, timed_subprocess

SPEC = """
[study]
name = "{name}"
workers = 2
seed = 3

[task]
kind = "series"
file = "{name}.csv"
columns = ["{column}"]
horizon = 1
window = {window}
stride = {stride}
valid_fraction = 0.15
test_fraction = 0.15
predict = "change"
season = {season}
fill = "linear"

[training]
epochs = {epochs}
optimizer = "adam"

[search]
cell = {{ one_of = ["gru", "lstm"] }}
unroll = {{ one_of = {unrolls} }}
hidden = {{ between = [16, 64], step = 16 }}
clip = {{ between = [0.5, 5.0], scale = "log" }}
lr = {{ between = [0.001, 0.02], scale = "log" }}
"""

SERIES = {
    "co2": {
        "column": "co2",
        "epochs": 20,
        "window": 104,
        "stride": 8,
        "season": 52,
        "unrolls": [13, 26, 52, 104],
    },
    "elnino": {
        "column": "temperature",
        "epochs": 40,
        "window": 48,
        "stride": 4,
        "season": 12,
        "unrolls": [12, 24, 48],
    },
    "sunspots": {
        "column": "activity",
        "epochs": 20,
        "window": 44,
        "stride": 2,
        "season": 11,
        "unrolls": [11, 22, 44],
    },
}
NAMES = ("persistence", "seasonal naive", "drift", "Holt-Winters")
HOLT_WINTERS_SLACK = 1.10  # the model's test MSE at most 10% above Holt-Winters'


def export(folder: Path) -> None:
    from statsmodels.datasets import co2, elnino, sunspots

    weeks = co2.load_pandas().data["co2"]
    rows = [f"{stamp.date()},{'' if np.isnan(v) else repr(float(v))}" for stamp, v in weeks.items()]
    (folder / "co2.csv").write_text("week,co2\n" + "\n".join(rows) + "\n", encoding="utf-8")
    table = elnino.load_pandas().data
    months = [
        f"{int(year)}-{m:02d},{float(v)!r}"
        for year, values in zip(table["YEAR"], table.iloc[:, 1:].to_numpy(), strict=True)
        for m, v in enumerate(values, start=1)
    ]
    text = "month,temperature\n" + "\n".join(months) + "\n"
    (folder / "elnino.csv").write_text(text, encoding="utf-8")
    years = sunspots.load_pandas().data
    rows = [
        f"{int(y)},{float(v)!r}" for y, v in zip(years["YEAR"], years["SUNACTIVITY"], strict=True)
    ]
    (folder / "sunspots.csv").write_text(
        "year,activity\n" + "\n".join(rows) + "\n", encoding="utf-8"
    )


def sweep(folder: Path, name: str, quick: bool) -> tuple[float, dict]:
    import sweeper

    settings = SERIES[name] | ({"epochs": 2} if quick else {})
    text = SPEC.format(name=name, **settings)
    (folder / f"{name}.toml").write_text(text, encoding="utf-8")
    command = [sys.executable, "-m", "sweeper", "run", f"{name}.toml", "--report", f"{name}.html"]
    if quick:
        command += ["--trials", "2"]
    seconds = timed_subprocess(command, folder)
    best = [sys.executable, "-m", "sweeper", "best", f"runs/{name}.db", "--retrain"]
    seconds += timed_subprocess([*best, "--save", f"{name}.pt"], folder)
    return seconds, sweeper.load_model(folder / f"{name}.pt").info


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true", help="2 trials of 2 epochs")
    quick = parser.parse_args().quick
    print(machine_line(), f"load {os.getloadavg()[0]:.1f}")
    rows, ratios = [], []
    with tempfile.TemporaryDirectory() as tmp:
        folder = Path(tmp)
        export(folder)
        for name in SERIES:
            seconds, info = sweep(folder, name, quick)
            baselines = info["baselines"]["scores"]
            model = info["scores"]
            rows.append([name, "RNN (best, retrained)", *_figures(model), f"{seconds:.0f}"])
            rows += [[name, key, *_figures(baselines[key]), ""] for key in NAMES]
            ratios.append((name, model, baselines, info["baselines"]["rows"]))
    print("test rows, data units (wall: sweep + final fit)")
    print_table(["series", "forecast", "MSE", "MAE", "MASE", "wall s"], rows)
    for name, model, baselines, test_rows in ratios:
        print(f"{name}_test_rows {test_rows}")
        for key, target in (("persistence", "< 1"), ("seasonal naive", "< 1")):
            ratio = model["mse"] / baselines[key]["mse"]
            print(f"{name}_mse_over_{key.replace(' ', '_')} {ratio:.3f} (target {target})")
        ratio = model["mse"] / baselines["Holt-Winters"]["mse"]
        print(f"{name}_mse_over_holt_winters {ratio:.3f} (target <= {HOLT_WINTERS_SLACK})")
    print(f"load after {os.getloadavg()[0]:.1f}")


def _figures(scores: dict) -> list[float]:
    return [scores["mse"], scores["mae"], scores["mase"]]


if __name__ == "__main__":
    main()
