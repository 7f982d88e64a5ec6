"""Sweeps on open data sets that registry packages ship inside themselves (no download).

- The yearly sunspot numbers 1700-2008 shipped by statsmodels (``statsmodels.datasets.
  sunspots``): the best model must beat the persistence forecast on the held-out tail.
- scikit-learn's handwritten digits (``sklearn.datasets.load_digits``, 1797 images of 8x8),
  read as sequences of 8 rows of 8 pixels: the best model must reach 90% test accuracy
  (simple classifiers exceed 95% on it: common practice, no source).
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

import sweeper
from sweeper.results.saved_model import SavedModel
from sweeper.spec.loading import load_spec
from sweeper.sweep.launcher import run_sweep
from sweeper.tasks.registry import build_task
from tests.conftest import invoke

SUNSPOTS = """
[study]
name = "sunspots"
trials = {trials}
seed = 1
sampler = "random"

[task]
kind = "series"
file = "sunspots.npz"
columns = ["activity"]
window = 24
stride = 1
valid_fraction = 0.15
test_fraction = 0.15

[training]
epochs = {epochs}
threads = 1
cell = "gru"
batch = 16
clip = 1.0

[search]
unroll = {{ one_of = [12, 24] }}
hidden = {{ one_of = [16, 32] }}
lr = {{ between = [0.003, 0.02], scale = "log" }}
"""

DIGITS = """
[study]
name = "digits"
goal = "maximize"
objective = "valid_metric"
trials = {trials}
seed = 2
sampler = "random"

[task]
kind = "sequences"
file = "digits.npz"
valid_fraction = 0.2
test_fraction = 0.2
shuffle = false

[training]
epochs = {epochs}
threads = 1
cell = "lstm"
unroll = 8
batch = 32

[search]
hidden = {{ one_of = [32, 64] }}
lr = {{ between = [0.005, 0.02], scale = "log" }}
"""


def sunspots(folder: Path) -> np.ndarray:
    from statsmodels.datasets import sunspots as shipped  # the test extra installs statsmodels

    data = shipped.load_pandas().data  # a CSV inside the package: no download
    activity = data["SUNACTIVITY"].to_numpy(dtype=np.float64)
    np.savez(folder / "sunspots.npz", year=data["YEAR"].to_numpy(), activity=activity)
    return activity


def digits(folder: Path) -> tuple[np.ndarray, np.ndarray]:
    from sklearn.datasets import load_digits  # the test extra installs scikit-learn

    found = load_digits()  # shipped inside scikit-learn: no download
    np.savez(folder / "digits.npz", inputs=found.images, labels=found.target)
    return found.images, found.target


def sweep_and_save(folder: Path, template: str, trials: int, epochs: int) -> SavedModel:
    spec_path = folder / "spec.toml"
    storage = folder / "study.db"
    spec_path.write_text(template.format(trials=trials, epochs=epochs), encoding="utf-8")
    run_sweep(load_spec(spec_path).with_overrides(storage=str(storage)))
    saved = folder / "best.pt"
    result = invoke("best", str(storage), "--retrain", "--save", str(saved))
    assert result.exit_code == 0, result.output
    return sweeper.load_model(saved)


def test_time_split_holds_out_the_last_rows_of_the_real_series(tmp_path: Path) -> None:
    activity = sunspots(tmp_path)
    options = {"file": "sunspots.npz", "columns": "activity", "window": 24, "valid_fraction": 0.15}
    task = build_task({"kind": "series", **options, "test_fraction": 0.15}, tmp_path, "s.toml")
    assert len(activity) == 309  # 1700 to 2008
    assert (task.train_rows, task.valid_end) == (217, 263)
    np.testing.assert_allclose(task.input_scaling.mean, [activity[:217].mean()])


def persistence_and_model_mse(model: SavedModel, activity: np.ndarray) -> tuple[float, float]:
    """Both forecasts on every window of the held-out tail, in sunspot numbers."""
    tail = activity[263:]  # the last 15% of the 309 years
    starts = range(len(tail) - 24)
    inputs = np.stack([tail[s : s + 24, None] for s in starts])
    truth = np.stack([tail[s + 1 : s + 25, None] for s in starts])
    forecast = model(inputs).numpy()
    return float(np.mean((inputs - truth) ** 2)), float(np.mean((forecast - truth) ** 2))


def test_sunspot_forecast_beats_persistence_on_the_held_out_tail(tmp_path: Path) -> None:
    activity = sunspots(tmp_path)
    model = sweep_and_save(tmp_path, SUNSPOTS, trials=3, epochs=20)
    persistence, forecast = persistence_and_model_mse(model, activity)
    print(f"sunspots, test tail MSE: persistence {persistence:.1f}, model {forecast:.1f}")
    assert forecast < 0.6 * persistence


def test_digit_rows_classifier_reaches_ninety_percent_on_the_test_split(tmp_path: Path) -> None:
    images, labels = digits(tmp_path)
    model = sweep_and_save(tmp_path, DIGITS, trials=3, epochs=20)
    test = slice(len(labels) - round(len(labels) * 0.2), None)  # shuffle = false: the last 20%
    predicted = model.predict(images[test]).numpy()
    accuracy = float(np.mean(predicted == labels[test]))
    print(f"digits as 8 rows of 8 pixels, test accuracy {accuracy:.4f}")
    assert accuracy >= 0.90
