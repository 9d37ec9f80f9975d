"""What the charts draw, checked against general-purpose libraries (statsmodels, scipy)."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats
from statsmodels.tsa.stattools import acf as sm_acf

from service.report import ReportInputError, SeriesInputs, find_series, series_diagnostics
from service.report.diagnostics import ACF_Z, time_axis


def _diag(body: dict, document, i: int):
    s = body["series"][i]
    return series_diagnostics(
        SeriesInputs.from_mapping(s),
        find_series(document, s["id"]),
        season_length=body["season_length"],
        model_params=body["model_params"],
    )


def test_acf_matches_statsmodels_with_gaps() -> None:
    rng = np.random.default_rng(3)
    y = rng.normal(size=80).cumsum()
    fitted = np.r_[np.nan, y[:-1]] + rng.normal(0, 0.3, 80)
    fitted[[10, 11, 40]] = np.nan  # interior gaps stay gaps
    inputs = SeriesInputs.from_mapping(
        {"id": "g", "actuals": list(y), "fitted": [None if np.isnan(v) else v for v in fitted]}
    )
    d = series_diagnostics(inputs)
    e = y - fitted
    # statsmodels' acf over the residual span, dropping pairs with a gap.
    ref = sm_acf(e[1:], nlags=d.acf.size, adjusted=False, missing="conservative", fft=False)
    np.testing.assert_allclose(d.acf, ref[1:], rtol=1e-10, atol=1e-12)
    assert d.n_obs == 76
    # 1.96 is the two-sided 95% normal quantile, scipy.stats.norm.ppf(0.975) = 1.959964.
    assert ACF_Z == pytest.approx(stats.norm.ppf(0.975), abs=5e-5)
    assert d.acf_bound == pytest.approx(1.96 / np.sqrt(76))


def test_normal_fit_is_scipy_mle(body: dict, document) -> None:
    d = _diag(body, document, 2)
    e = d.residuals[~np.isnan(d.residuals)]
    loc, scale = stats.norm.fit(e)  # maximum likelihood: mean and population sd
    assert d.mean == pytest.approx(loc, rel=1e-12)
    assert d.std == pytest.approx(scale, rel=1e-12)


def test_ljung_box_lags_and_window_come_from_the_stored_result(body, document) -> None:
    d = _diag(body, document, 1)
    stored = find_series(document, body["series"][1]["id"])
    lb = next(c for c in stored.checks if c.name == "ljung_box")
    ts = next(c for c in stored.checks if c.name == "tracking_signal")
    # ceil(ln 103) = 5 short lags (service.core.checks.autocorrelation.autocorrelation_lags);
    # with model parameters the portmanteau keeps lag 1 (lags 1-5), without them lags 2-5.
    assert body["model_params"] > 0
    assert d.ljung_box_lags == lb.details["short_last_lag"] == lb.details["lags"] == 5
    assert d.tracking_window == ts.details["window"]
    assert d.acf.size == 20  # the tested lags + 4, at least 20


def test_ljung_box_lags_default_without_stored_result() -> None:
    y = list(np.sin(np.arange(60)) * 10 + np.arange(60))
    fitted = [None, *y[:-1]]
    d = series_diagnostics(SeriesInputs.from_mapping({"id": "x", "actuals": y, "fitted": fitted}))
    assert d.ljung_box_lags == 10  # non-seasonal rule: 10 lags, 59 // 5 = 11 allows it
    assert d.holdout is None


@pytest.mark.parametrize(("i", "name"), [(1, "seasonal_naive"), (4, "drift")])
def test_holdout_view_uses_the_best_benchmark(body: dict, document, i: int, name: str):
    d = _diag(body, document, i)
    stored = find_series(document, body["series"][i]["id"])
    best = next(c for c in stored.checks if c.name == "benchmark_skill")
    assert d.holdout is not None
    assert d.holdout.benchmark == best.details["best_benchmark"] == name
    y = np.array(body["series"][i]["actuals"])
    h = np.arange(1, 13)
    if name == "seasonal_naive":
        # Hand rule (Hyndman & Athanasopoulos, simple methods): y_{T - m + h}, one season back.
        expected = y[104 - 52 : 104 - 40]
    else:
        # Drift: y_T + h (y_T - y_1) / (T - 1).
        expected = y[-1] + h * (y[-1] - y[0]) / 103
    np.testing.assert_allclose(d.holdout.benchmark_forecasts, expected, rtol=1e-12)
    assert d.holdout.level == 0.95
    assert d.holdout.context_start == 104 - 36  # three horizons of training periods


def test_time_axis_dates_and_fallback() -> None:
    weekly = tuple(f"2025-01-{d:02d}" for d in (6, 13, 20, 27))
    ax = time_axis(weekly, 4, 2)
    assert ax.is_date and ax.label == "Date"
    assert [str(x)[:10] for x in ax.holdout] == ["2025-02-03", "2025-02-10"]
    ax = time_axis(("w1", "w2", "w3"), 3, 1)
    assert not ax.is_date and list(ax.train) == [1, 2, 3] and list(ax.holdout) == [4]
    assert not time_axis(("2025-01-02", "2025-01-01"), 2, 0).is_date  # not increasing
    monthly = time_axis(("2025-01-31", "2025-02-28"), 2, 2, ("2025-03-31", "2025-04-30"))
    assert [str(x)[:10] for x in monthly.holdout] == ["2025-03-31", "2025-04-30"]
    # Holdout stamps that do not follow the training period are ignored, not drawn backwards.
    odd = time_axis(weekly, 4, 1, ("2024-12-30",))
    assert str(odd.holdout[0])[:10] == "2025-02-03"


@pytest.mark.parametrize(
    ("data", "field"),
    [
        ({"actuals": [1.0], "fitted": [1.0]}, "id"),
        ({"id": "a", "fitted": [1.0]}, "actuals"),
        ({"id": "a", "actuals": [1.0, 2.0], "fitted": [1.0]}, "fitted"),
        ({"id": "a", "actuals": [1.0], "fitted": ["x"]}, "fitted"),
        ({"id": "a", "actuals": [1.0], "fitted": [1.0], "timestamps": ["a", "b"]}, "timestamps"),
        ({"id": "a", "actuals": [1.0], "fitted": [1.0], "holdout": {"actuals": [1.0]}}, "holdout"),
        (
            {
                "id": "a",
                "actuals": [1.0],
                "fitted": [1.0],
                "holdout": {"actuals": [1.0], "forecasts": [1.0, 2.0]},
            },
            "holdout.forecasts",
        ),
    ],
)
def test_bad_stored_inputs_name_the_field(data: dict, field: str) -> None:
    with pytest.raises(ReportInputError) as info:
        SeriesInputs.from_mapping(data)
    assert info.value.field == field
