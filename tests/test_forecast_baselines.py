"""Forecasting baselines, MASE and the Holt-Winters reference, each against its source."""

from __future__ import annotations

import warnings

import numpy as np
import pytest
from statsmodels.datasets import co2
from statsmodels.tsa.holtwinters import ExponentialSmoothing

from sweeper.tasks import forecast_baselines as fb
from sweeper.tasks.forecast_scores import mase_scale, score
from sweeper.tasks.season import suggest_season

# A short quarterly series (m = 4) small enough to forecast by hand.
Y = np.array([[10.0], [14.0], [8.0], [25.0], [16.0], [22.0], [14.0], [35.0], [15.0], [27.0]])


def test_persistence_and_seasonal_naive_follow_their_definitions() -> None:
    # Hyndman & Athanasopoulos, FPP 3rd ed. 5.2: naive y_T; seasonal naive
    # y_{T+h-m(k+1)} with k = floor((h-1)/m). From origin T = 7 (y = 35), m = 4:
    origins = np.array([7])
    assert fb.persistence(Y, origins, 2)[0, 0] == 35.0
    assert fb.seasonal_naive(Y, origins, 1, 4)[0, 0] == 16.0  # 7 + 1 - 4 = row 4
    assert fb.seasonal_naive(Y, origins, 2, 4)[0, 0] == 22.0  # row 5
    assert fb.seasonal_naive(Y, origins, 4, 4)[0, 0] == 35.0  # row 7: k = 0
    assert fb.seasonal_naive(Y, origins, 5, 4)[0, 0] == 16.0  # k = 1: 7 + 5 - 8 = row 4


def test_drift_is_the_line_through_the_first_and_last_observation() -> None:
    # FPP 5.2: y_T + h (y_T - y_1) / (T - 1); rows 0..7 are T = 8 observations.
    assert fb.drift(Y, np.array([7]), 3)[0, 0] == pytest.approx(35 + 3 * (35 - 10) / 7)
    assert fb.drift(Y, np.array([1, 3]), 1)[:, 0] == pytest.approx([18.0, 25 + 15 / 3])


def test_mase_scales_the_mae_by_the_in_sample_seasonal_naive_mae() -> None:
    # Hyndman & Koehler 2006 (FPP 5.8): q = e / ((1/(T-m)) sum_{t=m+1}^T |y_t - y_{t-m}|).
    train = Y[:8]
    # |16-10| + |22-14| + |14-8| + |35-25| = 6 + 8 + 6 + 10 = 30 over 4 differences
    assert mase_scale(train, 4)[0] == 7.5
    forecast, actual = np.array([[17.0], [24.0]]), Y[8:]
    scores = score(forecast, actual, mase_scale(train, 4))
    assert scores.mae == 2.5 and scores.mse == (4 + 9) / 2  # errors 2 and -3
    assert scores.mase == pytest.approx(2.5 / 7.5)
    assert mase_scale(train, 1)[0] == pytest.approx((4 + 6 + 17 + 9 + 6 + 8 + 21) / 7)


def co2_weeks(rows: int) -> np.ndarray:
    """statsmodels' weekly Mauna Loa CO2 (its missing weeks interpolated)."""
    values = co2.load_pandas().data["co2"].to_numpy()[:rows]
    known = np.flatnonzero(np.isfinite(values))
    return np.interp(np.arange(rows), known, values[known])


@pytest.fixture(scope="module")
def co2_fit() -> tuple[np.ndarray, object, fb.HoltWinters]:
    y = co2_weeks(416)  # eight years of weeks; the first seven train
    with warnings.catch_warnings():  # statsmodels' optimiser may warn about its exit
        warnings.simplefilter("ignore")
        reference = ExponentialSmoothing(
            y[:364],
            trend="add",
            seasonal="add",
            seasonal_periods=52,
            initialization_method="estimated",
        ).fit()
        ours = fb.fit_holt_winters(y[:364], 52)
    return y, reference, ours


def test_holt_winters_recursion_reproduces_statsmodels_fitted_values(co2_fit) -> None:
    # statsmodels' ExponentialSmoothing(trend="add", seasonal="add").fittedvalues: the
    # one-step forecasts of the training rows under the fitted weights and initial states
    y, reference, ours = co2_fit
    np.testing.assert_allclose(ours.one_step(y[:364]), reference.fittedvalues, rtol=1e-9)
    # and its out-of-sample forecasts from the last training row, h = 1..52
    ahead = [ours.forecast(y, np.array([363]), h)[0] for h in range(1, 53)]
    np.testing.assert_allclose(ahead, reference.forecast(52), rtol=1e-9)


def test_holt_winters_recursion_with_every_weight_in_play() -> None:
    # the fitted weights above leave trend and season fixed (0); with all three set,
    # statsmodels' fitted values and forecasts are still ours
    y = co2_weeks(416)
    reference = ExponentialSmoothing(
        y[:364], trend="add", seasonal="add", seasonal_periods=52, initialization_method="heuristic"
    ).fit(smoothing_level=0.4, smoothing_trend=0.1, smoothing_seasonal=0.3, optimized=False)
    ours = fb.from_params(reference.params)
    assert (ours.alpha, ours.beta, ours.gamma) == (0.4, 0.1, 0.3)
    np.testing.assert_allclose(ours.one_step(y[:364]), reference.fittedvalues, rtol=1e-9)
    ahead = [ours.forecast(y, np.array([363]), h)[0] for h in (1, 7, 60)]
    np.testing.assert_allclose(ahead, reference.forecast(60)[[0, 6, 59]], rtol=1e-9)


def test_holt_winters_runs_forward_on_earlier_rows_only(co2_fit) -> None:
    y, _, ours = co2_fit
    origins = np.arange(364, 400)
    forecasts = ours.forecast(y, origins, 2)
    later = y.copy()
    later[380:] += 50.0  # a jump after origin 379 leaves the forecasts before it alone
    changed = ours.forecast(later, origins, 2)
    np.testing.assert_array_equal(changed[:16], forecasts[:16])
    assert np.all(changed[16:] != forecasts[16:])
    # rows past the training rows update the state: no refit, but not a frozen forecast
    assert forecasts[0] != ours.forecast(y, np.array([363]), 3)[0]


def test_season_suggested_from_the_autocorrelation() -> None:
    # weekly CO2 has a yearly cycle (statsmodels' co2); a sine of period 12 has period 12
    assert suggest_season(co2_weeks(1560)) == 52
    t = np.arange(240)
    assert suggest_season(np.sin(2 * np.pi * t / 12) + 0.01 * t) == 12
    assert suggest_season(np.random.default_rng(0).normal(size=300)) is None
