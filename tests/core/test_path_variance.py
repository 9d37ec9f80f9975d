"""Long-run variances of a mean along one path, against statsmodels and scipy."""

from __future__ import annotations

import numpy as np
import pytest
import statsmodels.api as sm
from scipy.fft import dct
from statsmodels.tsa.stattools import acovf

from service.core.path_variance import (
    autocovariances,
    bartlett_long_run,
    centred,
    ewc_degrees,
    ewc_long_run,
    truncated_long_run,
)

RTOL = 1e-8
PATH = np.array([[1.0, 2.0, 4.0, 3.0]])


def _prepared(x):
    observed = ~np.isnan(x)
    z, mean = centred(x, observed)
    return z, mean, observed, observed.sum(axis=1)


def test_docstring_values():
    z, _, observed, n = _prepared(PATH)
    gamma = autocovariances(z, n, 2)
    # computed: z = -1.5, -0.5, 1.5, 0.5; gamma_k = sum z_t z_{t-k} / 4.
    np.testing.assert_allclose(gamma, [[1.25, 0.1875, -0.625]], rtol=RTOL)
    np.testing.assert_allclose(truncated_long_run(gamma, np.array([2])), [1.625], rtol=RTOL)
    np.testing.assert_allclose(bartlett_long_run(gamma, np.array([1])), [1.4375], rtol=RTOL)
    # computed: Lambda_1 = sqrt(2/4) sum cos(pi (t - 1/2) / 4) z_t, squared: 2 + sqrt(2).
    np.testing.assert_allclose(
        ewc_long_run(z, observed, n, np.array([1])), [2 + np.sqrt(2)], rtol=RTOL
    )


@pytest.mark.parametrize("with_gaps", [False, True])
def test_autocovariances_equal_statsmodels_acovf(with_gaps):
    rng = np.random.default_rng(3)
    x = rng.normal(size=(6, 15))
    if with_gaps:
        x[rng.random(x.shape) < 0.2] = np.nan
    z, _, _, n = _prepared(x)
    ours = autocovariances(z, n, 5)
    for i in range(x.shape[0]):
        # acovf(adjusted=False, missing="conservative"): observed pairs over the observed count.
        ref = acovf(x[i], nlag=5, adjusted=False, demean=True, fft=False, missing="conservative")
        np.testing.assert_allclose(ours[i], ref, rtol=RTOL, atol=1e-14)


@pytest.mark.parametrize("lags", [0, 1, 2, 4])
def test_bartlett_equals_statsmodels_hac_of_the_mean(lags):
    rng = np.random.default_rng(lags)
    x = rng.normal(size=(4, 12))
    z, _, _, n = _prepared(x)
    ours = bartlett_long_run(autocovariances(z, n, lags), np.full(4, lags)) / n
    for i in range(4):
        fit = sm.OLS(x[i], np.ones(12)).fit(
            cov_type="HAC", cov_kwds={"maxlags": lags, "use_correction": False}
        )
        np.testing.assert_allclose(ours[i], fit.cov_params()[0, 0], rtol=RTOL)


def test_truncated_sums_the_first_h_minus_one_autocovariances():
    rng = np.random.default_rng(8)
    x = rng.normal(size=(5, 10))
    z, _, _, n = _prepared(x)
    h = np.array([1, 2, 3, 4, 5])
    gamma = autocovariances(z, n, 4)
    ours = truncated_long_run(gamma, h)
    for i in range(5):
        ref = acovf(x[i], nlag=4, adjusted=False, fft=False)
        # computed: gamma_0 + 2 sum_{k=1}^{h-1} gamma_k from statsmodels' acovf.
        np.testing.assert_allclose(ours[i], ref[0] + 2 * ref[1 : h[i]].sum(), rtol=RTOL)


@pytest.mark.parametrize("b", [1, 2, 3, 5])
def test_ewc_equals_the_dct(b):
    rng = np.random.default_rng(b)
    x = rng.normal(size=(4, 12))
    z, _, observed, n = _prepared(x)
    ours = ewc_long_run(z, observed, n, np.full(4, b))
    # scipy's DCT-II: y_k = 2 sum_t x_t cos(pi k (t + 1/2) / T), so Lambda_k = sqrt(2/T) y_k / 2.
    lam = np.sqrt(2 / 12) * dct(x, type=2, axis=1)[:, 1 : b + 1] / 2
    np.testing.assert_allclose(ours, (lam**2).mean(axis=1), rtol=RTOL)


def test_ewc_closes_gaps_and_ignores_the_centring():
    x = np.array([[1.0, np.nan, 2.0, 4.0, np.nan, 3.0, 7.0]])
    z, _, observed, n = _prepared(x)
    closed = np.array([[1.0, 2.0, 4.0, 3.0, 7.0]])
    zc, _, oc, nc = _prepared(closed)
    for b in (1, 2, 4):
        np.testing.assert_allclose(
            ewc_long_run(z, observed, n, np.array([b])),
            ewc_long_run(zc, oc, nc, np.array([b])),
            rtol=RTOL,
        )
    # The cosines of j >= 1 sum to 0: uncentred values give the same variance.
    raw = np.where(oc, closed, 0.0)
    np.testing.assert_allclose(
        ewc_long_run(raw, oc, nc, np.array([2])), ewc_long_run(zc, oc, nc, np.array([2])), rtol=1e-9
    )


def test_ewc_degrees_rule():
    # Docstring: floor(0.4 n^(2/3)), at least 1: n = 6, 12, 24 give 1, 2, 3.
    assert ewc_degrees(np.array([2, 6, 12, 24, 100])).tolist() == [1, 1, 2, 3, 8]
