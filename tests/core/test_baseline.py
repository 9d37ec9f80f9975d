"""The comparison with the baseline version (``baseline_accuracy``): the Diebold-Mariano test
with the Harvey, Leybourne & Newbold (1997) correction against a hand computation of the
published formula, scipy and statsmodels; the fleet's average relative MAE (Davydenko & Fildes
2013) against a direct computation; bias and coverage side by side; the check's place in the
result (only with a baseline)."""

from __future__ import annotations

import numpy as np
import pytest
import statsmodels.api as sm
from scipy import stats

from service.core import InputError, Policy, assess, default_policy, make_batch, run_checks
from service.core.checks.baseline import MARGIN, NO_MATCH, baseline_accuracy, matched_errors
from service.core.gate import assess_many
from tests.reference_values import DM_PACKAGE_ATOL, DM_PACKAGE_SQUARED

RTOL = 1e-8

# Invented: one shop's daily loaves over a 7-day holdout; the new version's and the baseline's
# errors on the first 6 days (the baseline has no forecast for day 7).
ACTUALS = np.array([[40.0, 42.0, 41.0, 43.0, 42.0, 44.0, 45.0]])
E_NEW = np.array([2.0, 1.5, 3.0, 2.5, 0.5, -1.0])
E_BASE = np.array([1.0, -0.5, 1.0, 1.0, 1.0, 1.5])


def _one_series(h=None, loss="squared"):
    new = ACTUALS.copy()
    new[0, :6] -= E_NEW
    new[0, 6] -= 1.0
    base = ACTUALS.copy()
    base[0, :6] -= E_BASE
    base[0, 6] = np.nan
    batch = make_batch(
        [[40.0] * 20],
        [[40.0] * 20],
        holdout_actuals=ACTUALS,
        holdout_forecasts=new,
        baseline_forecasts=base,
        baseline_label="2026.11",
    )
    options = {} if h is None else {"h": h}
    return baseline_accuracy(batch, loss=loss, **options)


def test_hln_statistic_by_hand_h_one():
    # computed from Harvey, Leybourne & Newbold (1997), IJF 13:281-291, eq. 9 with h = 1:
    # d = e_new^2 - e_base^2 = 3, 2, 8, 5.25, -0.75, -1.25 (the 7th day is unmatched), n = 6,
    # dbar = 16.25 / 6, gamma_0 = mean((d - dbar)^2), DM = dbar / sqrt(gamma_0 / n),
    # DM* = DM * sqrt((n + 1 - 2h + h(h - 1)/n) / n) = DM * sqrt(5/6); p = P(t_5 >= DM*)
    # (scipy.stats.t.sf).
    d = np.array([3.0, 2.0, 8.0, 5.25, -0.75, -1.25])
    np.testing.assert_allclose(E_NEW**2 - E_BASE**2, d)
    n = 6
    dbar = 16.25 / 6
    gamma0 = ((d - dbar) ** 2).mean()
    dm_star = dbar / np.sqrt(gamma0 / n) * np.sqrt(5 / 6)
    r = _one_series()
    np.testing.assert_allclose(r.statistic[0], dm_star, rtol=RTOL)
    np.testing.assert_allclose(r.p_value[0], stats.t.sf(dm_star, 5), rtol=RTOL)
    np.testing.assert_allclose(r.details["mean_differential"][0], dbar, rtol=RTOL)
    assert r.details["matched_periods"][0] == 6 and r.details["h"][0] == 1
    # At h = 1, DM* is the one-sample t statistic of d: scipy's ttest_1samp.
    ref = stats.ttest_1samp(d, 0.0, alternative="greater")
    np.testing.assert_allclose(r.statistic[0], ref.statistic, rtol=RTOL)
    np.testing.assert_allclose(r.p_value[0], ref.pvalue, rtol=RTOL)
    # The figures, rounded (computed above): DM* = 1.873736, p = 0.059919.
    np.testing.assert_allclose(r.statistic[0], 1.873736, atol=5e-7)
    np.testing.assert_allclose(r.p_value[0], 0.059919, atol=5e-7)


def test_hln_statistic_by_hand_h_two_and_statsmodels_hac():
    # computed: HLN (1997) eq. 9 with h = 2: V = gamma_0 + 2 gamma_1 (autocovariances divided
    # by n), DM* = dbar / sqrt(V / n) * sqrt((n + 1 - 2h + h(h - 1)/n) / n), here sqrt(5/9).
    d = np.array([3.0, 2.0, 8.0, 5.25, -0.75, -1.25])
    n = 6
    z = d - d.mean()
    gamma0 = (z * z).sum() / n
    gamma1 = (z[1:] * z[:-1]).sum() / n
    factor = np.sqrt((n + 1 - 4 + 2 / n) / n)
    np.testing.assert_allclose(factor, np.sqrt(5 / 9), rtol=RTOL)
    dm_star = d.mean() / np.sqrt((gamma0 + 2 * gamma1) / n) * factor
    r = _one_series(h=2)
    np.testing.assert_allclose(r.statistic[0], dm_star, rtol=RTOL)
    np.testing.assert_allclose(r.p_value[0], stats.t.sf(dm_star, n - 1), rtol=RTOL)
    assert r.details["h"][0] == 2
    # statsmodels: the mean's HAC standard error with a uniform kernel over 1 lag and no
    # small-sample correction is sqrt((gamma_0 + 2 gamma_1) / n).
    fit = sm.OLS(d, np.ones(n)).fit(
        cov_type="HAC", cov_kwds={"maxlags": 1, "kernel": "uniform", "use_correction": False}
    )
    np.testing.assert_allclose(r.statistic[0], fit.params[0] / fit.bse[0] * factor, rtol=RTOL)


def test_absolute_loss_by_hand():
    # computed: d = |e_new| - |e_base| = 1, 1, 2, 1.5, -0.5, -0.5; DM* at h = 1 is the
    # one-sample t statistic (scipy's ttest_1samp); relative error is the MAE ratio 10.5 / 6.
    d = np.abs(E_NEW) - np.abs(E_BASE)
    r = _one_series(loss="absolute")
    ref = stats.ttest_1samp(d, 0.0, alternative="greater")
    np.testing.assert_allclose(r.statistic[0], ref.statistic, rtol=RTOL)
    np.testing.assert_allclose(r.p_value[0], ref.pvalue, rtol=RTOL)
    np.testing.assert_allclose(r.details["relative_error"][0], 10.5 / 6.0, rtol=RTOL)
    assert r.details["loss"][0] == "absolute"


def test_third_party_implementation_values_through_the_check():
    # tests/reference_values.py DM_PACKAGE_SQUARED: the dieboldmariano package's tests (4
    # decimals), a third-party implementation of the HLN formula; actuals 0, so the errors are
    # minus the forecasts.
    ref = DM_PACKAGE_SQUARED
    f1 = np.array([ref["forecast_1"]])
    f2 = np.array([ref["forecast_2"]])
    batch = make_batch(
        [[0.0] * 10],
        [[0.0] * 10],
        holdout_actuals=np.zeros_like(f1),
        holdout_forecasts=f1,
        baseline_forecasts=f2,
    )
    r = baseline_accuracy(batch)
    np.testing.assert_allclose(r.statistic[0], ref["statistic"], atol=DM_PACKAGE_ATOL)
    np.testing.assert_allclose(
        2 * stats.t.sf(abs(r.statistic[0]), 5), ref["p_two_sided"], atol=DM_PACKAGE_ATOL
    )


def test_relative_error_and_side_by_side_details():
    r = _one_series()
    # computed: RMSE ratio sqrt(mean e_new^2 / mean e_base^2) = sqrt(22.75 / 6.5) on the
    # matched days; mean errors 8.5 / 6 and 5 / 6.
    np.testing.assert_allclose(r.details["relative_error"][0], np.sqrt(22.75 / 6.5), rtol=RTOL)
    np.testing.assert_allclose(r.details["bias_new"][0], 8.5 / 6, rtol=RTOL)
    np.testing.assert_allclose(r.details["bias_baseline"][0], 5.0 / 6, rtol=RTOL)
    # No intervals given: no coverage.
    assert np.isnan(r.details["coverage_new"][0]) and r.details["interval_periods"][0] == 0


def _fleet(rng, n=60, h=12, new_sd=1.0, base_sd=1.0, *, label="2026.11", intervals=True):
    """An invented fleet with a sound model and a baseline whose errors are independent of
    the new version's (the gate study's conditions, small)."""
    t = 40
    level = rng.uniform(50, 150, (n, 1))
    sd = 5.0
    y = level + sd * rng.standard_normal((n, t + h))
    hold = y[:, t:]
    new = hold - new_sd * sd * rng.standard_normal((n, h))
    base = hold - base_sd * sd * rng.standard_normal((n, h))
    z = 1.959963984540054  # scipy.stats.norm.ppf(0.975)
    extra = {}
    if intervals:
        extra = {
            "holdout_lower": new - z * new_sd * sd,
            "holdout_upper": new + z * new_sd * sd,
            "baseline_lower": base - z * base_sd * sd,
            "baseline_upper": base + z * base_sd * sd,
        }
    return make_batch(
        y[:, :t],
        np.repeat(level, t, axis=1),
        ids=[f"shop-{i}" for i in range(n)],
        holdout_actuals=hold,
        holdout_forecasts=new,
        baseline_forecasts=base,
        baseline_label=label,
        **extra,
    )


def test_fleet_relative_mae_against_a_direct_computation():
    rng = np.random.default_rng(4)
    batch = _fleet(rng, n=40, new_sd=1.1)
    a = assess(batch, default_policy())
    got = a.fleet["baseline"].result
    h = batch.holdout
    e_new = h.actuals - h.forecasts
    e_base = h.actuals - batch.baseline.forecasts
    # computed: Davydenko & Fildes (2013) AvgRelMAE, every series with 12 matched steps, so
    # the weights n_i are equal: exp(mean log(MAE_new / MAE_base)); its interval the t
    # interval of the mean log ratio (statsmodels WLS with HC1, equal to the ordinary one).
    logs = np.log(np.abs(e_new).mean(axis=1) / np.abs(e_base).mean(axis=1))
    fit = sm.WLS(logs, np.ones(logs.size), weights=np.full(logs.size, 12.0)).fit(cov_type="HC1")
    est, se = fit.params[0], fit.bse[0]
    q = stats.t.ppf(0.975, logs.size - 1)
    np.testing.assert_allclose(got.relative_mae, np.exp(logs.mean()), rtol=RTOL)
    np.testing.assert_allclose(got.ci_low, np.exp(est - q * se), rtol=RTOL)
    np.testing.assert_allclose(got.ci_high, np.exp(est + q * se), rtol=RTOL)
    np.testing.assert_allclose(
        got.p_value, stats.t.sf((est - np.log(1 + MARGIN)) / se, logs.size - 1), rtol=RTOL
    )
    np.testing.assert_allclose(got.p_worse, stats.t.sf(est / se, logs.size - 1), rtol=RTOL)
    assert got.series_used == got.matched_series == 40 and got.matched_periods == 480
    assert got.baseline == "2026.11" and got.margin == MARGIN
    # Side by side: pooled mean error, percent of the mean |actual|, pooled coverage.
    np.testing.assert_allclose(got.bias_new, e_new.mean(), rtol=RTOL)
    np.testing.assert_allclose(got.bias_baseline, e_base.mean(), rtol=RTOL)
    np.testing.assert_allclose(
        got.percent_bias_new, 100 * e_new.sum() / np.abs(h.actuals).sum(), rtol=RTOL
    )
    inside = (h.actuals >= h.lower) & (h.actuals <= h.upper)
    np.testing.assert_allclose(got.coverage_new, inside.mean(), rtol=RTOL)
    b = batch.baseline
    inside = (h.actuals >= b.lower) & (h.actuals <= b.upper)
    np.testing.assert_allclose(got.coverage_baseline, inside.mean(), rtol=RTOL)


def test_equal_forecasts_pass_everywhere():
    rng = np.random.default_rng(7)
    batch = _fleet(rng)
    same = make_batch(
        batch.actuals,
        batch.fitted,
        holdout_actuals=batch.holdout.actuals,
        holdout_forecasts=batch.holdout.forecasts,
        baseline_forecasts=batch.holdout.forecasts,
    )
    a = assess(same, default_policy())
    r = a.results["baseline_accuracy"]
    assert (r.statistic == 0).all() and (r.p_value == 1).all()
    assert (a.status_codes["baseline_accuracy"] == 1).all()  # PASS
    fleet = a.fleet["baseline"]
    assert fleet.result.relative_mae == 1.0 and fleet.code == 1
    assert not [x for x in a.reasons if x.check == "baseline_accuracy"]


def test_an_equally_good_challenger_neither_fails_nor_warns():
    a = assess(_fleet(np.random.default_rng(11), n=200), default_policy())
    assert a.fleet["baseline"].code == 1
    assert not [x for x in a.reasons if x.check == "baseline_accuracy"]


def test_a_clearly_worse_challenger_fails_with_its_numbers():
    a = assess(_fleet(np.random.default_rng(12), n=200, new_sd=1.3), default_policy())
    found = a.fleet["baseline"]
    assert found.code == 3 and a.verdict.value == "fail"
    s = found.result
    reason = next(x for x in a.reasons if x.check == "baseline_accuracy" and x.series_id is None)
    assert reason.status.value == "fail"
    more = 100 * (s.relative_mae - 1)
    assert reason.message.startswith(
        f"This version is {more:.1f}% less accurate than version 2026.11 on 200 matched series "
        f"(relative MAE {s.relative_mae:.3f}, 95% CI {s.ci_low:.3f}-{s.ci_high:.3f}; "
    )
    assert f"{s.series_worse:,} series" in reason.message and s.relative_mae > 1.2


def test_worse_within_the_margin_warns():
    # A large fleet only slightly worse: significantly above 1, not above 1 + margin.
    policy = Policy.from_dict(
        {"name": "wide-margin", "checks": {"baseline_accuracy": {"margin": 0.5}}}
    )
    a = assess(_fleet(np.random.default_rng(13), n=300, new_sd=1.15), policy)
    found = a.fleet["baseline"]
    assert found.code == 2 and found.result.margin == 0.5 and not found.result.material
    reason = next(x for x in a.reasons if x.check == "baseline_accuracy" and x.series_id is None)
    assert "within the policy's 50% margin" in reason.message


def test_without_a_baseline_the_check_is_nowhere():
    rng = np.random.default_rng(3)
    batch = _fleet(rng, n=12)
    plain = make_batch(
        batch.actuals,
        batch.fitted,
        holdout_actuals=batch.holdout.actuals,
        holdout_forecasts=batch.holdout.forecasts,
    )
    d = assess(plain, default_policy()).to_dict()
    assert "baseline" not in d["fleet"]
    assert all(c["name"] != "baseline_accuracy" for c in d["checks"])
    assert all(c["name"] != "baseline_accuracy" for s in d["series"] for c in s["checks"])
    assert "baseline_accuracy" not in run_checks(plain).checks
    with_baseline = assess(batch, default_policy()).to_dict()
    assert "baseline" in with_baseline["fleet"]
    assert [c["name"] for c in with_baseline["checks"]][-3] == "baseline_accuracy"


def test_unmatched_series_are_skipped_with_a_reason_and_counted():
    rng = np.random.default_rng(5)
    batch = _fleet(rng, n=20)
    base = batch.baseline.forecasts.copy()
    base[3] = np.nan  # no matched period
    base[4, 2:] = np.nan  # 2 matched periods: too few for the test
    base[5, ::2] = np.nan  # 6 matched periods
    b2 = make_batch(
        batch.actuals,
        batch.fitted,
        holdout_actuals=batch.holdout.actuals,
        holdout_forecasts=batch.holdout.forecasts,
        baseline_forecasts=base,
    )
    a = assess(b2, default_policy())
    r = a.results["baseline_accuracy"]
    assert r.skip_reason[3] == NO_MATCH
    assert r.skip_reason[4] == "fewer than 3 holdout steps with both forecasts"
    assert r.skip_reason[5] is None and r.details["matched_periods"][5] == 6
    assert list(r.details["matched_periods"][3:6]) == [0, 2, 6]
    s = a.fleet["baseline"].result
    assert s.matched_series == 19 and s.matched_periods == 17 * 12 + 2 + 6
    assert s.series_used == 18 and s.baseline is None
    doc = a.to_dict()
    entry = next(c for c in doc["series"][3]["checks"] if c["name"] == "baseline_accuracy")
    assert entry["status"] == "skipped" and entry["message"] == NO_MATCH


def test_matched_errors_need_the_actual_and_both_forecasts():
    batch = make_batch(
        [[1.0] * 5],
        [[1.0] * 5],
        holdout_actuals=[[1.0, None, 3.0, 4.0]],
        holdout_forecasts=[[1.5, 2.0, None, 3.0]],
        baseline_forecasts=[[0.0, 2.0, 3.0, None]],
    )
    m = matched_errors(batch)
    assert m.matched.tolist() == [[True, False, False, False]] and m.count.tolist() == [1]


def test_policy_options_reach_the_check():
    rng = np.random.default_rng(8)
    batch = _fleet(rng, n=30, new_sd=1.2)
    policy = Policy.from_dict(
        {
            "name": "absolute-ewc",
            "checks": {"baseline_accuracy": {"loss": "absolute", "variance": "ewc"}},
        }
    )
    r = assess(batch, policy).results["baseline_accuracy"]
    assert set(r.details["loss"]) == {"absolute"}
    direct = baseline_accuracy(batch, loss="absolute", variance="ewc")
    np.testing.assert_array_equal(r.p_value, direct.p_value)


def test_stacked_assessments_equal_separate_ones():
    # tests/gate/test_assess_many.py's rule, with baselines: stacked parts get their own answer.
    rng = np.random.default_rng(9)
    parts = [_fleet(rng, n=15, new_sd=s) for s in (1.0, 1.4, 1.0)]
    policy = default_policy()
    together = assess_many([(b, policy) for b in parts])
    for b, a in zip(parts, together, strict=True):
        assert a.to_dict() == assess(b, policy).to_dict()
    # Different baselines do not stack with each other or with none.
    other = _fleet(np.random.default_rng(9), n=15, label="2026.10")
    plain = make_batch(other.actuals, other.fitted)
    mixed = assess_many([(parts[0], policy), (other, policy), (plain, policy)])
    assert mixed[1].fleet["baseline"].result.baseline == "2026.10"
    assert "baseline" not in mixed[2].to_dict()["fleet"]


def test_rows_taken_keep_their_baseline():
    batch = _fleet(np.random.default_rng(2), n=6)
    part = batch.take(np.array([4, 1]))
    np.testing.assert_array_equal(part.baseline.forecasts, batch.baseline.forecasts[[4, 1]])
    np.testing.assert_array_equal(part.baseline.upper, batch.baseline.upper[[4, 1]])
    assert part.baseline.label == "2026.11"


@pytest.mark.parametrize(
    ("field", "kwargs"),
    [
        ("baseline_forecasts", {"baseline_forecasts": [[1.0, 2.0]]}),
        ("baseline_lower", {"baseline_lower": [[1.0]]}),
        ("baseline_label", {"baseline_label": "2026.11"}),
    ],
)
def test_a_baseline_needs_a_holdout_and_forecasts(field, kwargs):
    with pytest.raises(InputError) as err:
        make_batch([[1.0, 2.0, 3.0]], [[1.0, 2.0, 3.0]], **kwargs)
    assert err.value.argument == field


@pytest.mark.parametrize(
    ("field", "index", "kwargs"),
    [
        ("baseline_forecasts", None, {"baseline_forecasts": [[1.0, 2.0, 3.0, 4.0]]}),
        ("baseline_forecasts", None, {"baseline_forecasts": [[1.0], [2.0]]}),
        ("baseline_forecasts", 0, {"baseline_forecasts": [[1.0, float("inf")]]}),
        ("baseline_upper", None, {"baseline_forecasts": [[1.0, 2.0]], "baseline_lower": [[0, 1]]}),
        ("baseline_lower", None, {"baseline_forecasts": [[1.0, 2.0]], "baseline_upper": [[2, 3]]}),
        (
            "baseline_lower",
            0,
            {
                "baseline_forecasts": [[1.0, 2.0]],
                "baseline_lower": [[0.0, 3.0]],
                "baseline_upper": [[2.0, 2.5]],
            },
        ),
        ("baseline_label", None, {"baseline_forecasts": [[1.0, 2.0]], "baseline_label": 2026}),
    ],
)
def test_bad_baselines_name_the_field(field, index, kwargs):
    with pytest.raises(InputError) as err:
        make_batch(
            [[1.0, 2.0, 3.0]],
            [[1.0, 2.0, 3.0]],
            holdout_actuals=[[4.0, 5.0]],
            holdout_forecasts=[[4.0, 5.0]],
            **kwargs,
        )
    assert err.value.argument == field and err.value.index == index


def test_a_shorter_baseline_row_pads_with_unmatched_periods():
    batch = make_batch(
        [[1.0, 2.0, 3.0]],
        [[1.0, 2.0, 3.0]],
        holdout_actuals=[[4.0, 5.0, 6.0]],
        holdout_forecasts=[[4.0, 5.0, 6.0]],
        baseline_forecasts=[[4.0, None]],
    )
    assert (
        batch.baseline.forecasts.shape == (1, 3) and np.isnan(batch.baseline.forecasts[0, 1:]).all()
    )


def _one_much_worse(margin=None):
    # Invented: one shop whose new forecasts miss by 5 to 6 loaves where the baseline's miss
    # by 1 or 2: worse at every matched day.
    hold = np.full((1, 12), 40.0)
    new_err = np.array([[5.0, -6.0, 5.5, -5.0, 6.0, -5.5, 5.0, -6.0, 5.5, -5.0, 6.0, -5.5]])
    base_err = np.array([[1.0, -1.0, 2.0, -1.0, 1.0, -2.0, 1.0, -1.0, 2.0, -1.0, 1.0, -2.0]])
    batch = make_batch(
        [[40.0, 41.0, 39.0] * 8],
        [[40.0, 40.0, 40.0] * 8],
        holdout_actuals=hold,
        holdout_forecasts=hold - new_err,
        baseline_forecasts=hold - base_err,
    )
    checks = {} if margin is None else {"baseline_accuracy": {"margin": margin}}
    return assess(batch, Policy.from_dict({"name": "margin", "checks": checks}))


def test_a_series_much_worse_fails_with_its_sentence():
    a = _one_much_worse()
    r = a.results["baseline_accuracy"]
    assert a.status_codes["baseline_accuracy"][0] == 3
    reason = next(x for x in a.reasons if x.check == "baseline_accuracy" and x.series_id)
    rel = float(r.details["relative_error"][0])
    assert reason.series_id == "0" and rel > 3
    assert reason.message.startswith(
        f"this version is less accurate than the baseline on the holdout: its RMSE is "
        f"{rel:.3g} times the baseline's over 12 matched periods (Diebold-Mariano-HLN t = "
    )


def test_a_series_worse_within_the_margin_passes_and_says_so():
    a = _one_much_worse(margin=10.0)
    assert a.status_codes["baseline_accuracy"][0] == 1
    entry = a.result().series[0].check("baseline_accuracy")
    assert entry.message.startswith(
        "significantly less accurate than the baseline, but by less than the policy's margin"
    )
