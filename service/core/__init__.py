"""Plumbline's statistics core: pure numpy/scipy functions vectorised over series.

No web framework, database or pydantic import lives here; the API, store and CLI wrap it.
"""

from .batch import Baseline, Holdout, Residuals, SeriesBatch, make_batch, residuals_of
from .catalogue import CATALOGUE, CHECK_NAMES, CheckSpec
from .checks.accuracy import mase, naive_scale
from .checks.autocorrelation import autocorrelations, ljung_box, portmanteau_lags, portmanteau_q
from .checks.baseline import baseline_accuracy
from .checks.benchmarks import benchmark_skill
from .checks.bias import (
    bias,
    hac_variance_of_mean,
    newey_west_bias,
    newey_west_lags,
    tracking_signal,
)
from .checks.intervals import interval_coverage, winkler_scores
from .checks.normality import jarque_bera
from .checks.sufficiency import data_sufficiency
from .checks.variance import arch_lags, arch_lm
from .coverage_tests import kupiec_lr
from .gate import Assessment, assess
from .holdout import BENCHMARKS, benchmark_forecasts
from .multiple import benjamini_hochberg
from .policy import Policy, PolicyError, default_policy
from .results import CheckResult, Status
from .runner import CHECK_OPTIONS, BatchChecks, run_checks
from .types import InputError

__all__ = [
    "BENCHMARKS",
    "CATALOGUE",
    "CHECK_NAMES",
    "CHECK_OPTIONS",
    "Assessment",
    "Baseline",
    "BatchChecks",
    "CheckResult",
    "CheckSpec",
    "Holdout",
    "InputError",
    "Policy",
    "PolicyError",
    "Residuals",
    "SeriesBatch",
    "Status",
    "arch_lags",
    "arch_lm",
    "assess",
    "autocorrelations",
    "baseline_accuracy",
    "benchmark_forecasts",
    "benchmark_skill",
    "benjamini_hochberg",
    "bias",
    "data_sufficiency",
    "default_policy",
    "hac_variance_of_mean",
    "interval_coverage",
    "jarque_bera",
    "kupiec_lr",
    "ljung_box",
    "make_batch",
    "mase",
    "naive_scale",
    "newey_west_bias",
    "newey_west_lags",
    "portmanteau_lags",
    "portmanteau_q",
    "residuals_of",
    "run_checks",
    "tracking_signal",
    "winkler_scores",
]
