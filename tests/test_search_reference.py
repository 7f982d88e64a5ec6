"""The default sampler against random search on published test functions, through sweeper.

Each study is an objective-plugin sweep run by ``run_sweep`` in this process with one worker,
so the samplers see the same trials a user's study would. The functions below are written
from their published definitions and checked at their published minima first.
"""

from __future__ import annotations

import io
import math
import statistics
from pathlib import Path

import pytest

from sweeper.spec.loading import parse_spec
from sweeper.sweep.launcher import run_sweep
from sweeper.sweep.progress import ProgressDisplay
from sweeper.sweep.study import load_existing

REPO = Path(__file__).resolve().parents[1]
SEEDS = range(5)
TRIALS = 100
# Dixon & Szego 1978 (eds.), Towards Global Optimisation 2: the Branin function's minimum.
BRANIN_MINIMUM = 0.397887
# Dixon & Szego 1978: the six-dimensional Hartmann function's minimum.
HARTMANN6_MINIMUM = -3.32237
HARTMANN6_ALPHA = (1.0, 1.2, 3.0, 3.2)
HARTMANN6_A = (
    (10, 3, 17, 3.5, 1.7, 8),
    (0.05, 10, 17, 0.1, 8, 14),
    (3, 3.5, 1.7, 10, 17, 8),
    (17, 8, 0.05, 10, 0.1, 14),
)
HARTMANN6_P = (
    (1312, 1696, 5569, 124, 8283, 5886),
    (2329, 4135, 8307, 3736, 1004, 9991),
    (2348, 1451, 3522, 2883, 3047, 6650),
    (4047, 8828, 8732, 5743, 1091, 381),
)


def branin_value(x1: float, x2: float) -> float:
    """Branin (Dixon & Szego 1978) on x1 in [-5, 10], x2 in [0, 15]."""
    b, c, t = 5.1 / (4 * math.pi**2), 5 / math.pi, 1 / (8 * math.pi)
    return (x2 - b * x1**2 + c * x1 - 6) ** 2 + 10 * (1 - t) * math.cos(x1) + 10


def hartmann6_value(x: list[float]) -> float:
    """Hartmann-6 (Dixon & Szego 1978) on [0, 1]^6."""
    total = 0.0
    for alpha, a_row, p_row in zip(HARTMANN6_ALPHA, HARTMANN6_A, HARTMANN6_P, strict=True):
        inner = sum(a * (xj - p / 1e4) ** 2 for a, xj, p in zip(a_row, x, p_row, strict=True))
        total += alpha * math.exp(-inner)
    return -total


def branin(params: dict, report: object) -> float:
    return branin_value(params["x1"], params["x2"])


def hartmann6(params: dict, report: object) -> float:
    return hartmann6_value([params[f"x{j}"] for j in range(1, 7)])


def test_the_functions_take_their_published_minima() -> None:
    # minimisers as published with the functions (Dixon & Szego 1978)
    for x1, x2 in ((-math.pi, 12.275), (math.pi, 2.275), (9.42478, 2.475)):
        assert branin_value(x1, x2) == pytest.approx(BRANIN_MINIMUM, abs=1e-5)
    best = [0.20169, 0.150011, 0.476874, 0.275332, 0.311652, 0.6573]
    assert hartmann6_value(best) == pytest.approx(HARTMANN6_MINIMUM, abs=1e-4)
    # and away from them: by hand, Branin(0, 0) = 36 + 10 (1 - 1/(8 pi)) + 10 = 55.6;
    # Hartmann-6 at the centre of the cube is -0.505 (hartmann6_value)
    assert branin_value(0.0, 0.0) > 50 and hartmann6_value([0.5] * 6) > -1.0


def _spec_text(function: str, space: str, sampler: str, seed: int, folder: Path) -> str:
    return (
        f'[study]\nname = "{function}-{sampler}-{seed}"\ntrials = {TRIALS}\nseed = {seed}\n'
        f'sampler = "{sampler}"\nstorage = "{(folder / f"{sampler}-{seed}.db").as_posix()}"\n'
        "[confirm]\nconfigurations = 0\n"
        f'[task]\nkind = "objective"\nfunction = "tests.test_search_reference:{function}"\n'
        f'path = "{REPO.as_posix()}"\n[search]\n{space}'
    )


def _best_values(function: str, space: str, sampler: str, folder: Path) -> list[float]:
    best = []
    for seed in SEEDS:
        spec = parse_spec(_spec_text(function, space, sampler, seed, folder), "<reference>")
        run_sweep(spec, ProgressDisplay(io.StringIO()))
        study, _ = load_existing(spec.storage_location)
        assert len(study.trials) == TRIALS
        best.append(study.best_value)
    return best


BRANIN_SPACE = "x1 = { between = [-5.0, 10.0] }\nx2 = { between = [0.0, 15.0] }\n"
HARTMANN6_SPACE = "".join(f"x{j} = {{ between = [0.0, 1.0] }}\n" for j in range(1, 7))


@pytest.mark.slow  # whole reference sweeps: thousands of trials
def test_tpe_gets_near_the_branin_minimum_and_beats_random_search(tmp_path: Path) -> None:
    tpe = _best_values("branin", BRANIN_SPACE, "tpe", tmp_path)
    random = _best_values("branin", BRANIN_SPACE, "random", tmp_path)
    # "close": within 0.05 of the minimum, about 0.1% of Branin's range over the box (its
    # value at (0, 0) alone is 55.6); our bar, common practice, no published figure
    close = [value - BRANIN_MINIMUM <= 0.05 for value in tpe]
    assert sum(close) > len(close) / 2, (tpe, random)
    assert statistics.median(tpe) < statistics.median(random), (tpe, random)


@pytest.mark.slow  # whole reference sweeps: thousands of trials
def test_tpe_beats_random_search_on_hartmann6(tmp_path: Path) -> None:
    tpe = _best_values("hartmann6", HARTMANN6_SPACE, "tpe", tmp_path)
    random = _best_values("hartmann6", HARTMANN6_SPACE, "random", tmp_path)
    assert min(tpe) >= HARTMANN6_MINIMUM - 1e-6  # no study can beat the true minimum
    # six dimensions in 100 trials: our bar (common practice, no published figure) is the
    # median within 0.2 of the minimum, which still admits the basin of Hartmann-6's
    # runner-up local minimum, -3.2032 (derived: scipy.optimize.minimize on hartmann6_value
    # started from the fourth row of P), but not the centre of the cube (-0.505)
    assert statistics.median(tpe) - HARTMANN6_MINIMUM <= 0.2, tpe
    assert statistics.median(tpe) < statistics.median(random), (tpe, random)
