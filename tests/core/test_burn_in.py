"""Burn-in hint: planted starting outliers are found, clean noise gets none (fixed seed)."""

from __future__ import annotations

import numpy as np
import pytest

from service.core import InputError
from service.core.burn_in import burn_in_head, burn_in_hint
from tests.reference_values import MAD_TO_SD

from .reference_data import observed, residuals


def test_head_rule_docstring_values():
    assert [burn_in_head(m) for m in (1, 4, 12, 52)] == [10, 10, 26, 106]


def test_planted_outliers_at_the_start_are_found():
    rng = np.random.default_rng(1)
    rows = [rng.normal(size=60) for _ in range(5)]
    rows[0][:3] += 20.0  # a three-period burn-in
    rows[1][:1] -= 50.0
    rows[2][[0, 1, 4]] += 30.0  # the run stops at the first ordinary residual
    rows[3][:2] = np.nan  # missing fitted values first, then a burn-in of 4
    rows[3][2:6] += 25.0
    result = burn_in_hint(residuals(rows))
    assert list(result.statistic) == [3, 1, 2, 4, 0]
    assert list(result.details["extremes_in_head"]) == [3, 1, 3, 4, 0]
    assert result.kind == "metric" and np.isnan(result.p_value).all()


def test_seasonal_head_is_longer():
    rng = np.random.default_rng(2)
    x = rng.normal(size=80)
    x[:14] += 40.0  # a season (m = 12) and two more periods settling
    assert burn_in_hint(residuals([x]), season_length=12).statistic[0] == 14
    # With the default head of 10 the run is cut at the head.
    assert burn_in_hint(residuals([x])).statistic[0] == 10


def test_robust_z_uses_median_and_mad_after_the_head():
    rng = np.random.default_rng(3)
    x = rng.standard_t(4, size=50)
    x[0] = 9.0
    result = burn_in_hint(residuals([x]))
    ref = x[10:]
    med = np.median(ref)
    mad = np.median(np.abs(ref - med))
    # Robust z = |e - median| / (1.4826 MAD) (tests/reference_values.py MAD_TO_SD:
    # Rousseeuw & Croux 1993).
    np.testing.assert_allclose(
        result.details["first_robust_z"][0], abs(x[0] - med) / (MAD_TO_SD * mad), rtol=1e-12
    )


def test_median_and_mad_of_ragged_rows_with_ties_match_numpy():
    # Integer-valued residuals (many ties), lengths of both parities, gaps and late starts; the
    # MAD comes from a search in the sorted residuals, checked against np.median directly.
    rng = np.random.default_rng(6)
    rows = [rng.integers(-4, 5, size=n).astype(float) for n in (20, 21, 33, 60, 61, 47, 30)]
    rows[2][[12, 20]] = np.nan
    rows[4][:3] = np.nan
    rows[5][[0, 15, 16, 40]] = np.nan
    rows[6][10:] += rng.normal(size=20)  # no ties after the head
    for row in rows:
        row[np.flatnonzero(~np.isnan(row))[0]] += 40.0  # an extreme first residual
    result = burn_in_hint(residuals(rows))
    for i, row in enumerate(rows):
        e = observed(row)
        ref = e[10:]
        med = np.median(ref)
        mad = np.median(np.abs(ref - med))
        assert mad > 0 and result.skip_reason[i] is None
        # Robust z = |e - median| / (1.4826 MAD) (Rousseeuw & Croux 1993); the mean of the
        # residuals cancels, as the check works on centred values.
        np.testing.assert_allclose(
            result.details["first_robust_z"][i], abs(e[0] - med) / (1.4826 * mad), rtol=1e-12
        )
        z = np.abs(e[:10] - med) / (1.4826 * mad)
        assert result.details["extremes_in_head"][i] == np.count_nonzero(z > 8) >= 1
    assert (result.statistic == 1).all()


def test_no_hint_in_clean_noise():
    # Invented, seeded: 4000 series of 104 independent N(0, 1) errors get no hint at 8.
    rng = np.random.default_rng(2026)
    x = rng.normal(size=(4000, 104))
    result = burn_in_hint(x)
    assert (result.statistic == 0).all()
    assert result.skip_reason.tolist() == [None] * 4000


def test_skips_and_bad_options():
    rng = np.random.default_rng(4)
    rows = [rng.normal(size=19), np.r_[rng.normal(size=10), np.zeros(15)], rng.normal(size=20)]
    result = burn_in_hint(residuals(rows))
    assert result.skip_reason[0].startswith("fewer than 20 residuals")
    assert result.skip_reason[1] == "the residuals after the head have a MAD of zero"
    assert result.skip_reason[2] is None and observed(rows[2]).size == 20
    for kwargs, name in (({"threshold": 0.0}, "threshold"), ({"head": 0}, "head")):
        with pytest.raises(InputError) as err:
            burn_in_hint(residuals(rows), **kwargs)
        assert err.value.argument == name
