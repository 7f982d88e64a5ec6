"""Per-trial cost outside training as the study grows: 100, 1,000 and 5,000 trials already in it.

    python benchmarks/study_growth.py              # 100 / 1,000 / 5,000 stored trials, 8 new each
    python benchmarks/study_growth.py --quick      # 100 / 1,000 stored trials, 3 new each
    python benchmarks/study_growth.py --profile    # cProfile of the worker loop at the largest size

The stored trials (complete, with parameters, three intermediate values, the attributes a real
trial leaves and three telemetry rows each) are bulk-inserted into optuna's and sweeper's
tables in one transaction; going through optuna's storage one trial at a time would take
minutes. The new trials call a trivial objective plugin (microseconds of work) that reports
three epochs, so all their time is sweeper's and optuna's: drawing parameters (TPE), the
storage writes, the pruner's median and the launcher's watch loop. Per-trial time is the gap
between consecutive completions, so start-up is left out; it is shown on its own.
"""

from __future__ import annotations

import argparse
import cProfile
import datetime as dt
import io
import itertools
import json
import pstats
import random
import sys
import tempfile
import time
from pathlib import Path

import optuna
import sqlalchemy as sa
from measure import machine_line, median, print_table
from optuna.distributions import distribution_to_json
from optuna.storages._rdb import models  # the trial tables, for a bulk insert
from optuna.trial import TrialState

from sweeper.spec.loading import parse_spec
from sweeper.spec.sections import Spec
from sweeper.store.connect import engine_of
from sweeper.store.tables import EPOCHS as TELEMETRY
from sweeper.sweep.coordinator import Coordinator
from sweeper.sweep.launcher import open_for_launch, run_sweep
from sweeper.sweep.progress import ProgressDisplay
from sweeper.sweep.study import top_up
from sweeper.sweep.workers import work

TARGET_MS = 250.0
EPOCHS = 3
OBJECTIVE = """
def objective(params, report):
    value = (params["x"] - 0.3) ** 2 + (params["y"] - 0.6) ** 2
    for epoch in range(1, 4):
        report(epoch, value * (1 + 1 / epoch))
    return value
"""
SPEC = """
[study]
name = "growth"
trials = {trials}
seed = 3
sampler = "{sampler}"
[confirm]
configurations = 0  # the search alone is measured

[task]
kind = "objective"
function = "trivial:objective"
path = "."
[search]
x = {{ between = [0.0, 1.0] }}
y = {{ between = [0.0, 1.0] }}
[stopping]
rule = "median"
min_epochs = 1
"""


def fill(engine: sa.Engine, study_id: int, spec: Spec, count: int) -> None:
    """Insert ``count`` finished trials and their telemetry rows in one transaction."""
    dists = {name: entry.distribution() for name, entry in spec.search.items()}
    rng = random.Random(count)
    now = dt.datetime.now()
    rows: dict[str, list[dict]] = {name: [] for name in ("t", "p", "v", "i", "u", "e")}
    for n in range(count):
        trial_id = n + 1
        start = now - dt.timedelta(seconds=2 * (count - n))
        rows["t"].append(
            dict(trial_id=trial_id, number=n, study_id=study_id, state=TrialState.COMPLETE,
                 datetime_start=start, datetime_complete=start + dt.timedelta(seconds=1))
        )  # fmt: skip
        params = {name: rng.random() for name in dists}
        for name, value in params.items():
            rows["p"].append(
                dict(trial_id=trial_id, param_name=name, param_value=value,
                     distribution_json=distribution_to_json(dists[name]))
            )  # fmt: skip
        value = (params["x"] - 0.3) ** 2 + (params["y"] - 0.6) ** 2
        finite = models.TrialValueModel.TrialValueType.FINITE
        rows["v"].append(dict(trial_id=trial_id, objective=0, value=value, value_type=finite))
        attrs = {"seed": n, "worker": "bench:0:w0", "epochs": EPOCHS, "end_reason": "completed",
                 "wall_seconds": 1.0, "compute_seconds": 1.0}  # fmt: skip
        for key, attr in attrs.items():
            rows["u"].append(dict(trial_id=trial_id, key=key, value_json=json.dumps(attr)))
        for epoch in range(1, EPOCHS + 1):
            step_value = value * (1 + 1 / epoch)
            kind = models.TrialIntermediateValueModel.TrialIntermediateValueType.FINITE
            rows["i"].append(
                dict(trial_id=trial_id, step=epoch, intermediate_value=step_value,
                     intermediate_value_type=kind)
            )  # fmt: skip
            rows["e"].append(dict(study_name=spec.study.name, trial_number=n, epoch=epoch,
                                  valid_loss=step_value, steps=0, nonfinite_steps=0))  # fmt: skip
    tables = {
        "t": models.TrialModel.__table__,
        "p": models.TrialParamModel.__table__,
        "v": models.TrialValueModel.__table__,
        "i": models.TrialIntermediateValueModel.__table__,
        "u": models.TrialUserAttributeModel.__table__,
        "e": TELEMETRY,
    }
    with engine.begin() as connection:
        for key, table in tables.items():
            connection.execute(sa.insert(table), rows[key])


def build_study(folder: Path, stored: int, sampler: str) -> Spec:
    """A sweeper study holding ``stored`` finished trials; returns its spec."""
    text = SPEC.format(trials=stored, sampler=sampler)
    spec_path = folder / f"growth{stored}.toml"
    spec_path.write_text(text)
    spec = parse_spec(text, str(spec_path)).with_overrides(storage=str(folder / f"g{stored}.db"))
    study = open_for_launch(spec)
    fill(engine_of(study), study._study_id, spec, stored)
    return spec


def run_new_trials(spec: Spec, new: int) -> tuple[float, float]:
    """Run ``new`` more trials through run_sweep.

    Returns the median gap between their completions, and the time from the launch to the
    first completion (start-up: the launcher's and the worker's reads of the study).
    """
    launched = dt.datetime.now()
    budget = spec.study.trials + new
    run_sweep(spec.with_overrides(trials=budget), ProgressDisplay(stream=io.StringIO()))
    storage = f"sqlite:///{spec.storage_location}"
    study = optuna.load_study(study_name=spec.study.name, storage=storage)
    ends = sorted(t.datetime_complete for t in study.trials[spec.study.trials :])
    gap = median([(b - a).total_seconds() for a, b in itertools.pairwise(ends)])
    return gap, (ends[0] - launched).total_seconds()


def coordinator_step_seconds(spec: Spec) -> float:
    """One pass of the launcher's watch loop (it runs every 0.5 s beside the worker)."""
    coordinator = Coordinator(open_for_launch(spec), spec, ProgressDisplay(io.StringIO()))
    coordinator.step()  # the first pass fills optuna's trial cache
    started = time.perf_counter()
    for _ in range(3):
        coordinator.step()
    return (time.perf_counter() - started) / 3


def profile_worker(spec: Spec, new: int) -> None:
    """cProfile of the worker loop alone (no launcher) over ``new`` queued trials."""
    spec = spec.with_overrides(trials=spec.study.trials + new)
    top_up(open_for_launch(spec), spec)
    profiler = cProfile.Profile()
    profiler.runcall(work, spec.storage_location, spec.study.name, 0, 1)
    stats = pstats.Stats(profiler, stream=sys.stdout).sort_stats("cumulative")
    stats.print_stats(r"sweeper/|optuna/(samplers|pruners|storages|study|trial)", 25)


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true", help="100 and 1,000 stored, 3 new")
    parser.add_argument("--sampler", default="tpe", choices=("tpe", "random"))
    parser.add_argument("--profile", action="store_true", help="profile the largest size")
    args = parser.parse_args(argv)
    sizes, new = ((100, 1000), 3) if args.quick else ((100, 1000, 5000), 8)
    optuna.logging.set_verbosity(optuna.logging.WARNING)
    rows = []
    with tempfile.TemporaryDirectory() as scratch:
        folder = Path(scratch)
        (folder / "trivial.py").write_text(OBJECTIVE)
        for stored in sizes:
            started = time.perf_counter()
            spec = build_study(folder, stored, args.sampler)
            built = time.perf_counter() - started
            step = coordinator_step_seconds(spec)
            gap, first = run_new_trials(spec, new)
            rows.append((stored, 1000 * gap, 1000 * step, first, built))
            if args.profile and stored == sizes[-1]:
                profile_worker(spec.with_overrides(trials=stored + new), new)
    print(machine_line())
    print(f"sampler {args.sampler}, median pruner, {new} new trials of a trivial objective")
    headers = ("stored trials", "per trial ms", "watch-loop pass ms", "launch to 1st trial s")
    print_table((*headers, "build s"), rows)
    print()
    stored, per_trial = rows[-1][0], rows[-1][1]
    print(f"per_trial_ms_at_{stored} {per_trial:.1f} (target < {TARGET_MS:g} at 5000)")
    return 0


if __name__ == "__main__":
    sys.exit(main())
