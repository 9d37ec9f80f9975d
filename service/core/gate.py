"""The gate: from check results and a policy to per-series and fleet verdicts with reasons.

Steps, all vectorised over series:

1. Run the checks the policy enables (``run_checks``).
2. Per check, adjust the p-values across the series it tested with Benjamini-Hochberg (when the
   policy's ``fleet.adjustment`` is ``"bh"``), reported as ``p_adjusted``.
3. Per series and check, a status from the (adjusted) p-value or the metric's thresholds; a
   series' verdict is its worst check (a series whose checks all skipped passes, but its
   ``data_sufficiency`` check says why).
4. Per check over the fleet: tested, failed and warned counts and the weighted shares; the check
   fails the fleet when its failed share exceeds the fail share, warns when its warned-or-failed
   share exceeds the warn share; a critical series' fail fails it, a critical warn warns it.
5. The fleet verdict is the worst check; an aggregate bias with ``p < fleet.bias_warn_p`` warns.

A verdict is statistical evidence under the stated assumptions, not a guarantee.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np

from .batch import SeriesBatch
from .catalogue import CHECK_NAMES
from .checks import BatchChecks, run_checks
from .messages import fleet_message, pass_message, series_message
from .multiple import benjamini_hochberg
from .policy import CheckPolicy, Policy
from .results import CheckResult, Status, to_python
from .tails import norm_sf_two_sided

# Integer status codes so statuses combine with ``max``.
SKIPPED, PASS, WARN, FAIL = 0, 1, 2, 3
_STATUS = np.array([Status.SKIPPED.value, Status.PASS.value, Status.WARN.value, Status.FAIL.value],
                   dtype=object)


@dataclass(frozen=True)
class Reason:
    """One warn or fail, as a sentence a person can act on; ``series_id`` is ``None`` for a
    fleet-level reason."""

    check: str
    status: Status
    series_id: str | None
    message: str

    def to_dict(self) -> dict[str, Any]:
        return {"check": self.check, "status": self.status.value, "series_id": self.series_id,
                "message": self.message}


@dataclass(frozen=True)
class CheckSummary:
    """One check over the fleet."""

    name: str
    status: Status
    series_tested: int
    series_failed: int
    series_warned: int
    series_skipped: int
    failed_share: float
    warned_share: float
    message: str

    def to_dict(self) -> dict[str, Any]:
        return {
            "name": self.name, "status": self.status.value,
            "series_tested": self.series_tested, "series_failed": self.series_failed,
            "series_warned": self.series_warned, "series_skipped": self.series_skipped,
            "failed_share": self.failed_share, "warned_share": self.warned_share,
            "message": self.message,
        }


@dataclass(frozen=True)
class FleetBias:
    """Aggregate bias over the fleet.

    ``mean_error`` is the weighted mean of the series' mean errors (the policy's weighting),
    ``percent_bias`` is ``100 sum(e) / sum|y|`` pooled over every residual period (so volume
    weighted), ``std_error`` is ``sqrt(sum w_i^2 SE_i^2) / sum w_i`` with the series' HAC
    standard errors, which treats series as independent; ``statistic = mean_error / std_error``
    and ``p_value`` is two-sided normal.
    """

    mean_error: float
    percent_bias: float
    std_error: float
    statistic: float
    p_value: float
    series_used: int

    def to_dict(self) -> dict[str, Any]:
        return {k: to_python(getattr(self, k)) for k in
                ("mean_error", "percent_bias", "std_error", "statistic", "p_value", "series_used")}


@dataclass(frozen=True, eq=False)
class Assessment:
    """The gate's full result over one batch."""

    verdict: Status
    policy: Policy
    results: BatchChecks
    weights: np.ndarray
    status_codes: Mapping[str, np.ndarray]
    p_adjusted: Mapping[str, np.ndarray]
    series_codes: np.ndarray
    summaries: tuple[CheckSummary, ...]
    reasons: tuple[Reason, ...]
    fleet_bias: FleetBias

    @property
    def ids(self) -> tuple[str, ...]:
        return self.results.batch.ids

    def series_verdicts(self) -> list[str]:
        return _STATUS[np.maximum(self.series_codes, PASS)].tolist()

    def to_dict(self) -> dict[str, Any]:
        """JSON-ready result (plain Python values; NaN and infinities become ``None``)."""
        return _to_dict(self)


def _weights(batch: SeriesBatch, policy: Policy) -> np.ndarray:
    weighting = policy.fleet.weighting
    if weighting == "count":
        return np.ones(batch.n_series)
    if weighting == "given":
        return np.asarray(batch.weights, dtype=float)
    return np.nansum(np.abs(batch.actuals), axis=1)


def _test_codes(p: np.ndarray, cp: CheckPolicy) -> np.ndarray:
    codes = np.full(p.shape, PASS)
    if cp.warn_p is not None:
        codes = np.where(p < cp.warn_p, WARN, codes)
    if cp.fail_p is not None:
        codes = np.where(p < cp.fail_p, FAIL, codes)
    return codes


def _metric_codes(x: np.ndarray, cp: CheckPolicy) -> np.ndarray:
    codes = np.full(x.shape, PASS)
    for bound, code, above in ((cp.warn_above, WARN, True), (cp.warn_below, WARN, False),
                               (cp.fail_above, FAIL, True), (cp.fail_below, FAIL, False)):
        if bound is not None:
            hit = x > bound if above else x < bound
            codes = np.where(hit, np.maximum(codes, code), codes)
    return codes


def _statuses(result: CheckResult, cp: CheckPolicy, adjust: bool) -> tuple[np.ndarray, np.ndarray]:
    skipped = result.skipped
    if result.kind == "test":
        p_adj = benjamini_hochberg(np.where(skipped, np.nan, result.p_value))
        p = p_adj if (adjust and cp.adjust) else result.p_value
        codes = _test_codes(np.where(skipped, 1.0, p), cp)
        if result.name == "interval_coverage":
            # Intervals too wide waste width but do not mislead: at most a warning.
            too_wide = result.details["coverage"] > result.details["level"]
            codes = np.where(too_wide & (codes == FAIL), WARN, codes)
    else:
        p_adj = np.full(result.n_series, np.nan)
        codes = _metric_codes(np.where(skipped, np.nan, result.statistic), cp)
    return np.where(skipped, SKIPPED, codes), p_adj


def _share(weights: np.ndarray, hit: np.ndarray, tested: np.ndarray) -> float:
    total = float(weights[tested].sum())
    if total > 0:
        return float(weights[hit & tested].sum()) / total
    n = int(tested.sum())
    return float((hit & tested).sum()) / n if n else 0.0


def _fleet_bias(checks: BatchChecks, weights: np.ndarray) -> FleetBias:
    if "bias" not in checks.checks:
        nan = float("nan")
        return FleetBias(nan, nan, nan, nan, nan, 0)
    b = checks["bias"]
    me, se = b.details["mean_error"], b.details["std_error"]
    use = np.isfinite(me) & np.isfinite(se)
    w = weights[use]
    total = w.sum()
    if total <= 0:
        w, total = np.ones(int(use.sum())), float(use.sum())
    res = checks.residuals
    pooled_e = np.where(res.observed, res.values, 0.0)[use].sum()
    pooled_y = np.where(res.observed, np.abs(checks.batch.actuals), 0.0)[use].sum()
    if total == 0:
        nan = float("nan")
        return FleetBias(nan, nan, nan, nan, nan, 0)
    mean = float((w * me[use]).sum() / total)
    std = float(np.sqrt((w * w * se[use] * se[use]).sum()) / total)
    with np.errstate(invalid="ignore", divide="ignore"):
        z = mean / std if std > 0 else (np.sign(mean) * np.inf if mean else np.nan)
        pct = float(100.0 * pooled_e / pooled_y) if pooled_y > 0 else float("nan")
    p = float(norm_sf_two_sided(z)) if np.isfinite(z) or np.isinf(z) else float("nan")
    return FleetBias(mean, pct, std, float(z), p, int(use.sum()))


def assess(batch: SeriesBatch, policy: Policy) -> Assessment:
    """Run the policy's checks over ``batch`` and decide."""
    enabled = policy.enabled_checks
    options = {n: policy.check(n).options() for n in enabled}
    results = run_checks(batch, options, only=enabled)
    weights = _weights(batch, policy)
    adjust = policy.fleet.adjustment == "bh"
    critical = np.isin(np.array(batch.ids, dtype=object), list(policy.fleet.critical_series))

    codes: dict[str, np.ndarray] = {}
    p_adjusted: dict[str, np.ndarray] = {}
    summaries: list[CheckSummary] = []
    fleet_reasons: list[tuple[int, Reason]] = []
    series_reasons: list[tuple[int, float, int, Reason]] = []
    ids = batch.ids
    for name in CHECK_NAMES:
        if name not in results.checks:
            continue
        result = results[name]
        cp = policy.check(name)
        c, p_adj = _statuses(result, cp, adjust)
        codes[name], p_adjusted[name] = c, p_adj
        tested = c != SKIPPED
        failed, warned = c == FAIL, c == WARN
        failed_share = _share(weights, failed, tested)
        warned_share = _share(weights, warned, tested)
        fail_share = cp.fail_share if cp.fail_share is not None else policy.fleet.fail_share
        warn_share = cp.warn_share if cp.warn_share is not None else policy.fleet.warn_share
        status = PASS if tested.any() else SKIPPED
        if failed_share + warned_share > warn_share or (critical & warned).any():
            status = WARN
        if failed_share > fail_share or (critical & failed).any():
            status = FAIL
        summary = CheckSummary(
            name=name, status=Status(_STATUS[status]),
            series_tested=int(tested.sum()), series_failed=int(failed.sum()),
            series_warned=int(warned.sum()), series_skipped=int((~tested).sum()),
            failed_share=failed_share, warned_share=warned_share,
            message=fleet_message(name, status, int(failed.sum()), int(warned.sum()),
                                  int(tested.sum()), failed_share, warned_share, fail_share,
                                  warn_share, bool((critical & (failed | warned)).any())),
        )
        summaries.append(summary)
        if status >= WARN:
            fleet_reasons.append((status, Reason(name, summary.status, None, summary.message)))
        for i in np.flatnonzero(c >= WARN):
            reason = Reason(name, Status(_STATUS[c[i]]), ids[i],
                            series_message(name, int(i), int(c[i]), result, p_adj))
            series_reasons.append((int(c[i]), -float(weights[i]), int(i), reason))

    series_codes = np.maximum.reduce([codes[n] for n in codes]) if codes else np.zeros(
        batch.n_series, dtype=int)
    fleet_code = max((s.status.severity for s in summaries), default=PASS)
    fleet_code = max(fleet_code, PASS)
    bias_summary = _fleet_bias(results, weights)
    bias_p = policy.fleet.bias_warn_p
    if bias_p is not None and np.isfinite(bias_summary.p_value) and bias_summary.p_value < bias_p:
        fleet_code = max(fleet_code, WARN)
        direction = "low" if bias_summary.mean_error > 0 else "high"
        fleet_reasons.append((WARN, Reason(
            "bias", Status.WARN, None,
            f"Across the fleet the forecasts run {direction}: the weighted mean error is "
            f"{bias_summary.mean_error:+.3g} ({bias_summary.percent_bias:+.2f}% of volume; "
            f"z = {bias_summary.statistic:.2f}, p = {bias_summary.p_value:.2g}, series taken as "
            "independent). No single series need be significant for this to matter in "
            "aggregate: check for a shared level shift or a biased transformation.",
        )))
    fleet_reasons.sort(key=lambda r: -r[0])
    series_reasons.sort(key=lambda r: (-r[0], r[1], r[2]))
    ordered: list[Reason] = []
    for severity in (FAIL, WARN):
        ordered += [r for s, r in fleet_reasons if s == severity]
        ordered += [r[3] for r in series_reasons if r[0] == severity]
    return Assessment(
        verdict=Status(_STATUS[fleet_code]),
        policy=policy,
        results=results,
        weights=weights,
        status_codes=codes,
        p_adjusted=p_adjusted,
        series_codes=series_codes,
        summaries=tuple(summaries),
        reasons=tuple(ordered),
        fleet_bias=bias_summary,
    )


# ------------------------------------------------------------------------------ serialisation

def _column(values: np.ndarray) -> list[Any]:
    """An array as a list of plain Python values, non-finite floats as ``None``."""
    arr = np.asarray(values)
    if arr.dtype.kind == "f":
        out = arr.astype(object)
        out[~np.isfinite(arr)] = None
        return out.tolist()
    return arr.tolist()


def _to_dict(a: Assessment) -> dict[str, Any]:
    results = a.results
    n = results.batch.n_series
    columns: dict[str, dict[str, Sequence[Any]]] = {}
    for name, res in results.checks.items():
        columns[name] = {
            "status": _STATUS[a.status_codes[name]].tolist(),
            "statistic": _column(res.statistic),
            "p_value": _column(res.p_value),
            "p_adjusted": _column(a.p_adjusted[name]),
            "skip": res.skip_reason.tolist(),
            **{f"d:{k}": _column(v) for k, v in res.details.items()},
        }
    detail_keys = {name: list(res.details) for name, res in results.checks.items()}
    messages: dict[tuple[str, int], str] = {}
    index_of = {sid: i for i, sid in enumerate(results.batch.ids)}
    for r in a.reasons:
        if r.series_id is not None:
            messages[(r.check, index_of[r.series_id])] = r.message
    verdicts = a.series_verdicts()
    n_obs = results.residuals.n_obs.tolist()
    weights = _column(a.weights)
    bias_cols = columns.get("bias")
    ts_cols = columns.get("tracking_signal")
    series = []
    for i in range(n):
        checks_i = []
        for name, col in columns.items():
            status = col["status"][i]
            if status == "skipped":
                message = col["skip"][i]
            elif status == "pass":
                message = pass_message(name)
            else:
                message = messages.get((name, i), "")
            checks_i.append({
                "name": name,
                "status": status,
                "statistic": col["statistic"][i],
                "p_value": col["p_value"][i],
                "p_adjusted": col["p_adjusted"][i],
                "details": {k: col[f"d:{k}"][i] for k in detail_keys[name]},
                "message": message,
            })
        bias_i = None
        if bias_cols is not None:
            bias_i = {k: bias_cols[f"d:{k}"][i] for k in
                      ("mean_error", "std_error", "ci_low", "ci_high", "percent_bias")}
            bias_i["tracking_signal"] = ts_cols["statistic"][i] if ts_cols else None
        series.append({
            "id": results.batch.ids[i],
            "verdict": verdicts[i],
            "n_obs": n_obs[i],
            "weight": weights[i],
            "bias": bias_i,
            "checks": checks_i,
        })
    n_failed = sum(v == "fail" for v in verdicts)
    n_warned = sum(v == "warn" for v in verdicts)
    return {
        "verdict": a.verdict.value,
        "policy": {"name": a.policy.name, "version": a.policy.version},
        "reasons": [r.to_dict() for r in a.reasons],
        "checks": [s.to_dict() for s in a.summaries],
        "fleet": {
            "n_series": n,
            "n_failed": n_failed,
            "n_warned": n_warned,
            "n_passed": n - n_failed - n_warned,
            "bias": a.fleet_bias.to_dict(),
        },
        "series": series,
    }
