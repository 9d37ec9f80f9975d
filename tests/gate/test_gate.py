"""The gate: statuses from adjusted p-values, fleet shares, critical series, reasons."""

from __future__ import annotations

import json

import numpy as np
import pytest

from service.core import assess, benjamini_hochberg, default_policy, make_batch, run_checks
from service.core.gate import WeightsNotUsed
from service.core.policy import Policy

SEVERITY = {"fail": 3, "warn": 2, "pass": 1, "skipped": 0}


def invented_fleet(n=60, t=104, seed=7, bias_rows=(), ar_rows=(), shift=0.8):
    """Invented fleet: level-100 series with white-noise residuals, some rows made flawed."""
    rng = np.random.default_rng(seed)
    actuals = 100 + 5 * rng.standard_normal((n, t))
    e = rng.standard_normal((n, t))
    for i in bias_rows:
        e[i] += shift
    for i in ar_rows:
        for k in range(1, t):
            e[i, k] = 0.7 * e[i, k - 1] + e[i, k]
    return make_batch(actuals, actuals - e, ids=[f"store-{i}" for i in range(n)])


def test_sound_fleet_passes_and_result_is_json():
    result = assess(invented_fleet(), default_policy())
    d = result.to_dict()
    json.dumps(d, allow_nan=False)
    assert d["verdict"] == "pass"
    assert d["policy"] == {"name": "default", "version": 1}
    assert [c["name"] for c in d["checks"]][:2] == ["data_sufficiency", "bias"]
    s = d["series"][0]
    assert set(s) >= {"id", "verdict", "n_obs", "bias", "checks"}
    assert set(s["bias"]) == {
        "mean_error",
        "std_error",
        "ci_low",
        "ci_high",
        "percent_bias",
        "tracking_signal",
    }
    lb = next(c for c in s["checks"] if c["name"] == "ljung_box")
    assert set(lb) >= {"name", "status", "statistic", "p_value", "p_adjusted", "details"}
    # ceil(ln 104) = 5 short lags (service.core.checks.autocorrelation.autocorrelation_lags):
    # lag 1 by the lag-1 regression, lags 2-5 by the portmanteau (so 4 df).
    assert lb["details"]["lags"] == 5 and lb["details"]["df"] == 4
    assert (lb["details"]["short_first_lag"], lb["details"]["short_last_lag"]) == (2, 5)
    assert lb["details"]["classical_lags"] == 10


def test_statuses_use_bh_adjusted_p_values():
    batch = invented_fleet(bias_rows=range(5), shift=0.35)
    result = assess(batch, default_policy())
    raw = run_checks(batch)["bias"].p_value
    np.testing.assert_allclose(result.p_adjusted["bias"], benjamini_hochberg(raw))
    d = result.to_dict()
    # The thresholds are the policy's divided by the size of each family (module docstring of
    # service.core.gate): fail tests bias, tracking signal, autocorrelation and the fleet bias
    # and autocorrelation tests; warn tests those and the two warn-only tests.
    summary = next(c for c in d["checks"] if c["name"] == "bias")
    assert summary["fail_p_used"] == pytest.approx(0.01 / 5)
    assert summary["warn_p_used"] == pytest.approx(0.05 / 7)
    material = (
        np.abs(result.results["bias"].details["mean_error"])
        >= 0.1 * (result.results["bias"].details["residual_sd"])
    )
    for i, s in enumerate(d["series"]):
        check = next(c for c in s["checks"] if c["name"] == "bias")
        adj = result.p_adjusted["bias"][i]
        expect = "fail" if adj < 0.01 / 5 else "warn" if adj < 0.05 / 7 else "pass"
        assert check["status"] == (expect if material[i] else "pass")
    # With adjustment off, raw p-values decide: never fewer warnings.
    raw_policy = Policy.from_dict({"fleet": {"adjustment": "none"}})
    loose = assess(batch, raw_policy)
    assert (loose.status_codes["bias"] >= result.status_codes["bias"]).all()


def test_biased_fleet_fails_with_correction_in_words():
    batch = invented_fleet(bias_rows=range(10))
    d = assess(batch, default_policy()).to_dict()
    assert d["verdict"] == "fail"
    fleet_reason = d["reasons"][0]
    assert fleet_reason["series_id"] is None and fleet_reason["status"] == "fail"
    series_reasons = [r for r in d["reasons"] if r["check"] == "bias" and r["series_id"]]
    assert {r["series_id"] for r in series_reasons} >= {f"store-{i}" for i in range(10)}
    assert "run low" in series_reasons[0]["message"]
    assert "adding +" in series_reasons[0]["message"]


def test_reasons_are_worst_first_and_cover_every_warn_and_fail():
    batch = invented_fleet(bias_rows=range(4), ar_rows=range(4, 6))
    result = assess(batch, default_policy())
    d = result.to_dict()
    sev = [SEVERITY[r["status"]] for r in d["reasons"]]
    assert sev == sorted(sev, reverse=True)
    flagged = {
        (c["name"], s["id"])
        for s in d["series"]
        for c in s["checks"]
        if c["status"] in ("warn", "fail")
    }
    listed = {(r["check"], r["series_id"]) for r in d["reasons"] if r["series_id"]}
    assert flagged == listed


def test_disabled_check_never_appears():
    batch = invented_fleet(ar_rows=range(20))
    on = assess(batch, default_policy()).to_dict()
    assert any(r["check"] == "ljung_box" for r in on["reasons"])
    policy = Policy.from_dict({"checks": {"ljung_box": {"enabled": False}}})
    off = assess(batch, policy).to_dict()
    assert all(r["check"] != "ljung_box" for r in off["reasons"])
    assert all(c["name"] != "ljung_box" for c in off["checks"])
    assert all(c["name"] != "ljung_box" for c in off["series"][0]["checks"])


def test_series_verdict_is_its_worst_check():
    d = assess(invented_fleet(bias_rows=range(3), ar_rows=range(3, 6)), default_policy()).to_dict()
    for s in d["series"]:
        worst = max((SEVERITY[c["status"]] for c in s["checks"]), default=1)
        assert SEVERITY[s["verdict"]] == max(worst, 1)


def test_one_failing_series_below_the_share_does_not_fail_the_fleet_unless_critical():
    batch = invented_fleet(n=100, bias_rows=[0], shift=1.5)
    d = assess(batch, default_policy()).to_dict()
    assert d["series"][0]["verdict"] == "fail"
    assert d["verdict"] != "fail"
    critical = Policy.from_dict({"fleet": {"critical_series": ["store-0"]}})
    d2 = assess(batch, critical).to_dict()
    assert d2["verdict"] == "fail"
    assert "critical" in d2["reasons"][0]["message"]


def test_weighting_changes_the_failed_share():
    batch = invented_fleet(n=40, bias_rows=[0, 1], shift=1.5)
    heavy = np.ones(40)
    heavy[:2] = 100.0
    weighted = make_batch(batch.actuals, batch.fitted, ids=batch.ids, weights=heavy)
    by_count = assess(batch, Policy.from_dict({"fleet": {"weighting": "count"}}))
    by_given = assess(weighted, Policy.from_dict({"fleet": {"weighting": "given"}}))
    # The default weighting uses given weights too; one that ignores them refuses them.
    assert assess(weighted, default_policy()).weights.tolist() == heavy.tolist()
    with pytest.raises(WeightsNotUsed) as info:
        assess(weighted, Policy.from_dict({"fleet": {"weighting": "count"}}))
    assert info.value.argument == "weights" and info.value.index == 0
    share = {s.name: s.failed_share for s in by_count.summaries}["bias"]
    assert share == pytest.approx(2 / 40)
    share_given = {s.name: s.failed_share for s in by_given.summaries}["bias"]
    assert share_given == pytest.approx(200 / 238)


def test_too_wide_intervals_warn_but_do_not_fail():
    rng = np.random.default_rng(3)
    n, t, h = 30, 60, 40
    actuals = 50 + rng.standard_normal((n, t))
    ha = 50 + rng.standard_normal((n, h))
    wide = assess(
        make_batch(
            actuals,
            actuals - rng.standard_normal((n, t)),
            holdout_actuals=ha,
            holdout_forecasts=np.full((n, h), 50.0),
            holdout_lower=np.full((n, h), 40.0),
            holdout_upper=np.full((n, h), 60.0),
            level=0.8,
        ),
        default_policy(),
    )
    assert (wide.status_codes["interval_coverage"] <= 2).all()
    narrow = assess(
        make_batch(
            actuals,
            actuals - rng.standard_normal((n, t)),
            holdout_actuals=ha,
            holdout_forecasts=np.full((n, h), 50.0),
            holdout_lower=np.full((n, h), 49.9),
            holdout_upper=np.full((n, h), 50.1),
            level=0.95,
        ),
        default_policy(),
    )
    # One path's misses cluster, so a series only warns; the fleet's pooled miss rate fails.
    assert (narrow.status_codes["interval_coverage"] == 2).all()
    assert narrow.verdict.value == "fail" and narrow.fleet["coverage"].code == 3
    assert any(
        r.series_id is None and r.check == "interval_coverage" and "too narrow" in r.message
        for r in narrow.reasons
    )
    assert any("too narrow" in r.message for r in narrow.reasons if r.series_id)


def test_fleet_bias_sees_what_no_single_series_shows():
    # 200 series each biased by 0.15 sd: few are significant alone, the fleet is.
    batch = invented_fleet(n=200, t=52, bias_rows=range(200), shift=0.15, seed=11)
    result = assess(batch, default_policy())
    fb = result.fleet["bias"].result
    assert fb.mean_error > 0 and fb.p_value < 1e-4 and fb.material
    assert result.fleet["bias"].code >= 2
    assert any(
        r.series_id is None and r.check == "bias" and "fleet" in r.message for r in result.reasons
    )


def test_series_order_does_not_change_verdicts():
    batch = invented_fleet(bias_rows=range(5), ar_rows=range(5, 9))
    base = assess(batch, default_policy()).to_dict()
    perm = np.random.default_rng(0).permutation(batch.n_series)
    shuffled = assess(batch.take(perm), default_policy()).to_dict()
    by_id = {s["id"]: s["verdict"] for s in base["series"]}
    assert {s["id"]: s["verdict"] for s in shuffled["series"]} == by_id
    assert shuffled["verdict"] == base["verdict"]


def test_short_series_warn_through_data_sufficiency_and_skip_the_rest():
    batch = make_batch([[1.0, 2.0, 3.0, 2.0]], [[None, 1.5, 2.5, 2.5]], ids=["tiny"])
    d = assess(batch, default_policy()).to_dict()
    s = d["series"][0]
    assert s["verdict"] == "warn"
    statuses = {c["name"]: c["status"] for c in s["checks"]}
    assert statuses["data_sufficiency"] == "warn"
    assert statuses["ljung_box"] == "skipped"
    msg = next(c["message"] for c in s["checks"] if c["name"] == "ljung_box")
    assert msg


def test_fleet_bias_is_the_weighted_mean_and_its_driscoll_kraay_standard_error():
    # Definition (docs: fleet bias): mean = sum w_i me_i / sum w_i; its variance is N times the
    # EWC long-run variance of H_t = sum_i s_i (e_it - mean_i) / T_i over the N periods, the
    # series aligned at their last period (Driscoll & Kraay 1998); t on B = ewc_bins(N) df.
    # Computed here directly, the cosine sums by scipy's orthonormal DCT-II.
    from scipy import fft, stats

    from service.core.ewc import ewc_bins

    batch = invented_fleet(n=30, t=52, bias_rows=range(10), shift=0.3, seed=5)
    result = assess(batch, default_policy())
    b = result.results["bias"].details
    w = result.weights
    share = w / w.sum()
    mean = (share * b["mean_error"]).sum()
    e = batch.actuals - batch.fitted
    h = (share[:, None] * (e - e.mean(axis=1, keepdims=True)) / e.shape[1]).sum(axis=0)
    n = h.size
    bins = int(ewc_bins(n))
    omega = np.mean(fft.dct(h, type=2, norm="ortho")[1 : bins + 1] ** 2)
    se = np.sqrt(n * omega)
    fb = result.fleet["bias"].result
    np.testing.assert_allclose([fb.mean_error, fb.std_error], [mean, se], rtol=1e-12)
    np.testing.assert_allclose(fb.p_value, 2 * stats.t.sf(abs(mean / se), bins), rtol=1e-9)
    assert fb.df == bins


def test_fleet_bias_does_not_overflow_near_the_accepted_magnitude():
    # The same fleet in a unit 1e200 times larger: the same z and p, the mean scaled exactly
    # (the weights are volumes, which scale too, and cancel in the weighted mean).
    small = invented_fleet(n=20, t=52, bias_rows=range(20), shift=0.3, seed=8)
    big = make_batch(small.actuals * 1e200, small.fitted * 1e200, ids=small.ids)
    fs = assess(small, default_policy()).fleet["bias"].result
    fb = assess(big, default_policy()).fleet["bias"].result
    assert np.isfinite([fb.mean_error, fb.std_error, fb.statistic, fb.p_value]).all()
    np.testing.assert_allclose(fb.statistic, fs.statistic, rtol=1e-9)
    np.testing.assert_allclose(fb.mean_error, fs.mean_error * 1e200, rtol=1e-9)
