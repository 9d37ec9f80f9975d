"""Published and externally sourced check values the tests compare against, with their sources.

Every check value a test takes from outside the project lives here, next to where it comes
from: a paper, a handbook table, a general-purpose library's own test file (whose values were
generated in R), or "computed" when it was derived from a published formula with a reference
library and is printed nowhere. Tests import these names and say, beside each use, which
constant and which source they rely on. Values given to fewer digits than double precision carry
the tolerance their printed precision allows; everything else is compared with rtol 1e-8.

Values a test computes itself with a reference library on the same data (statsmodels'
``acorr_ljungbox``, ``het_arch``, ``OLS(...).fit(cov_type="HAC")``, scipy's ``jarque_bera``,
``false_discovery_control``...) are not listed: the call beside the assertion is their source.
"""

from __future__ import annotations

from functools import cache
from typing import NamedTuple

import numpy as np


def _frozen(values: list[float]) -> np.ndarray:
    out = np.array(values, dtype=float)
    out.setflags(write=False)
    return out


# --- Data sets ---------------------------------------------------------------------------------

# X20: twenty values from statsmodels' test_statstools.py (its Jarque-Bera reference values
# were generated with R's fBasics).
X20 = _frozen(
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

# MACRO: statsmodels.datasets.macrodata; y = 400 diff(log realinv) regressed by OLS on
# X = [1, 400 diff(log realgdp), realint[:-1]], n = 202. The OLS parameters are the ones
# statsmodels' test_diagnostic.py checks (values generated in R); the residuals of that fit are
# the series its Ljung-Box, Box-Pierce and ARCH LM reference values were computed on.
MACRO_N = 202
MACRO_OLS_PARAMS = (-9.48167277465485, 4.3742216647032, -0.613996969478989)


@cache
def macro_residuals() -> np.ndarray:
    """The MACRO OLS residuals (read-only), built from statsmodels' macrodata as described
    above; the fit is checked against ``MACRO_OLS_PARAMS`` (rtol 1e-8) before it is used."""
    import statsmodels.api as sm
    from statsmodels.datasets import macrodata

    d = macrodata.load_pandas().data
    y = 400 * np.diff(np.log(d["realinv"].to_numpy()))
    g = 400 * np.diff(np.log(d["realgdp"].to_numpy()))
    x = np.column_stack([np.ones(y.size), g, d["realint"].to_numpy()[:-1]])
    fit = sm.OLS(y, x).fit()
    # MACRO_OLS_PARAMS: statsmodels test_diagnostic.py (R values).
    np.testing.assert_allclose(fit.params, MACRO_OLS_PARAMS, rtol=1e-8)
    out = np.asarray(fit.resid, dtype=float)
    assert out.size == MACRO_N
    out.setflags(write=False)
    return out


def nile() -> np.ndarray:
    """NILE: statsmodels.datasets.nile, annual flow of the Nile at Aswan, 1871-1970 (T = 100)."""
    from statsmodels.datasets import nile as dataset

    return dataset.load_pandas().data["volume"].to_numpy(dtype=float)


def sunspots() -> np.ndarray:
    """SUNSPOTS: statsmodels.datasets.sunspots, yearly sunspot activity, 1700-2008 (T = 309)."""
    from statsmodels.datasets import sunspots as dataset

    return dataset.load_pandas().data["SUNACTIVITY"].to_numpy(dtype=float)


# --- Ljung-Box / Box-Pierce (Ljung & Box 1978; Box & Pierce 1970) -------------------------------


class PortmanteauValue(NamedTuple):
    lags: int
    ljung_box: float
    ljung_box_p: float
    box_pierce: float
    box_pierce_p: float | None  # None: not published with the others


# statsmodels test_diagnostic.py (values generated in R), MACRO residuals, 4 and 40 lags; the
# Box-Pierce p-value at 40 lags is not given there.
MACRO_PORTMANTEAU = (
    PortmanteauValue(4, 5.23587172795227, 0.263940335284713, 5.12462932741681, 0.2747471266820692),
    PortmanteauValue(40, 51.03724531797195, 0.11334744923390, 45.12238537034000, None),
)

# statsmodels test_diagnostic.py (values generated in R): the first 30 MACRO residuals, 13 lags.
MACRO_FIRST_30_LAGS = 13
MACRO_FIRST_30_LJUNG_BOX = 9.61503968281915
MACRO_FIRST_30_LJUNG_BOX_P = 0.72507000996945

# NIST/SEMATECH e-Handbook of Statistical Methods, section 6.4.4.9: the sample ACF of Series F
# (n = 70), first two lags, as published.
NIST_SERIES_F_N = 70
NIST_SERIES_F_ACF = (-0.389878319, 0.304394082)
# Computed: Q(1) = n (n + 2) r1^2 / (n - 1) from the published r1 (Ljung-Box formula), given to
# 5 significant digits (so compared with rtol 5e-5).
NIST_SERIES_F_Q1 = 11.103
NIST_SERIES_F_Q1_RTOL = 5e-5

# NIST/SEMATECH e-Handbook, table 1.3.6.7.4: upper critical values of the chi-square
# distribution, (df, alpha 0.05, alpha 0.01), published to 4 decimals.
CHI2_UPPER_CRITICAL = (
    (1, 3.8415, 6.6349),
    (2, 5.9915, 9.2103),
    (4, 9.4877, 13.2767),
    (8, 15.5073, 20.0902),
    (10, 18.3070, 23.2093),
    (20, 31.4104, 37.5662),
)
CHI2_TABLE_ATOL = 5e-6  # half a unit in the 4th decimal, as a tail probability

# --- Engle's ARCH LM test (Engle 1982) ----------------------------------------------------------

# statsmodels test_diagnostic.py (R FinTS::ArchTest), MACRO residuals: (lags, LM, p-value).
MACRO_ARCH_LM = (
    (4, 3.43473400836259, 0.487871315392619),
    (12, 8.648320999014171, 0.732638635007718),
)

# --- Jarque-Bera (Jarque & Bera 1980) ------------------------------------------------------------

# statsmodels test_statstools.py (R fBasics): X20.
X20_JARQUE_BERA = 1.9662677226861689
X20_JARQUE_BERA_P = 0.3741367669648314
# Same source, published to 5 decimals (compared with atol 5e-6): skewness and kurtosis of X20;
# the excess kurtosis is the kurtosis minus 3.
X20_SKEWNESS = -0.51526
X20_KURTOSIS = 4.13910
X20_EXCESS_KURTOSIS = 1.13910
X20_MOMENTS_ATOL = 5e-6

# statsmodels test_statstools.py (R fBasics): log(X20^2).
LOG_X20_SQUARED_JARQUE_BERA = 5.7135750796706670
LOG_X20_SQUARED_JARQUE_BERA_P = 0.0574530296971343

# --- Mean zero with a HAC standard error (Newey & West 1987) ------------------------------------

# Newey-West lag rule floor(4 (T/100)^(2/9)), the rule statsmodels' sandwich_covariance applies;
# computed from it: T -> lags.
NEWEY_WEST_LAGS = {100: 4, 20: 2, MACRO_N: 4}

# Computed: X20, standard error of the mean with Bartlett weights and 0 / 2 / 4 lags, no
# small-sample correction (statsmodels OLS on a constant, cov_type="HAC",
# use_correction=False), given to 7 significant digits (compared with rtol 5e-7).
X20_HAC_STD_ERROR = ((0, 0.2221968), (2, 0.2216810), (4, 0.2060640))
X20_HAC_STD_ERROR_RTOL = 5e-7

# --- Benjamini-Hochberg (Benjamini & Hochberg 1995) ----------------------------------------------

# The paper's worked example: 15 p-values.
BH_EXAMPLE_P = _frozen(
    [
        0.0001,
        0.0004,
        0.0019,
        0.0095,
        0.0201,
        0.0278,
        0.0298,
        0.0344,
        0.0459,
        0.3240,
        0.4262,
        0.5719,
        0.6528,
        0.7590,
        1.000,
    ]
)
# Computed: the BH-adjusted p-values of the example, min over j >= i of m p_(j) / j, given to 8
# significant digits (compared with rtol 1e-7 or looser).
BH_EXAMPLE_ADJUSTED = _frozen(
    [
        0.0015,
        0.003,
        0.0095,
        0.035625,
        0.0603,
        0.06385714,
        0.06385714,
        0.0645,
        0.0765,
        0.486,
        0.58118182,
        0.714875,
        0.75323077,
        0.81321429,
        1.0,
    ]
)
# The paper: at FDR 0.05 the procedure rejects 4 hypotheses, Bonferroni 3.
BH_EXAMPLE_REJECTED_AT_005 = 4
BONFERRONI_EXAMPLE_REJECTED_AT_005 = 3

# --- MASE (Hyndman & Koehler 2006, IJF 22:679-688) ----------------------------------------------

# A published exercise: training series 18, 13, 16, 11, 17, 14; the in-sample MAE of the naive
# (m = 1) forecast, the MASE scale, is 4.40.
MASE_EXERCISE_TRAIN = (18.0, 13.0, 16.0, 11.0, 17.0, 14.0)
MASE_EXERCISE_NAIVE_SCALE = 4.4
# Computed: the seasonal naive scale with m = 2 is 2.0; with holdout actuals [15, 19] and
# forecasts [14, 14] the holdout MAE is 3, so MASE 3 / 4.4 = 0.681818 (given to 6 decimals,
# compared with atol 5e-7) for m = 1 and 3 / 2 = 1.5 for m = 2. Rows: (m, MASE, scale).
MASE_EXERCISE_SEASONAL_2_SCALE = 2.0
MASE_EXERCISE_HOLDOUT_ACTUALS = (15.0, 19.0)
MASE_EXERCISE_HOLDOUT_FORECASTS = (14.0, 14.0)
MASE_EXERCISE_HOLDOUT_MAE = 3.0
MASE_EXERCISE = ((1, 0.681818, 4.4), (2, 1.5, 2.0))
MASE_EXERCISE_ATOL = 5e-7
# Hyndman & Koehler (2006): the in-sample (seasonal) naive forecast scores MASE 1 exactly, since
# its errors are the ones the scale averages.
MASE_OF_IN_SAMPLE_NAIVE = 1.0

# --- Interval coverage: Kupiec (1995) proportion-of-failures likelihood-ratio test --------------

# LR = -2 ln[(1-p)^(T-x) p^x] + 2 ln[(1-x/T)^(T-x) (x/T)^x], chi-square(1), 0 ln 0 = 0; p = 0.01.
# Rows: (misses x, steps T, LR, atol from the printed decimals).
KUPIEC_P = 0.01
KUPIEC_LR = (
    (6, 252, 3.49878, 5e-6),  # a published exercise answer (5 decimals)
    (3, 250, 0.09494, 5e-6),  # published (5 decimals)
    (0, 250, 5.0252, 5e-5),  # computed from the formula (4 decimals)
    (8, 250, 7.73355, 5e-6),  # computed from the formula (5 decimals)
)
# The same published exercise: x = 6, T = 252, p = 0.01 gives p-value 0.0614 (4 decimals,
# compared with atol 5e-5), not rejected at 5%.
KUPIEC_EXERCISE_P_VALUE = 0.0614
KUPIEC_EXERCISE_P_VALUE_ATOL = 5e-5

# --- Interval (Winkler) score (Winkler 1972; Gneiting & Raftery 2007) ----------------------------

# (u - l) + (2/alpha)(l - y) if y < l, + (2/alpha)(y - u) if y > u.
# Rows: (y, lower, upper, alpha, score). The first is a published example (alpha 0.5, y 0.1,
# [0, 0.4]: 0.4); the others are computed from the formula (alpha 0.2, [10, 20]).
WINKLER_SCORES = (
    (0.1, 0.0, 0.4, 0.5, 0.4),
    (15.0, 10.0, 20.0, 0.2, 10.0),
    (25.0, 10.0, 20.0, 0.2, 60.0),
    (8.0, 10.0, 20.0, 0.2, 30.0),
)

# --- Robust portmanteau test (Dalla, Giraitis & Phillips 2022) -----------------------------------

# The computational lines of ac.test in the authors' R package testcorr (R/testcorr.R, version
# 0.2.0; unchanged in 0.3.0), run in R 4.2.2 on the data named, printed to 15 significant digits
# (hence TESTCORR_RTOL = 1e-12 where they are compared).
TESTCORR_RTOL = 1e-12
# NILE, lags 1..5: the robust t~_k, and Q~_m for m = 1..5 at thresholds 1.96 and 2.576.
TESTCORR_NILE_T = (
    4.17765096445521,
    3.52374534507442,
    3.10591242352145,
    2.1760212394027,
    2.36908679765807,
)
TESTCORR_NILE_Q_196 = (
    17.4527675808135,
    20.1696939629973,
    20.4399035412683,
    20.7423090501215,
    28.659849737779,
)
TESTCORR_NILE_Q_2576 = (
    17.4527675808135,
    20.1696939629973,
    27.1136981034787,
    27.1703046586428,
    314.392986165501,
)
# MACRO residuals, lags 1..10 at threshold 1.96: t~_k and Q~_10.
TESTCORR_MACRO_T = (
    -1.2729610193148,
    -0.064912517113423,
    1.47240445140198,
    -1.1101815466463,
    0.195983920542423,
    2.51025167939589,
    -0.403766907412931,
    -0.407035534220459,
    1.79510768946796,
    0.197889119165109,
)
TESTCORR_MACRO_Q10 = 14.9551718795272
# SUNSPOTS at threshold 1.96: t~_k for lags 1..3 and Q~_2 (testcorr's Q~_3, 60.930248871316,
# solves with an indefinite R*, which the core replaces by the diagonal form).
TESTCORR_SUNSPOTS_T = (8.90520714619839, 6.25932086850901, 0.718110642206145)
TESTCORR_SUNSPOTS_Q2 = 80.6978875554087

# --- Diebold-Mariano test, HLN variance (Harvey, Leybourne & Newbold 1997) ---------------------

# The dieboldmariano package's tests (tests/dieboldmarianotest.py), given to 4 decimals (so
# compared with atol 5e-5; the one-sided p-value to 3, atol 5e-4): a third-party implementation
# of the same HLN formula, not a publication. Forecasts are passed as errors with actuals 0.
DM_PACKAGE_ATOL = 5e-5
# Squared loss, h = 1: forecasts 0..5 against 0, 2, 3, 3, 5, 6.
DM_PACKAGE_SQUARED = {
    "forecast_1": (0.0, 1.0, 2.0, 3.0, 4.0, 5.0),
    "forecast_2": (0.0, 2.0, 3.0, 3.0, 5.0, 6.0),
    "statistic": -2.4905,
    "p_two_sided": 0.05513,
}
# Absolute loss, h = 3, 15 forecasts each; their one-sided p-value is P(T <= statistic).
DM_PACKAGE_ABSOLUTE_H3 = {
    "forecast_1": (
        0.3675225224615024,
        0.5450608127223211,
        0.22044990720021074,
        0.8688743471040006,
        0.6072512228948467,
        0.8582283746501538,
        0.41662295816718187,
        0.3812100211114714,
        0.7185133356116706,
        0.30827323290318875,
        0.4297093624074402,
        0.8615974488577858,
        0.7240514514808826,
        0.3450839595261038,
        0.19675301374013598,
    ),
    "forecast_2": (
        0.12794132529988733,
        0.3679643204341153,
        0.768715420996091,
        0.09972248964114683,
        0.27197653636654284,
        0.28797629010039505,
        0.9160213458582482,
        0.6112628048698798,
        0.5452873235576241,
        0.06785907231746158,
        0.6072666485541124,
        0.6241575753989782,
        0.39998026828867217,
        0.19895665605941748,
        0.8094941215215619,
    ),
    "statistic": 1.2109,
    "p_less": 0.877,
    "p_less_atol": 5e-4,
}

# --- Robust scale -----------------------------------------------------------------------------

# Rousseeuw & Croux (1993): 1.4826 MAD estimates the standard deviation of a normal sample
# (1 / Phi^-1(3/4), to 4 decimals; the core uses the same constant).
MAD_TO_SD = 1.4826
