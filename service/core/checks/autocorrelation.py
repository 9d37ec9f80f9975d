"""Residual autocorrelation: a portmanteau test robust to changing variance, with the classical
Ljung-Box and Box-Pierce statistics beside it.

The check (``ljung_box``, its name kept) tests with the robust portmanteau of Dalla, Giraitis &
Phillips (2022) (:mod:`service.core.robust_portmanteau`), which keeps its size under GARCH-type
residuals where Ljung-Box rejects several times too often, and beside it the robust lag-1
regression test (:mod:`service.core.lag_one_regression`), the more powerful against first-order
autocorrelation; the classical statistics stay in ``details``, matching statsmodels.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import TYPE_CHECKING, Any

import numpy as np

from ..batch import Residuals
from ..fleet_autocorrelation import fleet_lag_from_parts, fleet_lag_part
from ..fleet_parts import FleetPart
from ..lag_one_regression import lag_one_regression
from ..registry import (
    CheckDef,
    CheckInputs,
    CheckPolicy,
    Finding,
    FleetFinding,
    FleetTest,
    Option,
    fmt,
)
from ..results import NONE, CheckResult, skip_reasons_and_ran, to_python
from ..robust_portmanteau import robust_portmanteau
from ..tails import chi2_sf
from ..types import BoolMatrix, FloatMatrix, FloatVector, InputError, IntVector

if TYPE_CHECKING:
    from ..policy import Policy
    from ..runner import BatchChecks

NONSEASONAL_LAGS = 10


def portmanteau_lags(n_obs: IntVector, season_length: int) -> IntVector:
    """Lag rule (common practice, a rule of thumb with no single source): 10 lags for
    non-seasonal data, ``2 m`` for seasonal period ``m``, at most ``floor(T / 5)``.

    ``T = 104, m = 1`` gives 10; ``T = 156, m = 52`` gives 31; ``T = 40, m = 1`` gives 8.
    """
    base = NONSEASONAL_LAGS if season_length <= 1 else 2 * season_length
    return np.minimum(base, np.asarray(n_obs) // 5).astype(np.int64)


def autocorrelations(res: Residuals, max_lag: int) -> FloatMatrix:
    """Sample autocorrelations ``r_1..r_max_lag`` per series (shape ``(n, max_lag)``).

    ``r_k = gamma_k / gamma_0`` with the autocovariances of
    :meth:`Residuals.autocovariances` (observed pairs, divided by ``n_obs``): statsmodels'
    ``acf(x, adjusted=False, missing="conservative")``.
    """
    gamma = res.standard_autocovariances(max_lag)  # the ratio does not depend on the unit
    with np.errstate(invalid="ignore", divide="ignore", over="ignore"):
        return gamma[:, 1:] / gamma[:, :1]


def portmanteau_q(
    r: FloatMatrix, n_obs: IntVector, lags: IntVector
) -> tuple[FloatVector, FloatVector]:
    """Ljung-Box and Box-Pierce statistics from autocorrelations ``r[:, k - 1] = r_k``.

    ``Q = T (T + 2) sum_{k=1..L} r_k^2 / (T - k)`` and ``Q_BP = T sum_{k=1..L} r_k^2`` with
    ``T = n_obs`` and ``L = lags`` per row (columns past ``L`` are ignored). From the NIST/SEMATECH
    e-Handbook's Series F (``T = 70``, ``r_1 = -0.389878319``), ``Q(1) = 11.103``.
    """
    r = np.atleast_2d(np.asarray(r, dtype=float))
    n = np.asarray(n_obs, dtype=float).reshape(-1)
    lags = np.asarray(lags).reshape(-1)
    k = np.arange(1, r.shape[1] + 1)[None, :]
    within = k <= lags[:, None]
    with np.errstate(invalid="ignore", divide="ignore", over="ignore"):
        lb_terms = np.where(within, r * r / (n[:, None] - k), 0.0)
        bp_terms = np.where(within, r * r, 0.0)
    # Summed lag by lag in order (not pairwise over the columns): a row's sums then do not
    # depend on how many columns the batch's longest lag rule gives.
    lb = np.zeros(r.shape[0])
    bp = np.zeros(r.shape[0])
    for j in range(r.shape[1]):
        lb += lb_terms[:, j]
        bp += bp_terms[:, j]
    return n * (n + 2.0) * lb, n * bp


def ljung_box(
    res: Residuals,
    *,
    season_length: int = 1,
    model_params: int = 0,
    lags: int | None = None,
    min_obs: int = 0,
) -> CheckResult:
    """Ljung-Box test of no autocorrelation up to lag ``L`` (Ljung & Box 1978).

    ``Q = T (T + 2) sum_{k=1..L} r_k^2 / (T - k)`` with ``T = n_obs``, referred to chi-square
    with ``df = L - model_params``; Box-Pierce ``Q_BP = T sum r_k^2`` (Box & Pierce 1970) is
    reported in ``details`` with its p-value on the same ``df``. ``L`` follows
    :func:`portmanteau_lags` unless ``lags`` is given (still capped at ``T - 1``).
    Matches statsmodels' ``acorr_ljungbox(x, lags=[L], model_df=model_params, boxpierce=True)``.

    Skipped when ``df <= 0`` (too few lags for the parameters estimated), when the series is
    too short for one lag, or when the residuals are constant (no autocorrelation is defined).
    """
    if model_params < 0:
        raise InputError("model_params", f"must be 0 or more, got {model_params}")
    if lags is not None and lags < 1:
        raise InputError("lags", f"must be at least 1, got {lags}")
    n = res.n_obs
    used = portmanteau_lags(n, season_length) if lags is None else np.full(n.shape, lags)
    used = np.minimum(np.maximum(used, 0), np.maximum(n - 1, 0)).astype(np.int64)
    max_lag = int(used.max(initial=0))
    df = used - model_params
    reasons, ran = skip_reasons_and_ran(
        n.shape[0],
        (n < max(min_obs, 2), f"fewer than {max(min_obs, 2)} residuals"),
        (used < 1, "too short for one lag (the lag rule allows at most T/5)"),
        (df <= 0, f"no degrees of freedom left: lags minus {model_params} model parameters <= 0"),
        (res.constant, "residuals are constant, so autocorrelation is undefined"),
    )
    if max_lag >= 1:
        r = autocorrelations(res, max_lag)
        q, q_bp = portmanteau_q(r, n, used)
        r1 = r[:, 0]
    else:
        q = q_bp = r1 = np.full(n.shape, np.nan)
    safe_df = np.maximum(df, 1)
    q = np.where(ran, q, np.nan)
    q_bp = np.where(ran, q_bp, np.nan)
    return CheckResult(
        name="ljung_box",
        kind="test",
        statistic=q,
        p_value=chi2_sf(q, safe_df),
        details={
            "lags": used,
            "df": df,
            "box_pierce": q_bp,
            "box_pierce_p_value": chi2_sf(q_bp, safe_df),
            "acf_lag1": np.where(ran, r1, np.nan),
        },
        skip_reason=reasons,
        null_hypothesis="the residuals are not autocorrelated up to the tested lag",
    )


def autocorrelation_lags(
    n_obs: IntVector, season_length: int = 1, model_params: int = 0, lags: int | None = None
) -> tuple[BoolMatrix, BoolMatrix, np.ndarray]:
    """The lags the check tests, per series, as masks (column ``k - 1`` is lag ``k``): the
    short lags, the seasonal lags, and where the short lags grew for the model's parameters.

    Rule: short lags ``1..L`` with ``L = min(ceil(ln T), floor(T / 5))`` (or ``lags``), the
    choice simulation studies favour for power (Tsay 2010, Analysis of Financial Time Series,
    3rd ed., section 2.2, from memory) and the one that keeps the robust test's far tail, where
    the gate's family-wise thresholds sit, close to its chi-square reference (measured: see the
    README's gate study). Seasonal lags, tested apart: ``m`` wherever ``T >= 2 m`` and ``2 m``
    wherever ``T >= 6 m`` (with at least ``SEASONAL_MIN_OBS`` residuals), so the seasonal lag
    is tested whenever ``season_length`` is given and ``T >= max(2 m, 20)``. When
    ``model_params`` leaves the short lags no degrees of freedom
    (``L - model_params <= 0``) they grow until ``df = 2``, never past ``floor(T / 3)``;
    past that the short test skips. ``T = 104, m = 12``: lags 1..5, seasonal 12 and 24;
    ``T = 156, m = 52``: lags 1..6, seasonal 52; ``T = 52, m = 1`` with 12 model parameters:
    lags 1..14.
    """
    n = np.asarray(n_obs, dtype=np.int64).reshape(-1)
    m = int(season_length)
    if lags is None:
        log_lags = np.ceil(np.log(np.maximum(n, 1))).astype(np.int64)
        base = np.minimum(log_lags, n // 5)
    else:
        base = np.minimum(int(lags), np.maximum(n - 1, 0))
    grown = np.asarray(model_params + 2, dtype=np.int64)
    grow = (base - model_params <= 0) & (grown <= n // 3)
    top = np.where(grow, grown, base)
    width = int(max(top.max(initial=0), 2 * m if m > 1 else 0, 1))
    k = np.arange(1, width + 1)[None, :]
    short = k <= top[:, None]
    seasonal = np.zeros_like(short)
    if m > 1:
        enough = n[:, None] >= SEASONAL_MIN_OBS
        seasonal = enough & (
            ((k == m) & (2 * m <= n[:, None])) | ((k == 2 * m) & (6 * m <= n[:, None]))
        )
    return short, seasonal, grow


def _lag_autocorrelations(res: Residuals, lag_values: np.ndarray) -> FloatMatrix:
    """``r_k`` (observed pairs over ``n_obs``, as :func:`autocorrelations`) at the given lags."""
    z = res.standard
    width = z.shape[1]
    gamma0 = res.lag_products(0)
    out = np.full((z.shape[0], lag_values.size), np.nan)
    with np.errstate(invalid="ignore", divide="ignore", over="ignore"):
        for j, k in enumerate(lag_values.tolist()):
            if k < width:
                out[:, j] = res.lag_products(k) / gamma0
    return out


LAG1_MIN_OBS = 30
"""Fewest residuals for the lag-1 regression test. Below 30 its Bell-McCaffrey reference is
conservative enough (white noise at T = 20: 0.34% at 1% through the check) that the check's level
would fall under half its nominal rate; there lag 1 stays in the portmanteau alone (measured: the
README's gate study)."""

TEST_WEIGHTS = (2.0, 1.0, 1.0)
"""Shares of the check's level given to its three tests (the lag-1 regression; the portmanteau on
the other short lags, lags 2..L, or 1..L with fitted model parameters; the portmanteau on the
seasonal lags), normalised over the tests that ran for the series: 2/3 and 1/3 without the
seasonal lags, 1/2, 1/4 and 1/4 with them. A project rule: first-order autocorrelation is the
structure a model leaves most often, and the lag-1 regression the most powerful test of it
(the README's gate study measures what each share gains and costs)."""

DECIDERS = ("lag1", "short", "seasonal")
"""``details.decided_by``: the test whose weighted p-value decided, in the order of
:data:`TEST_WEIGHTS`."""


def weighted_bonferroni(
    p_values: tuple[FloatVector, ...], weights: tuple[float, ...]
) -> tuple[FloatVector, IntVector]:
    """One p-value per series from several tests of the same null: ``min_i p_i / w_i`` (at most
    1) with the weights ``w_i`` normalised over the tests with a finite p-value, and the index
    of the test that gave it (``-1`` where none ran).

    The weighted Bonferroni rule (Rosenthal & Rubin 1983, "Ensemble-adjusted p values",
    Psychological Bulletin 94; Holm 1979 gives its weighted step-down form; both from memory):
    rejecting where ``p_i <= w_i alpha`` for some ``i`` has level at most ``alpha`` whatever the
    tests' dependence, since ``sum_i w_i alpha = alpha`` (Boole's inequality). Equal weights
    give ``k min_i p_i``.
    """
    p = np.vstack([np.asarray(v, dtype=float) for v in p_values])
    ran = np.isfinite(p)
    w = np.asarray(weights, dtype=float)[:, None] * ran
    total = w.sum(axis=0)
    with np.errstate(invalid="ignore", divide="ignore"):
        scaled = np.where(ran, p * total / w, np.inf)
    decided = np.argmin(scaled, axis=0)
    best = scaled[decided, np.arange(p.shape[1])]
    none = ~ran.any(axis=0)
    return np.where(none, np.nan, np.minimum(1.0, best)), np.where(none, -1, decided)


SEASONAL_MIN_OBS = 20
"""Fewest residuals for the seasonal lags' test (the data-sufficiency threshold)."""

PEAKS = 3
"""How many of the largest autocorrelations the details and the reason name."""


def autocorrelation_test(
    res: Residuals,
    *,
    season_length: int = 1,
    model_params: int = 0,
    lags: int | None = None,
    min_obs: int = 0,
    lag1_weight: float | None = None,
) -> CheckResult:
    """The autocorrelation check: the robust portmanteau over :func:`autocorrelation_lags`
    beside the robust lag-1 regression test.

    ``Q~ = t~' R*^{-1} t~`` (Dalla, Giraitis & Phillips 2022; see
    :func:`service.core.robust_portmanteau.robust_lag_statistics`) over the ``K`` tested lags,
    chi-square with ``df = K - model_params``, on the short lags and apart on the seasonal
    lags; the lag-1 regression t test of :func:`service.core.lag_one_regression.lag_one_regression`
    from :data:`LAG1_MIN_OBS` residuals wherever the short lags are tested, lag 1 then leaving
    the portmanteau unless ``model_params`` is given. One p-value: :func:`weighted_bonferroni`
    over the tests that ran, weights :data:`TEST_WEIGHTS`; ``statistic`` is the deciding test's
    (``Q~``, or the regression's ``t``). ``details``: ``lags`` (the short lags tested, by
    either test), ``df`` (the short portmanteau's), ``short_first_lag`` (the portmanteau's first
    lag: 2 where lag 1 went to the regression) and ``short_last_lag`` (``L``),
    ``max_lag``, ``seasonal_lags`` (how many of ``m``, ``2 m`` are tested), ``decided_by``
    (:data:`DECIDERS`), ``lag1_slope``, ``lag1_t``, ``lag1_df``, ``lag1_p_value``, ``lags_grown``,
    ``method = "robust"``, the ``PEAKS`` largest autocorrelations among the tested lags
    (``peak_lag_1``, ``peak_acf_1``, ...), and the classical figures of :func:`ljung_box` with
    the classical lag rule (``ljung_box``, ``ljung_box_p_value``, ``classical_lags``,
    ``classical_df``, ``box_pierce``, ``box_pierce_p_value``, ``acf_lag1``).

    ``lag1_weight`` is the lag-1 regression's weight against 1 for each portmanteau (default
    ``TEST_WEIGHTS[0] = 2``); 0 leaves lag 1 to the short portmanteau, the check of the build
    before the regression joined (more power against structure beyond lag 1, less against
    first-order autocorrelation: the README's gate study).

    Skipped below ``min_obs`` (at least 2) residuals, when no lag can be tested, when no
    degrees of freedom are left even with the lags grown, or when the residuals are constant.
    """
    if model_params < 0:
        raise InputError("model_params", f"must be 0 or more, got {model_params}")
    weight = TEST_WEIGHTS[0] if lag1_weight is None else float(lag1_weight)
    if not (np.isfinite(weight) and weight >= 0):
        raise InputError("lag1_weight", f"must be a number 0 or more, got {lag1_weight}")
    if lags is not None and lags < 1:
        raise InputError("lags", f"must be at least 1, got {lags}")
    n = res.n_obs
    short_mask, seasonal_mask, grown = autocorrelation_lags(n, season_length, model_params, lags)
    # From LAG1_MIN_OBS residuals lag 1 is the lag-1 regression's to test and the portmanteau
    # takes the other short lags: the two then look at different lags, nearly independent under
    # the null, so the Bonferroni rule below loses little of its level. With fitted model
    # parameters the portmanteau keeps lag 1, since its degrees-of-freedom correction counts the
    # lags from 1.
    k_short = short_mask.sum(axis=1)
    use_lag1 = short_mask[:, 0] & (k_short - model_params > 0) & (n >= LAG1_MIN_OBS)
    use_lag1 &= weight > 0
    in_portmanteau = short_mask.copy()
    if model_params == 0:
        in_portmanteau[:, 0] &= ~use_lag1
    short = robust_portmanteau(res, lags=in_portmanteau, model_params=model_params)
    has_seasonal = seasonal_mask.any(axis=1)
    if has_seasonal.any():
        seasonal = robust_portmanteau(res, lags=seasonal_mask)
        p_seasonal = np.where(has_seasonal & ~seasonal.skipped, seasonal.p_value, np.nan)
        q_seasonal = np.where(has_seasonal & ~seasonal.skipped, seasonal.statistic, np.nan)
        k_seasonal = np.where(has_seasonal, seasonal.details["lags"], 0)
    else:
        p_seasonal = q_seasonal = np.full(n.shape, np.nan)
        k_seasonal = np.zeros(n.shape, dtype=np.int64)
    p_short = np.where(short.skipped, np.nan, short.p_value)
    if use_lag1.any():
        lag1 = lag_one_regression(res)
        lag1_slope, lag1_t, lag1_df = lag1.slope, lag1.t, lag1.df
        p_lag1 = np.where(use_lag1, lag1.p_value, np.nan)
    else:  # every series too short for it: nothing to compute
        lag1_slope = lag1_t = lag1_df = p_lag1 = np.full(n.shape, np.nan)
    p, decided = weighted_bonferroni((p_lag1, p_short, p_seasonal), (weight, *TEST_WEIGHTS[1:]))
    q = np.choose(np.maximum(decided, 0), (lag1_t, short.statistic, q_seasonal))
    classic = ljung_box(res, season_length=season_length, model_params=0)
    k = short.details["lags"]
    need = max(min_obs, 2)
    reasons, ran = skip_reasons_and_ran(
        n.shape[0],
        (n < need, f"fewer than {need} residuals"),
        (res.constant, "residuals are constant, so autocorrelation is undefined"),
        (
            (k_short < 1) & ~(k_seasonal > 0),
            "too short for one lag (the lag rule allows at most T/5)",
        ),
        (
            (k_short - model_params <= 0) & ~np.isfinite(p_seasonal),
            f"no degrees of freedom left for {model_params} model parameters, even with the "
            "lags grown to T/3",
        ),
        (~np.isfinite(p), "no lag has enough observed pairs to test"),
    )
    mask = short_mask | seasonal_mask
    lag_values = np.arange(1, mask.shape[1] + 1)
    used_lags = lag_values[mask.any(axis=0)]
    r = _lag_autocorrelations(res, used_lags)
    tested = mask[:, used_lags - 1] & np.isfinite(r)
    size = np.where(tested, np.abs(r), -1.0)
    # Ties (equal up to rounding) go to the shorter lag, whatever the summation order gave.
    order = np.argsort(-np.round(size, 12), axis=1, kind="stable")[:, :PEAKS]
    rows = np.arange(n.shape[0])[:, None]
    peak_lags = np.where(size[rows, order] >= 0, used_lags[order], 0)
    peak_acf = np.where(size[rows, order] >= 0, r[rows, order], np.nan)
    m = int(season_length)
    classical_df = classic.details["lags"] - model_params
    with np.errstate(invalid="ignore"):
        classical_p = np.where(
            classical_df > 0, chi2_sf(classic.statistic, np.maximum(classical_df, 1)), np.nan
        )
    details = {
        # The short lags tested: the portmanteau's and, where it left lag 1 to the regression, 1.
        "lags": k + (use_lag1 & (model_params == 0)),
        "df": short.details["df"],
        "short_first_lag": np.where(k > 0, in_portmanteau.argmax(axis=1) + 1, 0),
        "short_last_lag": np.where(short_mask, np.arange(1, short_mask.shape[1] + 1), 0).max(
            axis=1, initial=0
        ),
        "max_lag": np.where(mask, np.arange(1, mask.shape[1] + 1)[None, :], 0).max(axis=1),
        "short_statistic": np.where(ran, short.statistic, np.nan),
        "short_p_value": np.where(ran, p_short, np.nan),
        "seasonal_lags": k_seasonal.astype(np.int64),
        "seasonal_statistic": np.where(ran, q_seasonal, np.nan),
        "seasonal_p_value": np.where(ran, p_seasonal, np.nan),
        "decided_by": np.where(ran & (decided >= 0), np.array(DECIDERS)[decided], NONE),
        "lag1_slope": np.where(ran & use_lag1, lag1_slope, np.nan),
        "lag1_t": np.where(ran & use_lag1, lag1_t, np.nan),
        "lag1_df": np.where(ran & use_lag1, lag1_df, np.nan),
        "lag1_p_value": np.where(ran, p_lag1, np.nan),
        "lags_grown": grown,
        "season_length": np.full(n.shape, m),
        "method": np.full(n.shape, "robust", dtype=object),
        "diagonal_fallback": short.details["diagonal_fallback"],
    }
    for j in range(PEAKS):
        lag_j = peak_lags[:, j] if peak_lags.shape[1] > j else np.zeros(n.shape, dtype=int)
        acf_j = peak_acf[:, j] if peak_acf.shape[1] > j else np.full(n.shape, np.nan)
        details[f"peak_lag_{j + 1}"] = np.where(ran, lag_j, 0)
        details[f"peak_acf_{j + 1}"] = np.where(ran, acf_j, np.nan)
    details.update(
        {
            "ljung_box": np.where(ran, classic.statistic, np.nan),
            "ljung_box_p_value": np.where(ran, classical_p, np.nan),
            "classical_lags": classic.details["lags"],
            "classical_df": classical_df,
            "box_pierce": np.where(ran, classic.details["box_pierce"], np.nan),
            "box_pierce_p_value": np.where(
                ran & (classical_df > 0),
                chi2_sf(classic.details["box_pierce"], np.maximum(classical_df, 1)),
                np.nan,
            ),
            "acf_lag1": np.where(ran, classic.details["acf_lag1"], np.nan),
        }
    )
    return CheckResult(
        name="ljung_box",
        kind="test",
        statistic=np.where(ran, q, np.nan),
        p_value=np.where(ran, p, np.nan),
        details=details,
        skip_reason=reasons,
        null_hypothesis="the residuals are not autocorrelated at the tested lags",
    )


# ------------------------------------------------------------------------------- declarations


def _run(inputs: CheckInputs, **options: Any) -> CheckResult:
    batch = inputs.batch
    return autocorrelation_test(
        inputs.residuals,
        season_length=batch.season_length,
        model_params=batch.model_params,
        **options,
    )


def _found(f: Finding) -> str:
    peaks = []
    for j in range(1, PEAKS + 1):
        lag = int(f.detail(f"peak_lag_{j}"))
        if lag:
            peaks.append(f"{lag} ({fmt(float(f.detail(f'peak_acf_{j}')), 2)})")
    m = int(f.detail("season_length"))
    top = int(f.detail("peak_lag_1"))
    where = f"; the largest autocorrelations are at lags {', '.join(peaks)}" if peaks else ""
    if m > 1 and top and top % m == 0:
        where += f": seasonal, at a multiple of the season length {m}"
    decided = f.detail("decided_by")
    if decided == "seasonal":
        test = f"robust portmanteau Q = {fmt(f.statistic)} at the seasonal lags"
    elif decided == "lag1":
        test = (
            f"lag-1 regression slope {fmt(float(f.detail('lag1_slope')), 2)}, robust "
            f"t = {fmt(f.statistic)} on {fmt(float(f.detail('lag1_df')), 3)} df"
        )
    else:
        first, last = int(f.detail("short_first_lag")), int(f.detail("short_last_lag"))
        span = f"lag {first}" if first == last else f"lags {first}-{last}"
        test = f"robust portmanteau Q = {fmt(f.statistic)} on {span}, df {int(f.detail('df'))}"
    return f"residuals are autocorrelated ({test}, {f.p_text()}{where})"


MIN_ACF = 0.1
"""Default smallest fleet-average autocorrelation that matters: below 0.1 a lag explains less
than 1% of the residual variance."""


@dataclass(frozen=True)
class FleetAutocorrelation:
    """Structure left across the fleet (the result's ``fleet.autocorrelation``): the lag with
    the strongest pooled evidence, the series' average autocorrelation there, its pooled
    statistic and p-value (Bonferroni over the lags tried), ``seasonal`` when the lag is a
    multiple of the season length, and whether it is ``material``."""

    lag: int | None
    mean_acf: float
    statistic: float
    df: int
    p_value: float
    lags_tested: int
    series_used: int
    seasonal: bool
    material: bool | None
    method: str = "pooled robust lag statistics, Driscoll-Kraay"

    def to_dict(self) -> dict[str, Any]:
        return {k: to_python(v) for k, v in vars(self).items()}


_NO_FLEET_ACF = FleetAutocorrelation(
    None, float("nan"), float("nan"), 0, float("nan"), 0, 0, False, None
)


def _gather_fleet_autocorrelation(
    checks: BatchChecks, weights: np.ndarray, policy: Policy
) -> FleetPart:
    """One block's share of the pooled lag test (:func:`fleet_lag_part`) over the series the
    check tested, at the lags it tested for each."""
    res = checks.residuals
    batch = checks.batch
    short, seasonal, _ = autocorrelation_lags(
        res.n_obs, batch.season_length, batch.model_params, policy.check("ljung_box").option("lags")
    )
    return fleet_lag_part(res, short | seasonal, ~checks["ljung_box"].skipped)


def _fleet_autocorrelation(
    part: FleetPart, checks: BatchChecks, weights: np.ndarray, policy: Policy
) -> FleetFinding:
    found = fleet_lag_from_parts(part)
    if found is None:
        return FleetFinding(_NO_FLEET_ACF)
    j = int(np.flatnonzero(found.lags == found.decisive_lag)[0])
    m = checks.batch.season_length
    min_acf = policy.check("ljung_box").option("min_acf")
    acf = float(found.mean_acf[j])
    material = True if min_acf is None else bool(abs(acf) >= float(min_acf))
    summary = FleetAutocorrelation(
        lag=found.decisive_lag,
        mean_acf=acf,
        statistic=float(found.statistic[j]),
        df=int(found.df[j]),
        p_value=found.p_value_min,
        lags_tested=int(np.isfinite(found.p_value).sum()),
        series_used=found.series_used,
        seasonal=bool(m > 1 and found.decisive_lag % m == 0),
        material=material,
    )
    seasonal_txt = f" (seasonal: a multiple of the season length {m})" if summary.seasonal else ""
    message = (
        f"Across the fleet the residuals are autocorrelated at lag {summary.lag}{seasonal_txt}: "
        f"the series' average autocorrelation there is {acf:+.2f} over {summary.series_used} "
        f"series (t = {summary.statistic:.2f} on {summary.df} df, p = {summary.p_value:.2g} "
        f"over {summary.lags_tested} lags, Driscoll-Kraay). No single series need be "
        "significant for this to matter: the model leaves the same structure in many series; "
        "add the missing lags or seasonal terms."
    )
    cp = policy.check("ljung_box")
    return FleetFinding(
        summary, p_value=summary.p_value, material=material, message=message, warn_p=cp.fleet_warn_p
    )


CHECKS = (
    CheckDef(
        name="ljung_box",
        title="Autocorrelation",
        kind="test",
        position=40,
        family="autocorrelation",
        needs_holdout=False,
        tests=(
            "residual autocorrelation at the tested lags: portmanteau test robust to changing "
            "variance; classical Ljung-Box and Box-Pierce beside it"
        ),
        null_hypothesis="the residuals are not autocorrelated at the tested lags",
        defaults=(
            "short lags 1..min(ceil(ln T), T/5) (Tsay 2010): from T = 30 lag 1 by a regression "
            "t test (HC2 standard error, Bell-McCaffrey df), lags 2.. by the portmanteau (1.. "
            "with model_params or below T = 30); tested apart, the seasonal lags m (T >= 2m) "
            "and 2m (T >= 6m); the p-values combined by weighted Bonferroni, weights 2:1:1 "
            "(lag 1, short lags, seasonal lags; lag1_weight 2, 0 for none) over the tests that "
            "ran; df = lags - "
            "model_params, the lags growing to df 2 (at most T/3) when that is 0 or less; R* "
            "threshold 1.96; classical Ljung-Box on 10 or 2m lags, at most T/5, in details"
        ),
        details=(
            "lags",
            "df",
            "max_lag",
            "short_first_lag",
            "short_last_lag",
            "short_statistic",
            "short_p_value",
            "seasonal_lags",
            "seasonal_statistic",
            "seasonal_p_value",
            "decided_by",
            "lag1_slope",
            "lag1_t",
            "lag1_df",
            "lag1_p_value",
            "lags_grown",
            "season_length",
            "method",
            "diagonal_fallback",
            "peak_lag_1",
            "peak_acf_1",
            "peak_lag_2",
            "peak_acf_2",
            "peak_lag_3",
            "peak_acf_3",
            "ljung_box",
            "ljung_box_p_value",
            "classical_lags",
            "classical_df",
            "box_pierce",
            "box_pierce_p_value",
            "acf_lag1",
        ),
        source=(
            "Dalla, Giraitis & Phillips (2022), Econometric Theory 38(5); MacKinnon & White "
            "(1985), J. Econometrics 29(3) (HC2); Bell & McCaffrey (2002), Survey Methodology "
            "28(2), and Imbens & Kolesar (2016), REStat 98(4) (degrees of freedom); Ljung & Box "
            "(1978), Biometrika 65:297-303; Box & Pierce (1970), JASA 65:1509-1526"
        ),
        run=_run,
        # Essential: warn at adjusted p < 0.05, fail at < 0.01, within the fleet's families;
        # the fleet-level test likewise, when the average autocorrelation is material.
        rule=CheckPolicy(
            warn_p=0.05,
            fail_p=0.01,
            fleet_warn_p=0.05,
            fleet_fail_p=0.01,
            option_values=(("min_acf", MIN_ACF),),
        ),
        passed="no evidence of autocorrelation left in the residuals",
        found=_found,
        meaning="structure is left unexplained; add the missing lags or seasonal terms",
        options=(
            Option("min_obs"),
            Option("lags", minimum=1),
            Option("lag1_weight", kind="float", maximum=100),
            Option("min_acf", kind="float", maximum=1, for_runner=False),
        ),
        essential=True,
        fleet=FleetTest(
            key="autocorrelation",
            gather=_gather_fleet_autocorrelation,
            finish=_fleet_autocorrelation,
            empty=FleetFinding(_NO_FLEET_ACF),
        ),
    ),
)
