"""The batch at the door (validation, residual rules), edge cases across every check, and the
vectorised results against per-series runs (including hypothesis property tests)."""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given
from hypothesis import strategies as st
from scipy import stats
from statsmodels.stats.diagnostic import acorr_ljungbox, het_arch

from service.core import (
    CHECK_NAMES,
    InputError,
    data_sufficiency,
    make_batch,
    residuals_of,
    run_checks,
)

RTOL = 1e-8


# --- Validation: bad input names the argument -------------------------------------------------


def _raises(argument, index=None, **kwargs):
    base = {"actuals": [[1.0, 2.0, 3.0]], "fitted": [[1.0, 2.0, 3.0]]}
    base.update(kwargs)
    with pytest.raises(InputError) as err:
        make_batch(base.pop("actuals"), base.pop("fitted"), **base)
    assert err.value.argument == argument
    assert err.value.index == index
    assert argument in str(err.value)
    return err.value


def test_shapes_that_disagree():
    _raises("fitted", fitted=[[1.0, 2.0, 3.0], [1.0, 2.0, 3.0]])
    _raises("fitted", fitted=[[1.0, 2.0, 3.0, 4.0]])
    _raises("fitted", fitted=np.ones((1, 3, 1)))
    _raises("actuals", actuals=np.ones((2, 2, 2)), fitted=np.ones((2, 2, 2)))
    _raises("holdout_actuals", holdout_actuals=[[1.0], [2.0]], holdout_forecasts=[[1.0]])
    _raises("holdout_forecasts", holdout_actuals=[[1.0]], holdout_forecasts=[[1.0], [1.0]])
    _raises(
        "holdout_lower",
        holdout_actuals=[[1.0]],
        holdout_forecasts=[[1.0]],
        holdout_lower=[[0.0, 0.0]],
        holdout_upper=[[2.0, 2.0]],
    )
    _raises("ids", ids=["a", "b"])
    _raises("weights", weights=[1.0, 2.0])
    _raises(
        "level",
        holdout_actuals=[[1.0]],
        holdout_forecasts=[[1.0]],
        holdout_lower=[[0.0]],
        holdout_upper=[[2.0]],
        level=[0.9, 0.9],
    )


def test_a_missing_last_actual_is_a_gap():
    # The fitted value of a period whose actual is missing is a gap, not a rejected batch.
    b = make_batch([[1.0, 2.5, 2.0, None]], [[1.0, 2.0, 3.0, 3.0]])
    assert b.lengths.tolist() == [4]
    res = residuals_of(b)
    assert res.n_obs.tolist() == [3] and res.n_missing.tolist() == [1]
    # With lengths given, values past them are still an error naming the array.
    _raises("fitted", 0, actuals=[[1.0, 2.0, None]], fitted=[[1.0, 2.0, 3.0]], lengths=[2])
    _raises("lengths", 0, lengths=[4])


def test_burn_in_drops_the_first_fitted_values():
    actuals = [[5.0, 1.0, 2.0, 1.5, 2.5], [5.0, 1.0, 2.0, 1.5, 2.5]]
    fitted = [[0.0, 1.2, 1.8, 1.4, 2.4], [0.0, 1.2, 1.8, 1.4, 2.4]]
    b = make_batch(actuals, fitted, burn_in=[1, 2])
    res = residuals_of(b)
    assert res.start.tolist() == [1, 2] and res.n_obs.tolist() == [4, 3]
    assert b.burn_in.tolist() == [1, 2]
    assert make_batch(actuals, fitted, burn_in=1).burn_in.tolist() == [1, 1]
    _raises("burn_in", 1, actuals=actuals, fitted=fitted, burn_in=[1, -1])
    _raises("burn_in", None, actuals=actuals, fitted=fitted, burn_in=1.5)


@pytest.mark.parametrize(
    "name",
    ["actuals", "fitted", "holdout_actuals", "holdout_forecasts", "holdout_lower", "holdout_upper"],
)
@pytest.mark.parametrize("value", [np.inf, -np.inf])
def test_infinite_values(name, value):
    arrays = {
        "actuals": [[1.0, 2.0, 3.0], [1.0, 2.0, 3.0]],
        "fitted": [[1.0, 2.0, 3.0], [1.0, 2.0, 3.0]],
        "holdout_actuals": [[1.0], [1.0]],
        "holdout_forecasts": [[1.0], [1.0]],
        "holdout_lower": [[0.0], [0.0]],
        "holdout_upper": [[5.0], [5.0]],
    }
    arrays[name] = [row[:] for row in arrays[name]]
    arrays[name][1][0] = value
    _raises(name, 1, **arrays)


def test_non_numeric_values():
    _raises("actuals", actuals=[[1.0, "x", 3.0]])
    _raises("fitted", fitted=[1.0, 2.0, 3.0])  # not rows


def test_season_length_and_model_params():
    for bad in (0, -3):
        _raises("season_length", season_length=bad)
    for bad in (1.5, True, "4"):
        _raises("season_length", season_length=bad)
    _raises("model_params", model_params=-1)
    _raises("model_params", model_params=2.0)


def test_duplicate_ids():
    e = _raises("ids", 2, actuals=[[1.0]] * 3, fitted=[[1.0]] * 3, ids=["a", "b", "a"])
    assert "'a'" in str(e)


def test_weights():
    _raises("weights", 1, actuals=[[1.0]] * 2, fitted=[[1.0]] * 2, weights=[1.0, -2.0])
    _raises("weights", 0, actuals=[[1.0]] * 2, fitted=[[1.0]] * 2, weights=[np.inf, 1.0])
    b = make_batch([[1.0, -3.0], [2.0, None]], [[1.0, 1.0], [1.0, None]], weights=[None, 7.0])
    np.testing.assert_array_equal(b.weights, [4.0, 7.0])  # default: sum max(|actual|, |fitted|)
    assert b.weights_given.tolist() == [False, True]
    # An item forecast at 5 that sold nothing weighs what its forecasts put at stake.
    idle = make_batch([[0.0, 0.0, 0.0]], [[5.0, 5.0, 5.0]])
    np.testing.assert_array_equal(idle.weights, [15.0])


def test_holdout_parts_given_together():
    _raises("holdout_forecasts", holdout_actuals=[[1.0]])
    _raises("holdout_actuals", holdout_forecasts=[[1.0]])
    _raises(
        "holdout_upper", holdout_actuals=[[1.0]], holdout_forecasts=[[1.0]], holdout_lower=[[0.0]]
    )
    _raises(
        "holdout_lower", holdout_actuals=[[1.0]], holdout_forecasts=[[1.0]], holdout_upper=[[0.0]]
    )
    # Bounds without a holdout would otherwise be dropped without a word.
    _raises("holdout_actuals", holdout_lower=[[0.0]], holdout_upper=[[2.0]])


def test_run_checks_options_are_validated():
    b = make_batch([[1.0, 2.0, 3.0]], [[1.0, 2.0, 2.0]])
    with pytest.raises(InputError) as err:
        run_checks(b, {"ljung_bx": {"lags": 3}})
    assert err.value.argument == "options"
    with pytest.raises(InputError) as err:
        run_checks(b, only=("nope",))
    assert err.value.argument == "only"
    with pytest.raises(InputError) as err:
        run_checks(b, {"ljung_box": {"nlags": 3}})
    assert err.value.argument == "options.ljung_box"
    # None means "the default rule".
    assert run_checks(b, {"ljung_box": {"lags": None}})["ljung_box"].details["lags"][0] == 0


# --- Residual rules ---------------------------------------------------------------------------


def test_residual_bookkeeping():
    actuals = [[5.0, 6.0, 7.0, 8.0, 9.0, 10.0], [1.0, 2.0, None, 4.0], [None, None]]
    fitted = [[None, None, 6.5, 8.0, None, 9.0], [1.5, 2.0, 3.0, 3.0], [None, None]]
    b = make_batch(actuals, fitted)
    res = residuals_of(b)
    # computed by hand from the residual rules in service/core/batch.py's docstring.
    np.testing.assert_array_equal(res.lengths, [6, 4, 0])
    np.testing.assert_array_equal(res.start, [2, 0, 0])
    np.testing.assert_array_equal(res.n_obs, [3, 3, 0])
    np.testing.assert_array_equal(res.n_missing, [1, 1, 0])
    np.testing.assert_allclose(res.mean[:2], [np.mean([0.5, 0.0, 1.0]), np.mean([-0.5, 0, 1])])
    assert np.isnan(res.mean[2])
    d = data_sufficiency(res)
    np.testing.assert_array_equal(d.statistic, [3, 3, 0])
    np.testing.assert_array_equal(d.details["n_leading"], [2, 0, 0])
    np.testing.assert_allclose(d.details["missing_share"], [0.25, 0.25, 0.0])
    assert (d.skip_reason == None).all()  # noqa: E711 (object array comparison)


# --- Edge cases across every check: skip with a reason, never raise -------------------------


def test_degenerate_rows_never_raise():
    rows_a = [
        [3.0] * 30,
        [0.0] * 30,
        [None] * 30,
        [1.0],
        [1.0, 2.0],
        [1.0, 2.0, 3.0, 5.0],
        [2.0, -2.0] * 15,
    ]
    rows_f = [
        [2.5] * 30,
        [0.0] * 30,
        [None] * 30,
        [1.0],
        [None, 2.5],
        [1.0, 1.0, 2.0, 4.0],
        [0.0] * 30,
    ]
    horizon = [[3.0, 3.0]] * 7
    b = make_batch(
        rows_a,
        rows_f,
        season_length=2,
        model_params=1,
        holdout_actuals=horizon,
        holdout_forecasts=horizon,
        holdout_lower=[[2.0, 2.0]] * 7,
        holdout_upper=[[4.0, 4.0]] * 7,
        baseline_forecasts=[[3.0, None]] * 7,
    )
    out = run_checks(b)
    assert tuple(out.checks) == CHECK_NAMES
    constant, zero, missing, one, two, four, plus_minus = range(7)
    for name in ("ljung_box", "arch_lm", "jarque_bera", "tracking_signal"):
        r = out[name]
        for i in (constant, zero, missing, one, two, four, plus_minus):
            if name in ("ljung_box", "jarque_bera", "tracking_signal") and i == plus_minus:
                continue
            assert isinstance(r.skip_reason[i], str) and r.skip_reason[i], (name, i)
            assert np.isnan(r.statistic[i]) and np.isnan(r.p_value[i])
    bias = out["bias"]
    assert np.isposinf(bias.statistic[constant]) and bias.p_value[constant] == 0
    for i in (zero, missing, one, two):
        assert bias.skip_reason[i], i
    # Holdout checks: the all-missing row has no training data.
    assert out["mase"].skip_reason[missing].startswith("training series too short")
    assert out["mase"].skip_reason[zero].startswith("the in-sample naive forecast is exact")
    assert out["benchmark_skill"].skip_reason[missing] == (
        "no benchmark could be fitted to the training actuals"
    )
    assert (out["interval_coverage"].skip_reason == None).all()  # noqa: E711
    np.testing.assert_array_equal(out["data_sufficiency"].statistic, [30, 30, 0, 1, 1, 4, 30])


def test_empty_batch_and_zero_width():
    out = run_checks(make_batch(np.zeros((0, 5)), np.zeros((0, 5))))
    assert all(r.n_series == 0 for r in out.checks.values())
    out = run_checks(make_batch(np.zeros((2, 0)), np.zeros((2, 0))))
    assert out["ljung_box"].skip_reason[0] == "fewer than 2 residuals"


# --- Vectorised equals per-series references on a mixed batch --------------------------------


def test_batch_equals_per_series_references():
    # Invented fleet: mixed lengths (ragged right padding), leading NaN fitted values and
    # interior-free spans, checked against statsmodels/scipy one series at a time.
    rng = np.random.default_rng(2026)
    lengths = rng.integers(20, 157, 40)
    actuals, fitted = [], []
    for n in lengths:
        y = rng.normal(100, 10, n)
        f = y - rng.standard_t(5, n) * rng.uniform(0.5, 3)
        f[: rng.integers(0, 4)] = np.nan
        actuals.append(list(y))
        fitted.append([None if np.isnan(v) else v for v in f])
    out = run_checks(make_batch(actuals, fitted))
    for i in range(len(lengths)):
        e = np.array(actuals[i]) - np.array([np.nan if v is None else v for v in fitted[i]])
        e = e[~np.isnan(e)]
        n = e.size
        lb_lags = min(10, n // 5)
        lb = acorr_ljungbox(e, lags=[lb_lags], boxpierce=True)
        # The classical Ljung-Box figures, in the autocorrelation check's details.
        classical = out["ljung_box"].details
        np.testing.assert_allclose(classical["ljung_box"][i], lb["lb_stat"].iloc[0], rtol=RTOL)
        np.testing.assert_allclose(
            classical["ljung_box_p_value"][i], lb["lb_pvalue"].iloc[0], rtol=RTOL
        )
        arch = het_arch(e, nlags=min(10, n // 5), result_object=True)
        np.testing.assert_allclose(out["arch_lm"].statistic[i], arch.lm, rtol=RTOL)
        # The normality check tests with Shapiro-Wilk (scipy.stats.shapiro; its Fortran
        # constants are single precision, hence 1e-7) and keeps Jarque-Bera in its details.
        jb = stats.jarque_bera(e)
        normal = out["jarque_bera"]
        np.testing.assert_allclose(normal.details["jarque_bera"][i], jb.statistic, rtol=RTOL)
        np.testing.assert_allclose(normal.details["jarque_bera_p_value"][i], jb.pvalue, rtol=RTOL)
        sw = stats.shapiro(e)
        np.testing.assert_allclose(normal.statistic[i], sw.statistic, rtol=1e-7)
        np.testing.assert_allclose(normal.p_value[i], sw.pvalue, rtol=1e-7)
        t = stats.ttest_1samp(e, 0.0)
        b0 = run_checks(
            make_batch([actuals[i]], [fitted[i]]), {"bias": {"hac_lags": 0}}, only=("bias",)
        )["bias"]
        # The Newey-West t with 0 lags, in the bias check's details.
        np.testing.assert_allclose(
            b0.details["nw_t"][0], t.statistic * np.sqrt(n / (n - 1)), rtol=RTOL
        )


# --- Hypothesis properties --------------------------------------------------------------------

finite = st.floats(-1e3, 1e3, allow_nan=False, allow_infinity=False)


@st.composite
def series(draw):
    n = draw(st.integers(0, 45))
    actuals = draw(st.lists(finite, min_size=n, max_size=n))
    fitted = draw(st.lists(finite, min_size=n, max_size=n))
    lead = draw(st.integers(0, min(n, 3)))
    gaps = draw(st.lists(st.integers(0, max(n - 1, 0)), max_size=3)) if n else []
    fitted = [None if (j < lead or j in gaps) else v for j, v in enumerate(fitted)]
    # Missing actuals inside the span (the last one stays: it ends the training period).
    holes = draw(st.lists(st.integers(0, max(n - 2, 0)), max_size=4)) if n > 1 else []
    actuals = [None if j in holes else v for j, v in enumerate(actuals)]
    fitted = [None if j in holes else v for j, v in enumerate(fitted)]
    h = draw(st.integers(0, 6))
    ha = draw(st.lists(finite, min_size=h, max_size=h))
    hf = draw(st.lists(finite, min_size=h, max_size=h))
    width = draw(st.lists(st.floats(0, 50), min_size=h, max_size=h))
    lower = [f - w for f, w in zip(hf, width, strict=True)]
    upper = [f + w for f, w in zip(hf, width, strict=True)]
    # The baseline version's forecasts, some periods unmatched, with their own intervals.
    bf = draw(st.lists(st.one_of(st.none(), finite), min_size=h, max_size=h))
    bw = draw(st.lists(st.floats(0, 50), min_size=h, max_size=h))
    blo = [None if f is None else f - w for f, w in zip(bf, bw, strict=True)]
    bup = [None if f is None else f + w for f, w in zip(bf, bw, strict=True)]
    return {
        "a": actuals,
        "f": fitted,
        "ha": ha,
        "hf": hf,
        "lo": lower,
        "up": upper,
        "bf": bf,
        "blo": blo,
        "bup": bup,
    }


def _batch(items, season_length=1, pad=0):
    def rows(key):
        return [s[key] + [None] * pad for s in items] if key in "af" else [s[key] for s in items]

    return make_batch(
        rows("a"),
        rows("f"),
        season_length=season_length,
        model_params=1,
        holdout_actuals=rows("ha"),
        holdout_forecasts=rows("hf"),
        holdout_lower=rows("lo"),
        holdout_upper=rows("up"),
        level=0.9,
        baseline_forecasts=rows("bf"),
        baseline_lower=rows("blo"),
        baseline_upper=rows("bup"),
    )


def _close(a, b, msg):
    if a is None or b is None or isinstance(a, str):
        assert a == b, msg
    else:
        # Equal up to floating-point summation order: the batch's width and block sizes change
        # the order in which numpy adds a row's terms (differences of a few ulps).
        np.testing.assert_allclose(a, b, rtol=1e-9, atol=1e-12, err_msg=msg)


def _assert_same(out_a, i, out_b, j):
    for name in CHECK_NAMES:
        a, b = out_a[name], out_b[name]
        _close(a.statistic[i], b.statistic[j], name)
        _close(a.p_value[i], b.p_value[j], name)
        assert a.skip_reason[i] == b.skip_reason[j], name
        assert a.detail_keys == b.detail_keys, name
        for key in a.detail_keys:
            _close(a.details[key][i], b.details[key][j], f"{name}.{key}")


@given(
    items=st.lists(series(), min_size=1, max_size=6), m=st.sampled_from([1, 2, 4]), data=st.data()
)
def test_shuffling_series_changes_nothing(items, m, data):
    perm = data.draw(st.permutations(range(len(items))))
    out = run_checks(_batch(items, m))
    shuffled = run_checks(_batch([items[k] for k in perm], m))
    for j, k in enumerate(perm):
        _assert_same(out, k, shuffled, j)


@given(items=st.lists(series(), min_size=2, max_size=6), m=st.sampled_from([1, 3]))
def test_a_series_does_not_depend_on_the_others(items, m):
    out = run_checks(_batch(items, m))
    for i, item in enumerate(items):
        _assert_same(out, i, run_checks(_batch([item], m)), 0)


@given(item=series(), pad=st.integers(1, 30), m=st.sampled_from([1, 2]))
def test_trailing_padding_changes_nothing(item, pad, m):
    _assert_same(run_checks(_batch([item], m)), 0, run_checks(_batch([item], m, pad=pad)), 0)


# --- Units: the statistics do not depend on the unit of measurement --------------------------


@pytest.mark.parametrize("unit", [1e-200, 1e-60, 1e-6, 1e6, 1e60, 1e200])
def test_scale_free_results_do_not_depend_on_the_unit(unit):
    # Invented fleet measured in another unit: every test statistic, p-value and scale-free
    # metric is unchanged (no overflow of squares or fourth powers, no underflow).
    rng = np.random.default_rng(12)
    a = rng.normal(50, 10, (4, 60))
    f = a - rng.standard_t(4, (4, 60))
    f[:, 0] = np.nan
    ha = rng.normal(50, 10, (4, 6))
    hf = ha + rng.normal(0, 2, (4, 6))
    bf = ha + rng.normal(0, 2, (4, 6))

    def run(k):
        return run_checks(
            make_batch(
                a * k,
                f * k,
                season_length=4,
                holdout_actuals=ha * k,
                holdout_forecasts=hf * k,
                holdout_lower=(hf - 3) * k,
                holdout_upper=(hf + 3) * k,
                level=0.8,
                baseline_forecasts=bf * k,
            )
        )

    base, scaled = run(1.0), run(unit)
    for name in CHECK_NAMES:
        assert list(scaled[name].skip_reason) == list(base[name].skip_reason), name
        np.testing.assert_allclose(
            scaled[name].statistic, base[name].statistic, rtol=1e-9, err_msg=name
        )
        np.testing.assert_allclose(
            scaled[name].p_value, base[name].p_value, rtol=1e-9, err_msg=name
        )
    np.testing.assert_allclose(
        scaled["bias"].details["std_error"], base["bias"].details["std_error"] * unit, rtol=1e-9
    )


def test_constant_residuals_on_a_large_level_are_constant():
    # Invented: sales around 1.5 million, forecasts 0.1 low everywhere. actual - fitted carries
    # the rounding of numbers near 1e6 (about 1e-10), which must not be tested as if it were data.
    rng = np.random.default_rng(3)
    a = rng.uniform(1e6, 2e6, (1, 80))
    out = run_checks(make_batch(a, a - 0.1))
    assert np.ptp(a - (a - 0.1)) > 0  # the rounding is really there
    for name in ("tracking_signal", "ljung_box", "arch_lm", "jarque_bera"):
        assert out[name].skip_reason[0] is not None, name
    assert np.isposinf(out["bias"].statistic[0])


def test_values_beyond_the_supported_magnitude():
    _raises("actuals", 0, actuals=[[1.0, 2e250, 3.0]])
    _raises("holdout_forecasts", 0, holdout_actuals=[[1.0]], holdout_forecasts=[[-1e251]])


any_magnitude = st.one_of(
    st.floats(-1e250, 1e250, allow_nan=False, allow_infinity=False),
    st.floats(-1e-250, 1e-250, allow_nan=False, allow_infinity=False),
    st.integers(-5, 5).map(float),
)


@given(
    rows=st.lists(
        st.lists(st.one_of(st.none(), any_magnitude), max_size=30), min_size=1, max_size=4
    ),
    m=st.sampled_from([1, 2, 5]),
    data=st.data(),
)
def test_any_accepted_input_runs_every_check(rows, m, data):
    # Whatever finite values make_batch accepts, no check raises (the CheckResult itself
    # refuses a NaN statistic without a skip reason) and no RuntimeWarning escapes.
    fitted = [[data.draw(st.one_of(st.none(), any_magnitude)) for _ in r] for r in rows]
    fitted = [
        [None if a is None else f for a, f in zip(r, fr, strict=True)]
        for r, fr in zip(rows, fitted, strict=True)
    ]
    h = data.draw(st.integers(0, 4))
    ha = [[data.draw(any_magnitude) for _ in range(h)] for _ in rows]
    hf = [[data.draw(any_magnitude) for _ in range(h)] for _ in rows]
    lower = [[min(a, f) for a, f in zip(x, y, strict=True)] for x, y in zip(ha, hf, strict=True)]
    upper = [[max(a, f) for a, f in zip(x, y, strict=True)] for x, y in zip(ha, hf, strict=True)]
    out = run_checks(
        make_batch(
            rows,
            fitted,
            season_length=m,
            holdout_actuals=ha,
            holdout_forecasts=hf,
            holdout_lower=lower,
            holdout_upper=upper,
            baseline_forecasts=[
                [data.draw(st.one_of(st.none(), any_magnitude)) for _ in x] for x in ha
            ],
        )
    )
    for name in CHECK_NAMES:
        r = out[name]
        ran = r.skip_reason == None  # noqa: E711 (object array comparison)
        assert not np.isnan(r.statistic[ran]).any(), name
