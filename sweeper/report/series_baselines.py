"""A series study's forecasting baselines in the data's units, for the first section.

The summary builds the spec's task again (reading its data file) to score persistence,
seasonal naive, drift and Holt-Winters on exactly the validation rows the trials were scored
on. The chosen configuration's validation MSE comes from its scaled loss where that
conversion is exact (``forecast_scores.data_mse``: one target column, no log).
"""

from __future__ import annotations

import math

from sweeper.errors import SweeperError
from sweeper.report.collect import StudyTables
from sweeper.report.sections_choice import Chosen, NamedBaseline
from sweeper.spec.checks import build_spec_task
from sweeper.spec.sections import spec_from_text
from sweeper.tasks import forecast_scores

MEASURE = "valid MSE, data units"


def series_baselines(tables: StudyTables, chosen: Chosen | None) -> list[NamedBaseline]:
    """The named baselines of a forecasting study; empty for any other task, or when its
    data file can no longer be read (the page then keeps the stored scaled baseline)."""
    summary = tables.summary
    if summary.task != "series" or not summary.spec_text:
        return []
    try:
        spec = spec_from_text(summary.spec_text, summary.spec_source or "<stored spec>")
        task = build_spec_task(spec)
        found = forecast_scores.summary_baselines(task).get("valid")
    except (SweeperError, OSError):
        return []
    if found is None:
        return []
    mine = _chosen_mse(task, summary.objective, chosen)
    rows = []
    for name in forecast_scores.NAMES:
        scores = found.scores.get(name)
        if scores is None:
            continue
        text = f"MAE {scores.mae:.4g}, MASE {scores.mase:.3g} on {found.rows} rows"
        rows.append(NamedBaseline(name, scores.mse, MEASURE, text, chosen_value=mine))
    return rows


def _chosen_mse(task: object, objective: str, chosen: Chosen | None) -> float:
    if chosen is None or objective != "valid_loss" or not math.isfinite(chosen.value):
        return math.nan
    value = forecast_scores.data_mse(task, chosen.value)  # type: ignore[arg-type]
    return math.nan if value is None else value
