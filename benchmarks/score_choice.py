"""Which score picks the better configuration, and which stopping schedule lets enough finish.

    python benchmarks/score_choice.py           # 3 tasks x 5 study seeds (a few minutes)
    python benchmarks/score_choice.py --quick   # a smoke run: tiny tasks, 2 seeds
    python benchmarks/score_choice.py --seeds 7

Scores. For each task and study seed, a random search trains every configuration for every
epoch and keeps its validation curve. Each score kind (``last_epoch``, ``best_epoch``,
``recent_mean`` of the last 3) then picks a configuration from the same curves: random
search draws the same trials whatever the score, so only the choice differs. A pick's true
quality is the mean held-out loss of its configuration retrained with fresh seeds, read at
the epoch a final fit would train for (the best epoch for ``best_epoch``, the last one
otherwise), on data no trial saw: a fresh sample of the generated tasks, the held-out tail of
the series. Lower is better; the ratio of a score is its median true quality over
``last_epoch``'s.

Tasks: adding (Hochreiter & Schmidhuber 1997), delayed recall (built in), and yearly sunspot
numbers 1700-2008 (``statsmodels.datasets.sunspots``, from the statsmodels package).

Schedules. The same recorded curves are replayed, in trial order, through optuna's ASHA
pruner under the schedule sweeper fits to the budget, under the fixed schedule it used before
(ASHA from epoch 1, reduction 3), and without stopping; each pick (best epoch, among the
trials that ran every epoch) is scored as above. A synthetic part counts finishers over
budgets and epochs on random curves, where real training would cost too much.
"""

from __future__ import annotations

import argparse
import math
import random
import statistics
import sys
import tempfile
import time
from collections.abc import Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import optuna
import torch
from held_out import HeldOut
from measure import REPO, machine_line, median, print_table

sys.path.insert(0, str(REPO))

from sweeper.seeds import trial_seed
from sweeper.spec.schedule import Schedule, choose_schedule, finishers_needed
from sweeper.spec.sections import SCORES, StoppingSection, StudySection
from sweeper.tasks.base import Task
from sweeper.tasks.registry import build_task
from sweeper.training.epoch_loop import run_epochs
from sweeper.training.params import TrialParams
from sweeper.training.score import score_curve
from sweeper.training.trial_run import TrialRun

RECENT = 3
FRESH_SEED = 10_000  # fresh training seeds start here, far from the trials' own


@dataclass(frozen=True)
class Setting:
    seeds: int
    trials: int
    epochs: int
    fresh: int  # fresh seeds per true-quality measurement
    scale: int  # sequences per split, relative


FULL = Setting(seeds=5, trials=24, epochs=8, fresh=3, scale=2)
QUICK = Setting(seeds=2, trials=6, epochs=4, fresh=2, scale=1)


def generated(kind: str, scale: int, **options: Any) -> tuple[Task, Task]:
    table = {"kind": kind, "train_sequences": 64 * scale, "valid_sequences": 32 * scale}
    task = build_task({**table, **options}, Path.cwd(), "<benchmark>")
    fresh = build_task(
        {**table, **options, "seed": 99, "valid_sequences": 128 * scale}, Path.cwd(), "<benchmark>"
    )
    return task, HeldOut(task, fresh.data("valid"))


def sunspots(folder: Path) -> tuple[Task, Task]:
    import statsmodels.api as sm

    data = sm.datasets.sunspots.load_pandas().data
    path = folder / "sunspots.csv"
    data.to_csv(path, index=False)
    table = {
        "kind": "series",
        "file": path.name,
        "columns": ["SUNACTIVITY"],
        "target": "SUNACTIVITY",
        "window": 24,
        "stride": 1,
        "valid_fraction": 0.2,
        "test_fraction": 0.2,
    }
    task = build_task(table, folder, "<benchmark>")
    return task, HeldOut(task, task.data("test"))


def tasks(setting: Setting, folder: Path) -> dict[str, tuple[Task, Task]]:
    scale = setting.scale
    return {
        "adding": generated("adding", scale, length=20),
        "recall": generated("recall", scale, length=16, delay=4, symbols=4),
        "sunspots": sunspots(folder),
    }


def draw(rng: random.Random, length: int) -> TrialParams:
    return TrialParams.from_mapping(
        {
            "cell": "gru",
            "batch": 16,
            "optimizer": "adam",
            "unroll": rng.randint(2, length),
            "hidden": rng.choice([8, 16, 32]),
            "lr": math.exp(rng.uniform(math.log(3e-4), math.log(0.1))),
            "clip": math.exp(rng.uniform(math.log(0.1), math.log(10.0))),
        }
    )


def curve(task: Task, params: TrialParams, seed: int, epochs: int) -> list[float]:
    """Validation loss after each epoch (non-finite once the run diverges)."""
    run = TrialRun(task, params, seed)
    run_epochs(run, epochs)
    values = [record.valid_loss for record in run.records]
    return values + [math.inf] * (epochs - len(values))


@dataclass
class Study:
    params: list[TrialParams]
    curves: list[list[float]]


def search(task: Task, seed: int, setting: Setting) -> Study:
    rng = random.Random(seed)
    params = [draw(rng, task.length) for _ in range(setting.trials)]
    curves = [curve(task, p, trial_seed(seed, i), setting.epochs) for i, p in enumerate(params)]
    return Study(params, curves)


def pick(curves: Sequence[Sequence[float]], how: str, among: Sequence[int]) -> tuple[int, int]:
    """(trial, score epoch) of the best score among trials ``among``."""
    best: tuple[float, int, int] | None = None
    for trial in among:
        score = score_curve(curves[trial], how, "minimize", RECENT)
        value = score.value if math.isfinite(score.value) else math.inf
        if best is None or value < best[0]:
            best = (value, trial, score.epoch)
    assert best is not None
    return best[1], best[2]


class Truth:
    """True quality of a configuration at an epoch: mean held-out loss over fresh seeds."""

    def __init__(self, held_out: Task, study: Study, setting: Setting) -> None:
        self.held_out, self.study, self.setting = held_out, study, setting
        self._curves: dict[int, list[list[float]]] = {}

    def __call__(self, trial: int, epoch: int) -> float:
        if trial not in self._curves:
            params, epochs = self.study.params[trial], self.setting.epochs
            seeds = range(FRESH_SEED, FRESH_SEED + self.setting.fresh)
            self._curves[trial] = [curve(self.held_out, params, s, epochs) for s in seeds]
        values = [c[epoch - 1] for c in self._curves[trial]]
        return statistics.fmean(values) if all(map(math.isfinite, values)) else math.inf


def replay(curves: Sequence[Sequence[float]], schedule: Schedule, epochs: int) -> list[int]:
    """The trials that run every epoch when ``curves`` meet ASHA under ``schedule``."""
    if schedule.rule == "none":
        return list(range(len(curves)))
    optuna.logging.set_verbosity(optuna.logging.WARNING)
    pruner = optuna.pruners.SuccessiveHalvingPruner(
        min_resource=schedule.min_epochs, reduction_factor=schedule.reduction
    )
    study = optuna.create_study(pruner=pruner)
    finished = []
    for number, values in enumerate(curves):
        trial = study.ask()
        for epoch, value in enumerate(values, start=1):
            trial.report(value if math.isfinite(value) else 1e30, epoch)
            if schedule.min_epochs <= epoch < epochs and trial.should_prune():
                study.tell(trial, state=optuna.trial.TrialState.PRUNED)
                break
        else:
            study.tell(trial, values[-1] if math.isfinite(values[-1]) else 1e30)
            finished.append(number)
    return finished


SCHEDULES = ("fitted", "before", "none")


def schedules(setting: Setting) -> dict[str, Schedule]:
    before = StoppingSection(rule="asha", min_epochs=1, reduction=3)
    return {
        "fitted": choose_schedule(StoppingSection(), setting.trials, setting.epochs),
        "before": choose_schedule(before, setting.trials, setting.epochs),
        "none": choose_schedule(StoppingSection(rule="none"), setting.trials, setting.epochs),
    }


@dataclass
class Outcome:
    quality: dict[str, float]  # score kind -> true quality of its pick
    finishers: dict[str, int]  # schedule -> trials that ran every epoch
    schedule_quality: dict[str, float]  # schedule -> true quality of its best-epoch pick


def one_study(task: Task, held_out: Task, seed: int, setting: Setting) -> Outcome:
    study = search(task, seed, setting)
    truth = Truth(held_out, study, setting)
    everyone = range(setting.trials)
    quality = {how: truth(*pick(study.curves, how, everyone)) for how in SCORES}
    finishers, schedule_quality = {}, {}
    for name, schedule in schedules(setting).items():
        done = replay(study.curves, schedule, setting.epochs)
        finishers[name] = len(done)
        schedule_quality[name] = truth(*pick(study.curves, "best_epoch", done))
    return Outcome(quality, finishers, schedule_quality)


def synthetic_finishers(budget: int, epochs: int, seed: int) -> int:
    """Finishers under the fitted schedule for curves q + 1/epoch + noise (q uniform)."""
    rng = random.Random(seed)
    curves = []
    for _ in range(budget):
        quality = rng.random()
        curves.append([quality + 1 / e + rng.gauss(0, 0.05) for e in range(1, epochs + 1)])
    return len(replay(curves, choose_schedule(StoppingSection(), budget, epochs), epochs))


def ratio(values: Sequence[float], base: Sequence[float]) -> float:
    return median([v / b for v, b in zip(values, base, strict=True) if b > 0])


def mean_ratio(values: Sequence[float], base: Sequence[float]) -> float:
    """Geometric mean of value / base over study seeds (a diverged pick counts as 10x)."""
    logs = [math.log(min(v / b, 10.0)) for v, b in zip(values, base, strict=True) if b > 0]
    return math.exp(statistics.fmean(logs))


def record(how: str, outcome: Outcome) -> str:
    """Wins, ties and losses of ``how`` against ``last_epoch`` are counted from these."""
    mine, last = outcome.quality[how], outcome.quality["last_epoch"]
    return "W" if mine < last else ("T" if mine == last else "L")


def report_scores(results: dict[str, list[Outcome]]) -> dict[str, float]:
    print("\nscores: true quality (held-out loss) of each score's pick, per study seed")
    for name, outcomes in results.items():
        cells = [" ".join(f"{o.quality[how]:.4g}" for o in outcomes) for how in SCORES]
        print(f"  {name}: " + "; ".join(f"{how} {c}" for how, c in zip(SCORES, cells, strict=True)))
    print("\nmedians over study seeds; ratios to last_epoch: median and geometric mean; W/T/L")
    rows, means = [], {how: [] for how in SCORES}
    for name, outcomes in results.items():
        last = [o.quality["last_epoch"] for o in outcomes]
        row: list[object] = [name]
        row += [f"{median([o.quality[how] for o in outcomes]):.4g}" for how in SCORES]
        for how in ("best_epoch", "recent_mean"):
            mine = [o.quality[how] for o in outcomes]
            means[how].append(mean_ratio(mine, last))
            tally = [record(how, o) for o in outcomes]
            counts = "/".join(str(tally.count(k)) for k in "WTL")
            row += [ratio(mine, last), means[how][-1], counts]
        rows.append(row)
    headers = ["task", *SCORES, "best med", "best gmean", "best W/T/L"]
    headers += ["recent med", "recent gmean", "recent W/T/L"]
    print_table(headers, rows)
    return {how: max(values) for how, values in means.items() if values} | {"last_epoch": 1.0}


def report_schedules(results: dict[str, list[Outcome]], setting: Setting) -> None:
    plans = schedules(setting)
    print(
        f"\nschedules for {setting.trials} trials x {setting.epochs} epochs "
        f"(at least {finishers_needed(setting.trials)} should finish)"
    )
    for name, plan in plans.items():
        print(f"  {name}: {plan.rule} from epoch {plan.min_epochs}, reduction {plan.reduction}")
    rows = []
    for name, outcomes in results.items():
        none = [o.schedule_quality["none"] for o in outcomes]
        row: list[object] = [name]
        for plan in SCHEDULES:
            row.append(median([o.finishers[plan] for o in outcomes]))
        for plan in SCHEDULES[:2]:
            row.append(ratio([o.schedule_quality[plan] for o in outcomes], none))
        rows.append(row)
    print_table(
        [
            "task",
            "finish fitted",
            "finish before",
            "finish none",
            "quality fitted/none",
            "quality before/none",
        ],
        rows,
    )


def report_synthetic(quick: bool) -> None:
    cases = (
        [(12, 4), (24, 6)]
        if quick
        else [(16, 5), (20, 5), (24, 5), (30, 10), (40, 8), (60, 9), (100, 27), (200, 20)]
    )
    seeds = 3 if quick else 10
    print(
        f"\nsynthetic curves: trials that run every epoch under the fitted schedule ({seeds} seeds)"
    )
    rows = []
    shortfall = 0
    for budget, epochs in cases:
        plan = choose_schedule(StoppingSection(), budget, epochs)
        counts = [synthetic_finishers(budget, epochs, s) for s in range(seeds)]
        need = finishers_needed(budget)
        shortfall += sum(c < need for c in counts)
        rows.append(
            [
                budget,
                epochs,
                f"{plan.rule} {plan.min_epochs}/{plan.reduction}",
                need,
                min(counts),
                median(counts),
            ]
        )
    print_table(
        ["trials", "epochs", "schedule first/reduction", "wanted", "fewest", "median"], rows
    )
    print(f"short_of_wanted {shortfall}/{seeds * len(cases)}")


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true")
    parser.add_argument("--seeds", type=int)
    args = parser.parse_args()
    setting = QUICK if args.quick else FULL
    if args.seeds:
        setting = Setting(args.seeds, setting.trials, setting.epochs, setting.fresh, setting.scale)
    torch.set_num_threads(1)
    print(machine_line())
    print(
        f"{setting.trials} random trials x {setting.epochs} epochs, {setting.seeds} study seeds, "
        f"true quality over {setting.fresh} fresh seeds"
    )
    started = time.perf_counter()
    with tempfile.TemporaryDirectory() as folder:
        results = {
            name: [one_study(task, held, seed, setting) for seed in range(setting.seeds)]
            for name, (task, held) in tasks(setting, Path(folder)).items()
        }
    worst = report_scores(results)
    report_schedules(results, setting)
    report_synthetic(args.quick)
    print(f"\nseconds {time.perf_counter() - started:.0f}")
    for how in SCORES:
        print(f"worst_ratio_{how}_over_last {worst[how]:.3f}")  # the worst task's geometric mean
    print(f"chosen_by_measurement {min(SCORES, key=lambda how: (worst[how], how))}")
    print(f"default_score {StudySection.score}")


if __name__ == "__main__":
    main()
