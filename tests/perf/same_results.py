"""Whether two versions of the core give the same results, to the bit. Run by hand (never
collected by pytest)::

    python tests/perf/same_results.py save FILE      # on the version before a change
    python tests/perf/same_results.py compare FILE   # on the version after it

Assesses invented fleets (seeded; the invented fleets of ``tests/core/test_chunked.py`` and
of ``bench_core.py``, with seasonality, gaps, ragged lengths, holdouts with and without
intervals, weights, burn-in, and a constant and a ``+-c`` series) under three policies, and
keeps every check's statistic, p-value, skip reason, details, adjusted p-value and status and
the serialized result (every series row, and the answer without rows). ``compare`` prints
each array that differs with its largest relative difference, and ``BIT-IDENTICAL`` when
nothing does. For a change meant to keep every number: a performance change, a refactor.
"""

from __future__ import annotations

import pickle
import sys
from pathlib import Path
from typing import Any

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[2]))

from service.core import assess, default_policy, make_batch
from service.core.gate import assess_many_results
from service.core.policy import Policy
from service.results import to_dicts
from tests.core.test_chunked import _pad, invented_rows


def invented_fleet(n, periods, seed, season=None, gaps=False, ragged=False):
    """Demand-like invented series (seeded) as in ``bench_core.py``, row 3 constant, row 4
    with residuals of +-1."""
    rng = np.random.default_rng(seed)
    level = rng.uniform(20, 2000, (n, 1))
    s = 0.15 * np.sin(2 * np.pi * np.arange(periods) / 52)[None, :]
    shocks = rng.standard_normal((n, periods))
    arch = rng.random(n) < 0.2
    scale = np.ones((n, periods))
    scale[arch, 1:] = np.sqrt(0.6 + 0.4 * shocks[arch, :-1] ** 2)
    phi = rng.uniform(-0.2, 0.4, (n, 1))
    e = shocks * scale
    e[:, 1:] += phi * e[:, :-1]
    resid = e * 0.05 * level
    a = level * (1 + s) + resid
    f = a - resid
    f[:, 0] = np.nan
    if gaps:
        g = rng.random((n, periods)) < 0.03
        g[:, -1] = False
        a[g] = np.nan
    a[3] = 5.0
    f[3] = 5.0
    f[3, 0] = np.nan
    f[4] = a[4] - np.where(np.arange(periods) % 2, 1.0, -1.0)
    rows_a, rows_f = [list(r) for r in a], [list(r) for r in f]
    if ragged:
        cut = rng.integers(8, periods + 1, n)
        rows_a = [r[: cut[i]] for i, r in enumerate(rows_a)]
        rows_f = [r[: cut[i]] for i, r in enumerate(rows_f)]
    kw: dict[str, Any] = {"ids": [f"s{i}" for i in range(n)]}
    if season:
        kw["season_length"] = season
    return make_batch(rows_a, rows_f, **kw)


def fleets():
    out = {}
    cases = [
        (20261203, 300, {}),
        (7, 200, {"t": 120, "season": 4}),
        (5, 50, {"scale": 1e200}),
        (11, 2100, {"t": 60, "h": 8, "season": 6}),
    ]
    for seed, n, opts in cases:
        actuals, fitted, kw = invented_rows(seed, n, **opts)
        horizon = max(len(r) for r in kw["holdout_actuals"])
        hold = ("holdout_actuals", "holdout_forecasts", "holdout_lower", "holdout_upper")
        kw = {k: (_pad(v, horizon) if k in hold else v) for k, v in kw.items()}
        out[f"rows{seed}"] = make_batch(actuals, fitted, **kw)
        kw.pop("weights")
        out[f"rows{seed}_unweighted"] = make_batch(actuals, fitted, **kw)
    out["weekly"] = invented_fleet(1500, 156, 1, season=52)
    out["plain"] = invented_fleet(1500, 156, 2)
    out["gaps"] = invented_fleet(800, 104, 3, season=52, gaps=True)
    out["ragged"] = invented_fleet(800, 156, 4, season=12, gaps=True, ragged=True)
    out["weekly_gaps"] = invented_fleet(2600, 104, 5, season=52, gaps=True)
    out["quarterly_ragged"] = invented_fleet(2300, 160, 7, season=4, ragged=True)
    return out


POLICIES = {
    "default": default_policy(),
    "lags": Policy.from_dict(
        {"name": "lags", "checks": {"ljung_box": {"lags": 5}, "arch_lm": {"lags": 3}}}
    ),
    "counted": Policy.from_dict(
        {"name": "counted", "fleet": {"weighting": "count", "adjustment": "none"}}
    ),
}


def capture():
    found: dict[tuple[str, str], Any] = {}
    for fleet, batch in fleets().items():
        for name, policy in POLICIES.items():
            try:
                a = assess(batch, policy)
            except Exception as exc:  # a policy a fleet does not fit: the error is the result
                found[(fleet, name)] = repr(exc)
                continue
            checks: dict[str, Any] = {}
            for check, r in a.results.checks.items():
                checks[check] = {
                    "statistic": np.asarray(r.statistic).copy(),
                    "p_value": np.asarray(r.p_value).copy(),
                    "skip": list(r.skip_reason.tolist()),
                    "details": {k: np.asarray(v).copy() for k, v in r.details.items()},
                    "p_adjusted": np.asarray(a.p_adjusted[check]).copy(),
                    "status": np.asarray(a.status_codes[check]).copy(),
                }
            checks["result"] = a.to_dict()
            checks["no_rows"] = to_dicts(assess_many_results([(batch, policy)], ["none"]))[0]
            found[(fleet, name)] = checks
    return found


def differences(x, y, path=(), out=None):
    """``(path, largest relative difference)`` of every leaf of ``x`` and ``y`` that differs
    (``inf`` for a difference that is not numeric)."""
    out = [] if out is None else out
    if isinstance(x, dict):
        if set(x) != set(y):
            out.append(((*path, "keys"), np.inf))
            return out
        for k in x:
            differences(x[k], y[k], (*path, k), out)
    elif isinstance(x, (list, tuple)):
        if len(x) != len(y):
            out.append(((*path, "length"), np.inf))
            return out
        for i, (u, v) in enumerate(zip(x, y, strict=True)):
            differences(u, v, (*path, i), out)
    elif isinstance(x, np.ndarray):
        if x.dtype != y.dtype or x.shape != y.shape:
            out.append(((*path, "dtype or shape"), np.inf))
        elif x.dtype.kind == "f":
            if not np.array_equal(x, y, equal_nan=True):
                if (np.isnan(x) != np.isnan(y)).any():
                    out.append((path, np.inf))
                else:
                    with np.errstate(all="ignore"):
                        rel = np.abs(x - y) / np.maximum(np.abs(x), 1e-300)
                    out.append((path, float(np.nanmax(np.where(np.isfinite(x), rel, 0.0)))))
        elif x.tolist() != y.tolist():
            out.append((path, np.inf))
    elif isinstance(x, float) and isinstance(y, float):
        if x != y and not (np.isnan(x) and np.isnan(y)):
            out.append((path, abs(x - y) / max(abs(x), 1e-300)))
    elif x != y:
        out.append((path, np.inf))
    return out


def main() -> int:
    if len(sys.argv) != 3 or sys.argv[1] not in ("save", "compare"):
        print(__doc__)
        return 2
    mode, path = sys.argv[1], Path(sys.argv[2])
    found = capture()
    if mode == "save":
        path.write_bytes(pickle.dumps(found))
        print(f"saved {len(found)} assessments to {path}")
        return 0
    before = pickle.loads(path.read_bytes())
    diff = differences(before, found)
    for where, rel in diff[:40]:
        print(f"  {rel:.3g}  {'/'.join(map(str, where))}")
    if not diff:
        print("BIT-IDENTICAL")
        return 0
    print(f"{len(diff)} arrays differ, largest relative difference {max(r for _, r in diff):.3g}")
    return 1


if __name__ == "__main__":
    raise SystemExit(main())
