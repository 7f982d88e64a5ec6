"""The one epoch loop: where it starts and ends, what its hooks see, and the best weights."""

from __future__ import annotations

import math

import pytest
import torch

from sweeper.training.epoch_loop import BestWeights, RunEnd, run_epochs
from sweeper.training.epoch_record import EpochRecord
from sweeper.training.trial_run import TrainingInterrupted, TrialRun, divergence_reason
from tests.test_train import regression_task, sgd, timeless


def healthy_run(seed: int = 0) -> TrialRun:
    return TrialRun(regression_task(n=12), sgd(unroll=4, batch=4), seed)


def test_healthy_training_runs_every_epoch() -> None:
    run = healthy_run()
    seen: list[EpochRecord] = []
    end = run_epochs(run, 3, on_epoch=[seen.append])
    assert end == RunEnd("completed", 3)
    assert [r.epoch for r in run.records] == [1, 2, 3] and tuple(seen) == run.records
    assert run.records[-1].train_loss < run.records[0].train_loss


def test_the_loop_trains_exactly_like_epochs_run_one_by_one() -> None:
    by_hand = healthy_run(seed=3)
    for _ in range(3):
        by_hand.run_epoch()
    looped = healthy_run(seed=3)
    run_epochs(looped, 3)
    assert timeless(looped.records) == timeless(by_hand.records)


def test_the_loop_continues_from_the_runs_epoch() -> None:
    run = healthy_run()
    run_epochs(run, 2)
    seen: list[int] = []
    end = run_epochs(run, 4, on_epoch=[lambda record: seen.append(record.epoch)])
    assert seen == [3, 4] and end == RunEnd("completed", 4)
    assert run_epochs(run, 4, on_epoch=[lambda record: seen.append(0)]) == RunEnd("completed", 4)
    assert seen == [3, 4]  # nothing left to run


def test_a_diverged_epoch_ends_the_run_after_the_hooks_saw_it() -> None:
    task = regression_task(n=64, length=10)
    run = TrialRun(task, sgd(cell="elman", lr=1e12, momentum=0.9, batch=8, unroll=5), seed=0)
    order: list[str] = []
    asked: list[int] = []

    def stop_after(record: EpochRecord) -> str | None:
        asked.append(record.epoch)
        return None

    end = run_epochs(
        run,
        5,
        on_epoch=[lambda r: order.append("first"), lambda r: order.append("second")],
        stop_after=stop_after,
    )
    (record,) = run.records
    assert 0 < record.nonfinite_steps <= record.steps == 16
    assert end == RunEnd("diverged", 1, divergence_reason(record))
    assert end.reason is not None and end.reason.startswith("diverged at epoch 1: ")
    assert "non-finite step" in end.reason
    assert order == ["first", "second"]
    assert asked == []  # a diverged epoch is never put to the stopping question


def test_a_stop_reason_ends_the_run_after_that_epoch() -> None:
    run = healthy_run()
    asked: list[int] = []

    def stop_at_two(record: EpochRecord) -> str | None:
        asked.append(record.epoch)
        return "enough" if record.epoch == 2 else None

    assert run_epochs(run, 5, stop_after=stop_at_two) == RunEnd("stopped", 2, "enough")
    assert asked == [1, 2] and run.epoch == 2


def test_what_a_hook_raises_propagates() -> None:
    class Pruned(Exception):
        pass

    def prune(record: EpochRecord) -> None:
        if record.epoch == 2:
            raise Pruned

    run = healthy_run()
    with pytest.raises(Pruned):
        run_epochs(run, 5, on_epoch=[prune])
    assert run.epoch == 2


def test_should_stop_interrupts_the_loop() -> None:
    run = healthy_run()
    with pytest.raises(TrainingInterrupted, match="during epoch 1"):
        run_epochs(run, 3, should_stop=lambda: True)
    assert run.epoch == 0


def _weights_after(epochs: int) -> dict[str, torch.Tensor]:
    twin = healthy_run()
    run_epochs(twin, epochs)
    return twin.model.state_dict()


def _assert_same_weights(a: dict[str, torch.Tensor], b: dict[str, torch.Tensor]) -> None:
    assert a.keys() == b.keys()
    assert all(torch.equal(a[name], b[name]) for name in a)


@pytest.mark.parametrize(
    ("better", "values", "best_epoch"),
    [
        ("lower", {1: 3.0, 2: 1.0, 3: 1.0, 4: 2.0}, 2),  # a tie keeps the earlier epoch
        ("higher", {1: 3.0, 2: 1.0, 3: 4.0, 4: 2.0}, 3),
        ("lower", {1: math.nan, 2: 5.0, 3: math.inf, 4: 6.0}, 2),  # non-finite never best
    ],
)
def test_best_weights_are_the_models_weights_after_the_best_epoch(
    better: str, values: dict[int, float], best_epoch: int
) -> None:
    run = healthy_run()
    best = BestWeights(run, lambda record: values[record.epoch], better)  # type: ignore[arg-type]
    run_epochs(run, 4, on_epoch=[best])
    assert (best.epoch, best.value) == (best_epoch, values[best_epoch])
    assert best.state is not None
    # exact: the same seed trained for the best epoch's count gives these very weights
    _assert_same_weights(best.state, _weights_after(best_epoch))
    # a copy: training on after the best epoch did not change what was kept
    assert not all(torch.equal(best.state[k], v) for k, v in run.model.state_dict().items())


def test_best_weights_follow_the_validation_loss() -> None:
    run = healthy_run()
    best = BestWeights(run, lambda record: record.valid_loss)
    run_epochs(run, 4, on_epoch=[best])
    losses = [record.valid_loss for record in run.records]
    assert best.value == min(losses) and best.epoch == losses.index(min(losses)) + 1
    assert best.state is not None
    _assert_same_weights(best.state, _weights_after(best.epoch))


def test_best_weights_keep_nothing_when_no_epoch_has_a_finite_value() -> None:
    run = healthy_run()
    best = BestWeights(run, lambda record: math.nan)
    run_epochs(run, 2, on_epoch=[best])
    assert best.epoch is None and best.state is None and math.isnan(best.value)
