"""Labelled sequences from NPZ arrays: targets, padding masks, splits, scaling and bad files."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest
import torch

from sweeper.errors import SpecError
from sweeper.tasks.registry import build_task
from sweeper.training.params import TrialParams
from sweeper.training.trial_run import TrialRun

RNG = np.random.default_rng(0)


def write(folder: Path, **arrays: np.ndarray) -> None:
    np.savez(folder / "seqs.npz", **arrays)


def sequences(folder: Path, **options):
    return build_task({"kind": "sequences", "file": "seqs.npz", **options}, folder, "q.toml")


def ragged(count: int = 40, steps: int = 6, features: int = 2):
    inputs = RNG.normal(size=(count, steps, features))
    lengths = RNG.integers(1, steps + 1, size=count)
    inputs[np.arange(steps)[None, :] >= lengths[:, None]] = np.nan  # padding may hold anything
    return inputs, lengths


def test_one_label_per_sequence_sits_at_its_last_real_step(tmp_path: Path) -> None:
    inputs, lengths = ragged()
    labels = np.arange(40) % 3
    write(tmp_path, inputs=inputs, labels=labels, lengths=lengths)
    task = sequences(tmp_path, lengths="lengths", shuffle=False, valid_fraction=0.25)
    assert (task.kind, task.input_size, task.output_size, task.length) == (
        "classification",
        2,
        3,
        6,
    )
    train = task.data("train")
    assert len(train) == 30 and task.index["valid"].tolist() == list(range(30, 40))
    expected = np.zeros((30, 6), dtype=np.float32)
    expected[np.arange(30), lengths[:30] - 1] = 1
    assert np.array_equal(train.weights.numpy(), expected)
    assert train.targets[train.weights > 0].tolist() == labels[:30].tolist()


def test_padding_is_zero_input_after_scaling_fitted_on_real_training_steps(tmp_path: Path) -> None:
    inputs, lengths = ragged()
    write(tmp_path, inputs=inputs, labels=np.arange(40) % 2, lengths=lengths)
    task = sequences(tmp_path, lengths="lengths", shuffle=False, valid_fraction=0.25)
    real = np.arange(6)[None, :] < lengths[:30, None]
    steps = inputs[:30][real]
    np.testing.assert_allclose(task.input_scaling.mean, steps.mean(axis=0))
    np.testing.assert_allclose(task.input_scaling.std, steps.std(axis=0))
    train = task.data("train").inputs.numpy()
    assert np.all(train[~real] == 0) and np.isfinite(train).all()
    np.testing.assert_allclose(train[real], task.input_scaling.apply(steps), rtol=1e-5, atol=1e-6)


def test_per_step_labels_weigh_only_real_steps(tmp_path: Path) -> None:
    inputs, lengths = ragged()
    labels = RNG.integers(0, 4, size=(40, 6))
    labels[np.arange(6)[None, :] >= lengths[:, None]] = -1  # padding's labels are ignored
    write(tmp_path, inputs=inputs, labels=labels, lengths=lengths)
    task = sequences(tmp_path, lengths="lengths", test_fraction=0.25)
    assert task.per_step and task.output_size == 4
    for split in ("train", "valid", "test"):
        data, rows = task.data(split), task.index[split]
        real = np.arange(6)[None, :] < lengths[rows, None]
        assert np.array_equal(data.weights.numpy() > 0, real)
        assert np.array_equal(data.targets.numpy()[real], labels[rows][real])


def test_shuffled_split_is_seeded_and_disjoint(tmp_path: Path) -> None:
    write(tmp_path, inputs=RNG.normal(size=(50, 4, 1)), labels=np.arange(50) % 2)
    first = sequences(tmp_path, test_fraction=0.2, seed=3)
    again = sequences(tmp_path, test_fraction=0.2, seed=3)
    other = sequences(tmp_path, test_fraction=0.2, seed=4)
    parts = [first.index[s].tolist() for s in ("train", "valid", "test")]
    assert sorted(index for part in parts for index in part) == list(range(50))
    assert [len(p) for p in parts] == [30, 10, 10]
    assert first.index["test"].tolist() == again.index["test"].tolist()
    assert first.index["test"].tolist() != other.index["test"].tolist()


def test_baseline_is_the_commonest_training_class(tmp_path: Path) -> None:
    labels = np.array([0] * 20 + [1] * 10 + [1] * 6 + [2] * 4)
    write(tmp_path, inputs=RNG.normal(size=(40, 3, 1)), labels=labels)
    task = sequences(tmp_path, shuffle=False, valid_fraction=0.25)
    assert task.commonest_class() == 0
    baseline = task.baseline()
    assert baseline.value == 0.0 and baseline.measure == "valid_metric"  # valid has no 0


def test_a_model_learns_a_ragged_task_better_than_its_baseline(tmp_path: Path) -> None:
    # the class is the sign of the first input: the answer must be carried to the last step
    inputs, lengths = ragged(count=256, steps=8, features=1)
    labels = (inputs[:, 0, 0] > 0).astype(int)
    write(tmp_path, inputs=inputs, labels=labels, lengths=lengths)
    task = sequences(tmp_path, lengths="lengths")
    params = TrialParams(unroll=8, hidden=16, lr=0.02, batch=16, cell="gru")
    run = TrialRun(task, params, seed=0)
    records = [run.run_epoch() for _ in range(8)]
    assert records[-1].valid_metric > max(task.baseline().value, 0.6) + 0.2


def error(folder: Path, **options) -> SpecError:
    with pytest.raises(SpecError) as caught:
        sequences(folder, **options)
    assert "\n" not in str(caught.value)
    assert "seqs.npz" in caught.value.message
    return caught.value


@pytest.mark.parametrize(
    ("arrays", "options", "key", "words"),
    [
        (
            {"x": np.zeros((4, 3, 1))},
            {},
            "task.inputs",
            "no array 'inputs' in seqs.npz (arrays: x)",
        ),
        ({"inputs": np.zeros((4, 3))}, {}, "task.inputs", "[sequences, steps, features]"),
        ({"inputs": np.zeros((4, 3, 1))}, {}, "task.labels", "no array 'labels'"),
        ({"inputs": np.zeros((4, 3, 1)), "labels": np.zeros(5)}, {}, "task.labels", "[4]"),
        (
            {"inputs": np.zeros((4, 3, 1)), "labels": np.array([0, 1, -1, 1])},
            {},
            "task.labels",
            "label -1 at sequence 2 is out of range",
        ),
        (
            {"inputs": np.zeros((4, 3, 1)), "labels": np.array([0, 1, 2, 1])},
            {"classes": 2},
            "task.labels",
            "whole numbers [0, 2)",
        ),
        (
            {"inputs": np.zeros((4, 3, 1)), "labels": np.array([0, 1.5, 1, 1])},
            {},
            "task.labels",
            "label 1.5",
        ),
        (
            {"inputs": np.zeros((4, 3, 1)), "labels": np.zeros(4)},
            {},
            "task.labels",
            "every label is 0",
        ),
        (
            {
                "inputs": np.zeros((4, 3, 1)),
                "labels": np.arange(4) % 2,
                "n": np.array([3, 0, 1, 2]),
            },
            {"lengths": "n"},
            "task.lengths",
            "sequence 1 has length 0",
        ),
        (
            {"inputs": np.zeros((4, 3, 1)), "labels": np.arange(4) % 2},
            {"lengths": "n"},
            "task.lengths",
            "no array 'n'",
        ),
    ],
)
def test_bad_arrays(tmp_path: Path, arrays, options, key: str, words: str) -> None:
    write(tmp_path, **arrays)
    found = error(tmp_path, **options)
    assert found.key == key
    assert words in found.message


def test_nan_inside_a_real_step_is_refused(tmp_path: Path) -> None:
    inputs = np.zeros((6, 4, 2))
    inputs[3, 3, 1] = np.inf
    write(tmp_path, inputs=inputs, labels=np.arange(6) % 2, n=np.array([4, 4, 4, 3, 4, 4]))
    found = error(tmp_path)
    assert found.key == "task.inputs"
    assert "sequence 3, step 3, feature 1" in found.message
    sequences(tmp_path, lengths="n")  # ending sequence 3 before the bad step makes it padding


def test_object_arrays_are_refused_without_running_pickle(tmp_path: Path) -> None:
    objects = np.array([{"a": 1}, None], dtype=object)
    np.savez(tmp_path / "seqs.npz", inputs=objects, labels=np.arange(2))
    found = error(tmp_path)
    assert found.key == "task.file" and "Python objects" in found.message


def test_too_few_sequences_for_the_splits(tmp_path: Path) -> None:
    write(tmp_path, inputs=np.zeros((3, 2, 1)), labels=np.array([0, 1, 0]))
    found = error(tmp_path, valid_fraction=0.1)
    assert found.key == "task.valid_fraction" and "valid split empty" in found.message


def test_tensors_have_the_trainers_types(tmp_path: Path) -> None:
    write(tmp_path, inputs=np.zeros((10, 3, 2), dtype=np.float32), labels=np.arange(10) % 2)
    data = sequences(tmp_path).data("train")
    assert (data.inputs.dtype, data.targets.dtype, data.weights.dtype) == (
        torch.float32,
        torch.int64,
        torch.float32,
    )
