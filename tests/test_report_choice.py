"""The summary's first section shows the choice the sweep stored: a configuration's mean and
spread over its seeds, and the runners-up it cannot be told apart from."""

from __future__ import annotations

import re
from pathlib import Path

from sweeper.report.collect import read_study
from sweeper.report.sections_choice import chosen_from_trials
from sweeper.store.attrs import StudyInfo
from sweeper.sweep.study import load_existing
from tests.conftest import invoke

REPO = Path(__file__).resolve().parents[1]


CALLS = [0]


def noisy_bowl(params: dict, report) -> float:
    """A bowl around x = 0.4 whose value moves from one run to the next, as training runs'
    do (one worker runs in-process, so the count spans the sweep)."""
    CALLS[0] += 1
    value = (params["x"] - 0.4) ** 2 + 0.01 * (CALLS[0] % 3)
    report(1, value)
    return value


SPEC = f"""
[study]
name = "bowl"
trials = 6
seed = 2
sampler = "random"

[task]
kind = "objective"
function = "tests.test_report_choice:noisy_bowl"
path = "{REPO.as_posix()}"

[search]
x = {{ between = [0.0, 1.0] }}

[stopping]
rule = "none"

[confirm]
configurations = 2
seeds = 2
"""


def test_the_page_leads_with_the_stored_confirmed_choice(in_tmp: Path) -> None:
    (in_tmp / "bowl.toml").write_text(SPEC)
    result = invoke("run", "bowl.toml")
    assert result.exit_code == 0, result.output
    study, _ = load_existing("runs/bowl.db")
    stored = StudyInfo.of(study).choice
    assert stored is not None and stored["confirmed"] and stored["seeds"] == 3
    chosen = chosen_from_trials(read_study("runs/bowl.db"))
    assert chosen is not None and chosen.confirmed
    assert (chosen.trial, chosen.value, chosen.seeds) == (stored["trial"], stored["mean"], 3)
    assert chosen.spread == stored["std"] and chosen.spread > 0
    page = (in_tmp / "runs" / "bowl.html").read_text()
    head = page[page.index('id="choice"') :]
    assert re.search(r'class="big">[0-9.e-]+ ± [0-9.e-]+<', head)
    assert f"trial #{stored['trial']}" in head
    assert "Confirmed: the mean of 3 training runs with different seeds." in head
    # the budget counts the searched trials only: 6, not 6 + 2 x 2 confirmation trials
    assert "6 of a budget of 6 settled (failures and confirmation trials do not count)" in head
