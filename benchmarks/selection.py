"""How good is the configuration a study chooses? Today's pipeline against the new default.

    python benchmarks/selection.py                 # 3 tasks, 7 study seeds each
    python benchmarks/selection.py --quick         # a smoke run: tiny tasks, 2 seeds
    python benchmarks/selection.py --seeds 3 --trials 8 --epochs 5   # a reduced run
    python benchmarks/selection.py --confirm 2,1 --seed-offset 7     # other study seeds

Pipelines, on the same task, search space and study seed:

(a) today's: a trial scores by its last epoch, one seed, no confirmation, the ASHA stopping
    rule; the best trial is the choice. On top of (b)'s search budget it gets the compute of
    (b)'s confirmation trials as extra trials (that compute over the mean compute of (b)'s
    searched trials), so the two spend about the same; ``compute_ratio`` says how close.
(b) the project's default: the spec leaves the score, stopping and confirmation at their
    defaults (``--confirm`` sets the confirmation); the confirmed choice
    (``sweeper.results.choice``) is the choice.

True quality of a configuration: the mean held-out loss over 5 fresh seeds (the same 5 for
every configuration), each trained on the task's training sequences for the spec's epochs
and scored on data no study saw: the test split of the real series, fresh sequences of
another data seed for the generated tasks. The reference of a task is the best true quality
among the ten best configurations (by searched value) of both pipelines' studies of that
task, and every configuration either chose. A choice's regret is its true quality minus the
reference. Per task: the median regret of each pipeline over the study seeds, and the median
of the per-seed ratio (a)/(b). Last lines: ``worst_regret_ratio R`` (the largest over tasks
of (b)'s median regret over (a)'s) and ``compute_ratio C`` ((b)'s total training compute
over (a)'s).

What a regret is made of, per task (medians over the study seeds): the search part, the best
true quality among a pipeline's k candidates (for (b) its confirmed configurations, for (a)
its k best trials by searched value, k the same) minus the reference, which no choice among
them can undo; and the selection part, the chosen one's true quality minus that best. The
same table shows (b) choosing by its confirmation seeds alone (``fresh-only``: the searched
trial's own value left out, since that value is what made it a candidate), from the same
studies, and ``best_possible_choice_worst_regret_ratio``: the worst ratio (b) would reach
if it chose the truly best of its candidates on every seed, a bound no choice rule beats.

Tasks: the adding problem and delayed recall (built in), and the yearly sunspot numbers
1700-2008 that statsmodels ships (``statsmodels.datasets.sunspots``; no download).
"""

from __future__ import annotations

import argparse
import dataclasses
import io
import json
import math
import sys
import tempfile
import time
from collections.abc import Callable
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np
import torch
from held_out import HeldOut
from measure import REPO, machine_line, median, print_table

sys.path.insert(0, str(REPO))

from sweeper.errors import SpecError
from sweeper.results.choice import confirmed_choice
from sweeper.seeds import derive_seed
from sweeper.spec.checks import build_spec_task
from sweeper.spec.loading import parse_spec
from sweeper.spec.sections import Spec
from sweeper.store.attrs import TrialInfo
from sweeper.sweep.confirmation import ranked_searched
from sweeper.sweep.launcher import run_sweep
from sweeper.sweep.progress import ProgressDisplay
from sweeper.sweep.study import load_existing
from sweeper.tasks.base import Task
from sweeper.tasks.registry import build_task
from sweeper.training.epoch_loop import run_epochs
from sweeper.training.model_plugin import section_model_builder
from sweeper.training.params import TrialParams
from sweeper.training.trial_run import TrialRun

TRUTH_SEEDS = 5
TOP = 10
TASKS: dict[str, str] = {
    "adding": 'kind = "adding"\nlength = {length}\ntrain_sequences = {train}\n'
    "valid_sequences = 128\n",
    "recall": 'kind = "recall"\nlength = {length}\ndelay = 4\nsymbols = 4\n'
    "train_sequences = {train}\nvalid_sequences = 128\n",
    "sunspots": 'kind = "series"\nfile = "sunspots.npz"\ncolumns = ["activity"]\nwindow = 24\n'
    "stride = 1\nvalid_fraction = 0.15\ntest_fraction = 0.15\n",
}
SPEC = """
[study]
name = "{name}"
trials = {trials}
seed = {seed}
storage = "{storage}"
{study}
[task]
{task}
[training]
epochs = {epochs}
threads = 1
cell = "gru"
batch = 32

[search]
hidden = {{ one_of = [8, 16, 32] }}
lr = {{ between = [0.001, 0.05], scale = "log" }}
clip = {{ between = [0.3, 5.0], scale = "log" }}
{tail}
"""


@dataclass(frozen=True)
class Setting:
    seeds: int
    trials: int  # the new default's search budget
    epochs: int
    train: int  # training sequences of the generated tasks
    length: int
    confirm: tuple[int, int] | None = None  # (b)'s [confirm] (configurations, seeds); None: default
    seed_offset: int = 0  # study seeds are offset + 1 ... offset + seeds


FULL = Setting(seeds=7, trials=12, epochs=8, train=384, length=20)
QUICK = Setting(seeds=2, trials=3, epochs=2, train=32, length=8)


def score_support() -> bool:
    """Whether this checkout knows ``study.score`` ((a) asks for the last epoch's)."""
    text = '[study]\nname = "probe"\nscore = "last_epoch"\n[task]\nkind = "adding"\n'
    try:
        parse_spec(text, "<probe>")
    except SpecError:
        return False
    return True


def default_score() -> str:
    text = '[study]\nname = "probe"\n[task]\nkind = "adding"\n'
    return str(getattr(parse_spec(text, "<probe>").study, "score", "last_epoch"))


def spec_text(
    task: str, pipeline: str, seed: int, setting: Setting, folder: Path, **extra: Any
) -> str:
    scores = score_support()
    if pipeline == "a":
        study = 'score = "last_epoch"\n' if scores else ""
        tail = '[stopping]\nrule = "asha"\n\n[confirm]\nconfigurations = 0\n'
    else:  # the project's defaults: no score, stopping or confirmation keys
        study = ""
        tail = ""
        if setting.confirm is not None:
            tail = "[confirm]\nconfigurations = {}\nseeds = {}\n".format(*setting.confirm)
    unroll = (
        "unroll = { one_of = [6, 12, 24] }"
        if task == "sunspots"
        else (
            f"unroll = {{ one_of = [{max(2, setting.length // 4)}, {setting.length // 2}, "
            f"{setting.length}] }}"
        )
    )
    name = f"{task}-{pipeline}-{seed}"
    return SPEC.format(
        name=name,
        trials=extra.get("trials", setting.trials),
        seed=seed,
        storage=(folder / f"{name}.db").as_posix(),
        study=study,
        task=TASKS[task].format(length=setting.length, train=setting.train),
        epochs=setting.epochs,
        tail=unroll + "\n" + tail,
    )


def sweep(text: str, folder: Path, name: str) -> tuple[Any, Spec]:
    path = folder / f"{name}.toml"
    path.write_text(text, encoding="utf-8")
    spec = parse_spec(text, str(path))
    run_sweep(spec, ProgressDisplay(io.StringIO()))
    return load_existing(spec.storage_location)


def compute_of(study: Any) -> float:
    return sum(TrialInfo.of(t).compute_seconds or 0.0 for t in study.get_trials(deepcopy=False))


def extra_trials(study: Any) -> int:
    """The confirmation's compute in searched trials of the same study (at their mean cost):
    what (a) gets on top of (b)'s budget."""
    trials = study.get_trials(deepcopy=False)
    searched = [
        TrialInfo.of(t).compute_seconds or 0.0
        for t in trials
        if not TrialInfo.of(t).is_confirmation
    ]
    confirming = sum(
        TrialInfo.of(t).compute_seconds or 0.0 for t in trials if TrialInfo.of(t).is_confirmation
    )
    mean = sum(searched) / len(searched) if searched else 0.0
    return round(confirming / mean) if mean > 0 else 0


def key_of(params: dict[str, Any]) -> str:
    return json.dumps(params, sort_keys=True)


@dataclass
class Truth:
    """True quality of configurations of one task, measured once per configuration."""

    spec: Spec
    task: Task
    epochs: int
    cache: dict[str, tuple[float, ...]]

    def losses(self, params: dict[str, Any]) -> tuple[float, ...]:
        key = key_of(params)
        if key not in self.cache:
            self.cache[key] = tuple(self._one(params, k) for k in range(TRUTH_SEEDS))
        return self.cache[key]

    def mean(self, params: dict[str, Any]) -> float:
        return float(np.mean(self.losses(params)))

    def _one(self, params: dict[str, Any], k: int) -> float:
        training = TrialParams.from_mapping({**self.spec.training.defaults, **params})
        build = section_model_builder(self.spec.task, self.spec.base_dir, self.spec.source)
        run = TrialRun(self.task, training, derive_seed("true-quality", k), build)
        end = run_epochs(run, self.epochs)
        return math.inf if end.how == "diverged" else run.records[-1].valid_loss


def truth_for(task: str, spec: Spec, folder: Path) -> Truth:
    studied = build_spec_task(spec)
    if task == "sunspots":
        held = studied.data("test")
    else:  # the same generator under another data seed: sequences no study saw
        table = {**spec.task.table(), "seed": 7919}
        held = build_task(table, folder, str(folder / "held.toml")).data("valid")
    return Truth(spec, HeldOut(studied, held), spec.training.epochs, {})


@dataclass
class Seeded:
    """One study seed of one task: both pipelines' choices and what they cost."""

    chosen_a: dict[str, Any]
    chosen_b: dict[str, Any]
    compute_a: float
    compute_b: float
    top: list[tuple[float, dict[str, Any]]]  # (searched value, params) of both studies
    tied: bool  # (b) said its top configurations cannot be told apart
    runner_up: dict[str, Any] | None  # (b)'s second confirmed configuration
    trials_a: int  # searched trials (a) ran
    candidates_b: list[dict[str, Any]]  # (b)'s confirmed configurations, best mean first
    fresh_b: dict[str, Any]  # (b)'s choice by its confirmation seeds alone
    candidates_a: list[dict[str, Any]]  # (a)'s best trials by searched value, as many


def one_seed(task: str, seed: int, setting: Setting, folder: Path) -> tuple[Seeded, Spec]:
    study_b, spec_b = sweep(spec_text(task, "b", seed, setting, folder), folder, f"{task}-b-{seed}")
    compute_b = compute_of(study_b)
    text_a = spec_text(
        task, "a", seed, setting, folder, trials=setting.trials + extra_trials(study_b)
    )
    study_a, spec_a = sweep(text_a, folder, f"{task}-a-{seed}")
    choice = confirmed_choice(study_b, spec_b)
    best_a = ranked_searched(study_a.get_trials(deepcopy=False), spec_a)[0]
    top = [
        (float(t.value), dict(t.params))
        for study, spec in ((study_a, spec_a), (study_b, spec_b))
        for t in ranked_searched(study.get_trials(deepcopy=False), spec)[:TOP]
    ]
    runner_up = dict(choice.candidates[1].params) if len(choice.candidates) > 1 else None
    candidates = [dict(c.params) for c in choice.candidates] or [dict(choice.params)]
    fresh = [c for c in choice.candidates if c.seeds > 1]
    sign = 1.0 if spec_b.study.better == "lower" else -1.0
    fresh_b = (
        dict(min(fresh, key=lambda c: (sign * float(np.mean(c.values[1:])), c.trial)).params)
        if fresh
        else dict(choice.params)
    )
    ranked_a = ranked_searched(study_a.get_trials(deepcopy=False), spec_a)
    seeded = Seeded(
        dict(best_a.params), dict(choice.params), compute_of(study_a), compute_b, top,
        bool(choice.tied_with), runner_up, len(study_a.get_trials(deepcopy=False)),
        candidates, fresh_b, [dict(t.params) for t in ranked_a[: len(candidates)]],
    )  # fmt: skip
    return seeded, spec_b


@dataclass
class TaskResult:
    name: str
    regret_a: list[float]
    regret_b: list[float]
    compute_a: float
    compute_b: float
    close: int  # seeds whose top two confirmed configurations are truly within a standard error
    close_flagged: int  # of those, the ones (b) said cannot be told apart
    trials_a: float  # mean trials of (a)
    search_a: list[float]  # best true quality among (a)'s candidates, minus the reference
    search_b: list[float]
    regret_fresh: list[float]  # (b) choosing by its confirmation seeds alone

    @property
    def median_a(self) -> float:
        return median(self.regret_a)

    @property
    def median_b(self) -> float:
        return median(self.regret_b)

    def median_ratio(self) -> float:
        ratios = [
            a / b if b > 0 else math.inf
            for a, b in zip(self.regret_a, self.regret_b, strict=True)
            if a > 0 or b > 0
        ]
        return median(ratios) if ratios else 1.0


def run_task(task: str, setting: Setting, folder: Path, say: Callable[[str], None]) -> TaskResult:
    seeded: list[Seeded] = []
    spec: Spec | None = None
    for seed in range(setting.seed_offset + 1, setting.seed_offset + setting.seeds + 1):
        started = time.perf_counter()
        one, spec = one_seed(task, seed, setting, folder)
        seeded.append(one)
        say(f"  {task} seed {seed}: sweeps {time.perf_counter() - started:.0f} s")
    assert spec is not None
    truth = truth_for(task, spec, folder)
    pooled = sorted((p for s in seeded for p in s.top), key=lambda item: item[0])
    pool = {key_of(params): params for _, params in pooled[:TOP]}
    for s in seeded:  # every configuration whose regret is reported
        for params in (s.chosen_a, s.chosen_b, s.fresh_b, *s.candidates_a, *s.candidates_b):
            pool.setdefault(key_of(params), params)
    started = time.perf_counter()
    reference = min(truth.mean(params) for params in pool.values())
    close = flagged = 0
    for s in seeded:
        if s.runner_up is None:
            continue
        first, second = truth.losses(s.chosen_b), truth.losses(s.runner_up)
        se = math.sqrt(np.var(first, ddof=1) / len(first) + np.var(second, ddof=1) / len(second))
        if abs(np.mean(first) - np.mean(second)) < se:
            close += 1
            flagged += s.tied
    seconds = time.perf_counter() - started
    say(f"  {task}: true quality of {len(truth.cache)} configurations, {seconds:.0f} s")

    def best_of(candidates: list[dict[str, Any]]) -> float:
        return min(truth.mean(params) for params in candidates) - reference

    return TaskResult(
        task,
        [truth.mean(s.chosen_a) - reference for s in seeded],
        [truth.mean(s.chosen_b) - reference for s in seeded],
        sum(s.compute_a for s in seeded),
        sum(s.compute_b for s in seeded),
        close,
        flagged,
        float(np.mean([s.trials_a for s in seeded])),
        [best_of(s.candidates_a) for s in seeded],
        [best_of(s.candidates_b) for s in seeded],
        [truth.mean(s.fresh_b) - reference for s in seeded],
    )


def _share(part: list[float], whole: list[float]) -> str:
    """``part``'s sum over ``whole``'s: how much of the regret over all seeds it makes."""
    total = sum(whole)
    return f"{sum(part) / total:.2f}" if total > 0 else "-"


def _minus(a: list[float], b: list[float]) -> list[float]:
    return [x - y for x, y in zip(a, b, strict=True)]


def write_sunspots(folder: Path) -> None:
    from statsmodels.datasets import sunspots  # shipped inside statsmodels: no download

    data = sunspots.load_pandas().data
    np.savez(
        folder / "sunspots.npz",
        year=data["YEAR"].to_numpy(),
        activity=data["SUNACTIVITY"].to_numpy(dtype=np.float64),
    )


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true", help="a smoke run on tiny tasks")
    parser.add_argument("--seeds", type=int, help="study seeds per task")
    parser.add_argument("--trials", type=int, help="the new default's search budget")
    parser.add_argument("--epochs", type=int, help="epochs per trial")
    parser.add_argument("--tasks", default=",".join(TASKS), help="comma-separated task names")
    parser.add_argument("--confirm", help="(b)'s confirmation as CONFIGURATIONS,SEEDS")
    parser.add_argument(
        "--seed-offset", type=int, default=0, help="study seeds start after this number"
    )
    parser.add_argument("--json", help="write every study seed's figures to this file")
    args = parser.parse_args()
    base = QUICK if args.quick else FULL
    setting = Setting(
        args.seeds or base.seeds, args.trials or base.trials, args.epochs or base.epochs,
        base.train, base.length,
        tuple(int(v) for v in args.confirm.split(",")) if args.confirm else None,  # type: ignore[arg-type]
        args.seed_offset,
    )  # fmt: skip
    torch.set_num_threads(1)
    print(machine_line())
    first = setting.seed_offset + 1
    print(
        f"setting: study seeds {first}-{first + setting.seeds - 1}, {setting.trials} searched "
        f"trials for (b), {setting.epochs} epochs, {TRUTH_SEEDS} seeds of true quality; "
        f"(b): the default score ({default_score()}); "
        f"(b)'s confirmation: {setting.confirm or 'the default'}"
    )
    results = []
    started = time.perf_counter()
    with tempfile.TemporaryDirectory() as tmp:
        folder = Path(tmp)
        write_sunspots(folder)
        for task in args.tasks.split(","):
            results.append(run_task(task, setting, folder, lambda line: print(line, flush=True)))
    rows = [
        [
            r.name, f"{r.median_a:.4g}", f"{r.median_b:.4g}", r.median_ratio(),
            f"{r.close_flagged}/{r.close}", r.compute_b / max(r.compute_a, 1e-9), r.trials_a,
        ]
        for r in results
    ]  # fmt: skip
    print_table(
        ["task", "median regret (a)", "median regret (b)", "median (a)/(b)",
         "close pairs flagged", "compute (b)/(a)", "trials (a)"],
        rows,
    )  # fmt: skip
    print()
    print("what the regret is made of (medians over the study seeds; search part: best true")
    print("quality among the pipeline's candidates minus the reference; selection part: the")
    print("chosen one's regret minus the search part)")
    parts = [
        [
            r.name,
            *(f"{median(v):.4g}" for v in (r.search_a, _minus(r.regret_a, r.search_a))),
            *(f"{median(v):.4g}" for v in (r.search_b, _minus(r.regret_b, r.search_b))),
            f"{median(r.regret_fresh):.4g}",
            f"{_share(r.search_a, r.regret_a)} / {_share(r.search_b, r.regret_b)}",
        ]
        for r in results
    ]
    print_table(
        ["task", "search (a)", "selection (a)", "search (b)", "selection (b)",
         "regret (b) fresh-only", "search's share of all regret (a) / (b)"],
        parts,
    )  # fmt: skip
    if args.json:
        Path(args.json).write_text(
            json.dumps([dataclasses.asdict(r) for r in results], indent=1), encoding="utf-8"
        )
    print(f"wall seconds: {time.perf_counter() - started:.0f}")
    worst = max(
        r.median_b / r.median_a if r.median_a > 0 else (0.0 if r.median_b == 0 else math.inf)
        for r in results
    )
    compute = sum(r.compute_b for r in results) / max(sum(r.compute_a for r in results), 1e-9)
    fresh = max(
        median(r.regret_fresh) / r.median_a
        if r.median_a > 0
        else (0.0 if median(r.regret_fresh) == 0 else math.inf)
        for r in results
    )
    # (b) choosing, on every seed, the truly best of its candidates: no rule does better
    oracle = max(median(r.search_b) / r.median_a if r.median_a > 0 else math.inf for r in results)
    print(f"fresh_only_worst_regret_ratio {fresh:.3f}")
    print(f"best_possible_choice_worst_regret_ratio {oracle:.3f}")
    print(f"worst_regret_ratio {worst:.3f}")
    print(f"compute_ratio {compute:.3f}")


if __name__ == "__main__":
    main()
