"""``assess_many``: checks stacked across batches give each batch exactly its own result."""

from __future__ import annotations

import numpy as np
import pytest

from service.core import assess, default_policy, make_batch
from service.core.batch import stack_batches, stack_key
from service.core.gate import assess_many, assess_many_dicts
from service.core.policy import Policy


def invented_batch(rng, n, t=104, horizon=0, intervals=False, season=1, gaps=False, prefix="s"):
    """Invented weekly series (level near 100), some flawed, optionally with a holdout."""
    actuals = 100 + 5 * rng.standard_normal((n, t))
    e = rng.standard_normal((n, t))
    e[:, 1:] += rng.uniform(0, 0.8) * e[:, :-1]  # some autocorrelation
    e += rng.uniform(-0.5, 0.5, (n, 1))  # some bias
    fitted = actuals - e
    fitted[:, 0] = np.nan
    if gaps:
        fitted[:, 20:23] = np.nan
    kwargs = {}
    if horizon:
        ha = 100 + 5 * rng.standard_normal((n, horizon))
        hf = ha + rng.standard_normal((n, horizon))
        kwargs = {"holdout_actuals": ha, "holdout_forecasts": hf}
        if intervals:
            kwargs |= {"holdout_lower": hf - 1.6, "holdout_upper": hf + 1.6, "level": 0.9}
    return make_batch(
        actuals, fitted, ids=[f"{prefix}-{i}" for i in range(n)], season_length=season, **kwargs
    )


def test_same_results_as_separate_calls_exactly():
    rng = np.random.default_rng(20261202)
    policy = default_policy()
    batches = [invented_batch(rng, 1) for _ in range(6)]
    batches += [invented_batch(rng, 5, horizon=12, intervals=True) for _ in range(3)]
    batches += [invented_batch(rng, 1, t=60, season=12, gaps=True) for _ in range(3)]
    batches += [invented_batch(rng, 3, horizon=8) for _ in range(2)]
    order = rng.permutation(len(batches))
    items = [(batches[i], policy) for i in order]
    together = assess_many(items)
    docs = assess_many_dicts(items)
    assert len(together) == len(docs) == len(items)
    for (batch, pol), got, doc in zip(items, together, docs, strict=True):
        # Row-by-row work on same-shaped matrices: equal to the last bit, not just close.
        alone = assess(batch, pol).to_dict()
        assert got.to_dict() == alone
        assert doc == alone  # the series rows of a whole group built at once
        assert got.ids == batch.ids


def test_policies_are_kept_apart():
    rng = np.random.default_rng(7)
    strict = Policy.from_dict(
        {"name": "strict", "checks": {"ljung_box": {"lags": 5}}, "fleet": {"adjustment": "none"}}
    )
    items = [(invented_batch(rng, 2), strict if i % 2 else default_policy()) for i in range(6)]
    for (batch, pol), got, doc in zip(
        items, assess_many(items), assess_many_dicts(items), strict=True
    ):
        assert got.policy is pol
        assert got.to_dict() == doc == assess(batch, pol).to_dict()


def test_stack_refuses_different_shapes():
    rng = np.random.default_rng(1)
    with pytest.raises(ValueError, match="shape"):
        stack_batches([invented_batch(rng, 1, t=50), invented_batch(rng, 1, t=60)])


def test_empty_list():
    assert assess_many([]) == [] and assess_many_dicts([]) == []


def test_critical_series_weights_and_adjustment_per_part():
    # Policies that use every part of the decision: critical series (by id, which repeat
    # across the stacked parts), given weights, no adjustment, a fleet-bias warning.
    rng = np.random.default_rng(23)
    policies = [
        Policy.from_dict(
            {
                "name": "crit",
                "fleet": {
                    "critical_series": ["s-0", "s-2"],
                    "weighting": "given",
                    "bias_warn_p": 0.3,
                },
            }
        ),
        Policy.from_dict({"name": "plain", "fleet": {"adjustment": "none", "weighting": "count"}}),
    ]
    for pol in policies:
        items = [(invented_batch(rng, n), pol) for n in (1, 1, 1, 3, 3, 1, 3)]
        for (batch, p), got, doc in zip(
            items, assess_many(items), assess_many_dicts(items), strict=True
        ):
            assert got.to_dict() == doc == assess(batch, p).to_dict()


def test_ragged_rows_answer_as_alone_to_the_last_bit():
    # Each batch's rows end at different periods, with gaps and leading misses: lag rules,
    # degrees of freedom, regression rows and the spans a check trims to differ from row to
    # row. Batches with the same missing values are stacked (two of each pattern here), the
    # others are kept apart: either way each answers exactly as alone.
    rng = np.random.default_rng(11)
    policy = default_policy()
    patterns = []
    for k in range(4):
        n, t = int(rng.integers(1, 5)), 120
        missing = np.zeros((n, t), dtype=bool)
        for i in range(n):
            end = int(rng.integers(12, t + 1)) if (i or k % 2) else t
            missing[i, end:] = True
        lead = np.zeros((n, t), dtype=bool)
        for i in range(n):
            lead[i, : int(rng.integers(0, 4))] = True
            gap = int(rng.integers(5, 10))
            lead[i, gap : gap + int(rng.integers(0, 3))] = True
        patterns.append((missing, lead))
    items = []
    for k in range(8):
        missing, lead = patterns[k % 4]
        n, t = missing.shape
        actuals = 100 + 5 * rng.standard_normal((n, t))
        fitted = actuals - rng.standard_normal((n, t)) * rng.uniform(0.5, 3.0, (n, 1))
        actuals[missing] = np.nan
        fitted[missing | lead] = np.nan
        batch = make_batch(actuals, fitted, ids=[f"r{k}-{i}" for i in range(n)], model_params=1)
        items.append((batch, policy))
    assert len({stack_key(b) for b, _ in items}) == 4
    for (batch, pol), got, doc in zip(
        items, assess_many(items), assess_many_dicts(items), strict=True
    ):
        assert got.to_dict() == doc == assess(batch, pol).to_dict()
