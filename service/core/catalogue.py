"""The catalogue of checks: what each tests, its defaults and its published source."""

from __future__ import annotations

from dataclasses import dataclass

from .results import CheckKind


@dataclass(frozen=True)
class CheckSpec:
    """Static description of one check."""

    name: str
    title: str
    kind: CheckKind
    family: str
    needs_holdout: bool
    tests: str
    null_hypothesis: str
    defaults: str
    details: tuple[str, ...]
    source: str


CATALOGUE: tuple[CheckSpec, ...] = (
    CheckSpec(
        name="data_sufficiency",
        title="Data sufficiency",
        kind="metric",
        family="sufficiency",
        needs_holdout=False,
        tests="enough usable residuals for the other checks",
        null_hypothesis="",
        defaults="n_obs counts observed residuals; interior gaps are counted in n_missing",
        details=("n_obs", "n_missing", "n_leading", "missing_share"),
        source="project rule (see the policy's min_obs)",
    ),
    CheckSpec(
        name="bias",
        title="Bias",
        kind="test",
        family="bias",
        needs_holdout=False,
        tests="mean residual is zero: t test with a Newey-West (HAC, Bartlett) standard error",
        null_hypothesis="the residuals have mean zero",
        defaults="hac_lags = floor(4 (T/100)^(2/9)); Student t with T-1 df; 95% interval",
        details=(
            "mean_error",
            "std_error",
            "ci_low",
            "ci_high",
            "percent_bias",
            "correction",
            "hac_lags",
            "df",
        ),
        source="Newey & West (1987), Econometrica 55:703-708; lag rule Newey & West (1994)",
    ),
    CheckSpec(
        name="tracking_signal",
        title="Tracking signal",
        kind="test",
        family="bias",
        needs_holdout=False,
        tests="recent bias: sum of the last errors over their mean absolute error",
        null_hypothesis="the last errors have mean zero",
        defaults="window 12 (common practice); p-value from N(0, w s^2) for the sum",
        details=(
            "window",
            "sum_error",
            "mean_absolute_error",
            "z",
            "trade_limit",
            "beyond_trade_limit",
        ),
        source="Brown (1959), Statistical Forecasting for Inventory Control; trade practice",
    ),
    CheckSpec(
        name="ljung_box",
        title="Ljung-Box autocorrelation",
        kind="test",
        family="autocorrelation",
        needs_holdout=False,
        tests="residual autocorrelation up to lag L, portmanteau test",
        null_hypothesis="the residuals are not autocorrelated up to the tested lag",
        defaults="L = 10 non-seasonal, 2m seasonal, at most T/5 (common practice); "
        "df = L - model_params",
        details=("lags", "df", "box_pierce", "box_pierce_p_value", "acf_lag1"),
        source="Ljung & Box (1978), Biometrika 65:297-303; Box & Pierce (1970), JASA 65:1509-1526",
    ),
    CheckSpec(
        name="arch_lm",
        title="ARCH LM variance",
        kind="test",
        family="variance",
        needs_holdout=False,
        tests="residual variance not constant: n R^2 of squared residuals on their own lags",
        null_hypothesis="the residual variance is constant (no ARCH effects)",
        defaults="L = min(10, T/5), statsmodels' het_arch default",
        details=("lags", "df", "n_rows"),
        source="Engle (1982), Econometrica 50:987-1007",
    ),
    CheckSpec(
        name="jarque_bera",
        title="Jarque-Bera normality",
        kind="test",
        family="normality",
        needs_holdout=False,
        tests="residual normality from skewness and kurtosis (population moments)",
        null_hypothesis="the residuals are normally distributed",
        defaults="at least 8 residuals; chi-square with 2 df",
        details=("skewness", "kurtosis", "excess_kurtosis", "df"),
        source="Jarque & Bera (1980), Economics Letters 6:255-259",
    ),
    CheckSpec(
        name="mase",
        title="MASE",
        kind="metric",
        family="accuracy",
        needs_holdout=True,
        tests="holdout MAE scaled by the in-sample (seasonal) naive MAE",
        null_hypothesis="",
        defaults="scale from lag-m differences of the training actuals",
        details=("scale", "mae", "horizon", "season_length"),
        source="Hyndman & Koehler (2006), IJF 22:679-688",
    ),
    CheckSpec(
        name="benchmark_skill",
        title="Benchmark skill",
        kind="metric",
        family="benchmarks",
        needs_holdout=True,
        tests="holdout RMSE against the best of mean, naive, seasonal naive and drift",
        null_hypothesis="",
        defaults="skill = 1 - RMSE(model) / RMSE(best benchmark)",
        details=("best_benchmark", "skill", "rmse_model", "rmse_best"),
        source="Hyndman & Athanasopoulos, Forecasting: Principles and Practice, simple methods",
    ),
    CheckSpec(
        name="interval_coverage",
        title="Interval coverage",
        kind="test",
        family="intervals",
        needs_holdout=True,
        tests="holdout interval coverage against the nominal level (Kupiec POF test)",
        null_hypothesis="the intervals miss at their nominal rate 1 - level",
        defaults="level 0.95 unless given; Winkler score reported",
        details=(
            "coverage",
            "level",
            "misses",
            "misses_below",
            "misses_above",
            "n_scored",
            "winkler_score",
        ),
        source="Kupiec (1995), J. Derivatives 3:73-84; Winkler (1972), JASA 67:187-191",
    ),
)

CHECK_NAMES: tuple[str, ...] = tuple(spec.name for spec in CATALOGUE)
SPECS = {spec.name: spec for spec in CATALOGUE}
