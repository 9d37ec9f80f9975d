"""Reference data sets and batch builders shared by the core's reference tests.

The data sets come from outside the project (see the design notes' list of published check
values); the builders only arrange arrays into the batch layout the core expects.
"""

from __future__ import annotations

from collections.abc import Sequence
from functools import cache

import numpy as np

from service.core import Residuals, SeriesBatch, make_batch, residuals_of

# X20, from statsmodels' test_statstools.py (R fBasics values).
X20 = np.array(
    [
        -0.1184,
        -1.3403,
        0.0063,
        -0.612,
        -0.3869,
        -0.2313,
        -2.8485,
        -0.2167,
        0.4153,
        1.8492,
        -0.3706,
        0.9726,
        -0.1501,
        -0.0337,
        -1.4423,
        1.2489,
        0.9182,
        -0.2331,
        -0.6182,
        0.183,
    ]
)


@cache
def macro_residuals() -> np.ndarray:
    """MACRO: OLS residuals of 400 diff(log realinv) on [1, 400 diff(log realgdp), realint[:-1]]
    from statsmodels' macrodata (statsmodels' test_diagnostic.py, values generated in R)."""
    import statsmodels.api as sm
    from statsmodels.datasets import macrodata

    d = macrodata.load_pandas().data
    y = 400 * np.diff(np.log(d["realinv"].to_numpy()))
    g = 400 * np.diff(np.log(d["realgdp"].to_numpy()))
    x = np.column_stack([np.ones(y.size), g, d["realint"].to_numpy()[:-1]])
    fit = sm.OLS(y, x).fit()
    # references.md: statsmodels test_diagnostic.py (R values) for the parameters.
    np.testing.assert_allclose(
        fit.params, [-9.48167277465485, 4.3742216647032, -0.613996969478989], rtol=1e-8
    )
    out = np.asarray(fit.resid, dtype=float)
    out.setflags(write=False)
    return out


def pad_rows(rows: Sequence[Sequence[float]], width: int | None = None) -> np.ndarray:
    """Stack rows into a matrix, right-padded with NaN."""
    width = max(len(r) for r in rows) if width is None else width
    out = np.full((len(rows), width), np.nan)
    for i, r in enumerate(rows):
        out[i, : len(r)] = r
    return out


def residual_batch(
    rows: Sequence[Sequence[float]], width: int | None = None, **kwargs: object
) -> SeriesBatch:
    """A batch whose residuals are exactly ``rows``: actuals = rows, fitted = 0 where given.

    ``NaN`` inside a row becomes a missing fitted value (the actual stays observed), so the
    residual is missing there without ending the series. Rows are right-padded to ``width``.
    """
    e = pad_rows(rows, width)
    actuals = np.where(np.isnan(e), 1.0, e)
    fitted = np.where(np.isnan(e), np.nan, 0.0)
    for i, r in enumerate(rows):
        actuals[i, len(r) :] = np.nan
    return make_batch(actuals, fitted, **kwargs)  # type: ignore[arg-type]


def residuals(rows: Sequence[Sequence[float]], **kwargs: object) -> Residuals:
    return residuals_of(residual_batch(rows, **kwargs))  # type: ignore[arg-type]


def observed(x: np.ndarray) -> np.ndarray:
    """The observed values of one series (NaN dropped)."""
    x = np.asarray(x, dtype=float)
    return x[~np.isnan(x)]


def invented_rows(rng: np.random.Generator, lengths: Sequence[int], scale: float = 1.0) -> list:
    """Invented residual series of the given lengths (seeded normal noise)."""
    return [rng.normal(0.0, scale, n) for n in lengths]
