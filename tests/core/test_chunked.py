"""A fleet assessed chunk by chunk (``assess_chunks``) gives the one-shot ``assess`` to the last
bit: every statistic, p-value, adjusted p-value, status, reason and fleet figure, for any
chunk size. The fleets are invented (seeded): ragged lengths, gaps, seasonality, weights,
burn-in, holdouts with and without intervals."""

from __future__ import annotations

from concurrent.futures import ThreadPoolExecutor

import numpy as np
import pytest

from service.core import InputError, assess, default_policy, fleet_parts, make_batch
from service.core.batch import conform
from service.core.chunked import assess_chunks
from service.core.fleet_bias import fleet_bias, fleet_bias_from_parts, fleet_bias_part
from service.core.fleet_parts import combine
from service.core.policy import Policy

from .test_fleet_bias import direct_fleet


def invented_rows(seed, n, t=80, h=10, season=12, scale=1.0, weights=True):
    """Invented monthly-like series of ragged lengths around their own levels (seeded), as
    ragged lists like a parser's, with a holdout for most series and intervals for some."""
    rng = np.random.default_rng(seed)
    lengths = rng.integers(24, t + 1, n)
    actuals, fitted, h_act, h_fc, lower, upper = [], [], [], [], [], []
    shared = rng.standard_normal(t)  # a shock common to the fleet
    for i in range(n):
        m = int(lengths[i])
        level = rng.uniform(20, 200)
        y = level * (1 + 0.1 * np.sin(2 * np.pi * np.arange(m) / season))
        e = rng.standard_normal(m) + 0.5 * shared[:m]
        e[1:] += rng.uniform(-0.2, 0.6) * e[:-1]
        y = scale * (y + e)
        f = y - scale * (e + rng.uniform(-0.4, 0.4))
        f[0] = np.nan
        gaps = rng.random(m) < 0.04
        gaps[-1] = False
        y[gaps] = np.nan
        actuals.append(y.tolist())
        fitted.append(f.tolist())
        steps = int(rng.integers(0, h + 1)) if i % 5 else 0  # every fifth series: no holdout
        ha = scale * (level + rng.standard_normal(steps) * 2)
        hf = ha + scale * rng.standard_normal(steps)
        h_act.append(ha.tolist())
        h_fc.append(hf.tolist())
        wide = i % 3 != 0  # intervals for two series in three
        lower.append((hf - 1.6 * scale).tolist() if wide else [None] * steps)
        upper.append((hf + 1.6 * scale).tolist() if wide else [None] * steps)
    kw = {
        "ids": [f"store-{i:04d}" for i in range(n)],
        "season_length": season,
        "holdout_actuals": h_act,
        "holdout_forecasts": h_fc,
        "holdout_lower": lower,
        "holdout_upper": upper,
        "level": 0.9,
        "burn_in": [int(i % 7 == 0) for i in range(n)],
    }
    if weights:
        w = rng.uniform(0.5, 5.0, n)
        kw["weights"] = [None if i % 4 == 0 else float(v) for i, v in enumerate(w)]
    return actuals, fitted, kw


def _select(kw, lo, hi):
    return {k: (v[lo:hi] if isinstance(v, list) else v) for k, v in kw.items()}


def _pad(rows, width):
    """Ragged rows padded with missing values to ``width`` (a holdout of no steps included)."""
    out = np.full((len(rows), width), np.nan)
    for i, r in enumerate(rows):
        out[i, : len(r)] = [np.nan if v is None else v for v in r]
    return out


def whole_and_chunks(seed, n, size, **options):
    """The fleet as one batch, and as chunks of ``size`` series built on their own (each
    padded by make_batch to its own longest series, then conformed to the fleet's shape)."""
    actuals, fitted, kw = invented_rows(seed, n, **options)
    horizon = max(len(r) for r in kw["holdout_actuals"])
    hold = ("holdout_actuals", "holdout_forecasts", "holdout_lower", "holdout_upper")
    whole_kw = {k: (_pad(v, horizon) if k in hold else v) for k, v in kw.items()}
    whole = make_batch(actuals, fitted, **whole_kw)
    width = whole.actuals.shape[1]
    chunks = []
    for lo in range(0, n, size):
        hi = min(lo + size, n)
        part = _select(kw, lo, hi)
        steps = max(len(r) for r in part["holdout_actuals"])
        part = {k: (_pad(v, steps) if k in hold else v) for k, v in part.items()}
        if steps == 0:  # no holdout in this chunk at all
            part = {k: v for k, v in part.items() if k not in (*hold, "level")}
        elif np.isnan(part["holdout_lower"]).all():  # no intervals in this chunk
            part = {k: v for k, v in part.items() if k not in ("holdout_lower", "holdout_upper")}
            part.pop("level")
        batch = make_batch(actuals[lo:hi], fitted[lo:hi], **part)
        chunks.append(conform(batch, width=width, horizon=horizon, intervals=True))
    return whole, chunks


def assert_same(one, got):
    """Every array the decision was made from, bit for bit, and the serialized result."""
    assert got.verdict == one.verdict
    assert got.ids == one.ids
    assert np.array_equal(got.weights, one.weights)
    assert np.array_equal(got.series_codes, one.series_codes)
    assert set(got.results.checks) == set(one.results.checks)
    for name, r1 in one.results.checks.items():
        r2 = got.results[name]
        assert np.array_equal(r2.statistic, r1.statistic, equal_nan=True), name
        assert np.array_equal(r2.p_value, r1.p_value, equal_nan=True), name
        assert np.array_equal(got.p_adjusted[name], one.p_adjusted[name], equal_nan=True), name
        assert np.array_equal(got.status_codes[name], one.status_codes[name]), name
        assert r2.skip_reason.tolist() == r1.skip_reason.tolist(), name
        for key, v1 in r1.details.items():
            v2 = r2.details[key]
            assert v2.dtype == v1.dtype, (name, key)
            if v1.dtype.kind == "f":
                assert np.array_equal(v2, v1, equal_nan=True), (name, key)
            else:
                assert v2.tolist() == v1.tolist(), (name, key)
    assert np.array_equal(got.results.residuals.n_obs, one.results.residuals.n_obs)
    assert got.reasons == one.reasons
    assert got.summaries == one.summaries
    assert got.to_dict() == one.to_dict()


@pytest.fixture
def small_blocks(monkeypatch):
    """Blocks of 8 series, so a small fleet spans many blocks and parts (the one-shot path and
    the chunked path both read the block size at the call)."""
    monkeypatch.setattr(fleet_parts, "BLOCK", 8)


@pytest.mark.parametrize("size", [1, 7, 60])
def test_equal_to_one_shot_for_any_chunk_size(small_blocks, size):
    whole, chunks = whole_and_chunks(20261203, 60, size)
    policy = default_policy()
    one = assess(whole, policy)
    got = assess_chunks(chunks, policy, part_blocks=2)
    assert_same(one, got)
    stats = one.to_dict()["fleet"]
    # The fleet-level tests ran (not their empty stand-ins), so their equality means something.
    assert stats["bias"]["p_value"] is not None
    assert stats["autocorrelation"]["lag"] is not None
    assert stats["holdout_bias"]["p_value"] is not None
    assert stats["coverage"]["p_value"] is not None
    assert stats["accuracy"]["p_value"] is not None


@pytest.mark.parametrize("part_blocks", [1, 3])
def test_part_size_does_not_matter(small_blocks, part_blocks):
    whole, chunks = whole_and_chunks(7, 50, 13)
    policy = default_policy()
    assert_same(assess(whole, policy), assess_chunks(chunks, policy, part_blocks=part_blocks))


def test_full_size_blocks_across_parts():
    # 2,100 series: three blocks of the real size, parts of one block each.
    whole, chunks = whole_and_chunks(11, 2100, 700, t=30, h=4, season=4)
    policy = default_policy()
    one = assess(whole, policy)
    got = assess_chunks(chunks, policy, part_blocks=1)
    assert_same(one, got)


@pytest.mark.parametrize(
    "doc",
    [
        {"name": "counted", "fleet": {"weighting": "count", "adjustment": "none"}},
        {"name": "bh", "fleet": {"adjustment": "bh", "family": "none"}},
        {"name": "lags", "checks": {"ljung_box": {"lags": 5}, "arch_lm": {"enabled": False}}},
    ],
)
def test_equal_under_other_policies(small_blocks, doc):
    weights = doc.get("fleet", {}).get("weighting") != "count"
    whole, chunks = whole_and_chunks(3, 40, 7, weights=weights)
    policy = Policy.from_dict(doc)
    assert_same(assess(whole, policy), assess_chunks(chunks, policy, part_blocks=2))


def test_huge_values_stay_finite_and_equal(small_blocks):
    # Values near the accepted magnitude: the fleet bias's sums are kept in powers of two.
    whole, chunks = whole_and_chunks(5, 30, 4, scale=1e240)
    policy = default_policy()
    one = assess(whole, policy)
    assert_same(one, assess_chunks(chunks, policy, part_blocks=1))
    bias = one.to_dict()["fleet"]["bias"]
    assert bias["std_error"] is not None and np.isfinite(bias["std_error"])


def test_progress_and_an_executor(small_blocks):
    whole, chunks = whole_and_chunks(9, 45, 10)
    policy = default_policy()
    seen = []
    with ThreadPoolExecutor(max_workers=2) as pool:
        got = assess_chunks(
            chunks,
            policy,
            progress=lambda done, total: seen.append((done, total)),
            executor=pool,
            total=45,
            part_blocks=2,
            window=2,
        )
    assert_same(assess(whole, policy), got)
    # Parts of 16 series: 16, 32, then the last 13.
    assert seen == [(16, 45), (32, 45), (45, 45)]


def test_chunks_must_share_the_fleet_shape():
    _, chunks = whole_and_chunks(1, 12, 6)
    narrow = make_batch([[1.0, 2.0, 3.0]], [[None, 2.5, 2.0]], ids=["other"])
    with pytest.raises(InputError) as err:
        assess_chunks([chunks[0], narrow], default_policy())
    assert err.value.argument == "chunks"
    assert "chunk 1 has 3 periods" in str(err.value)


def test_an_id_repeated_across_chunks_is_refused():
    _, chunks = whole_and_chunks(1, 12, 6)
    with pytest.raises(InputError) as err:
        assess_chunks([chunks[0], chunks[0]], default_policy())
    assert err.value.argument == "ids"
    assert err.value.index == 6  # the first series of the second chunk


def test_no_series_and_not_a_batch():
    with pytest.raises(InputError, match="no series"):
        assess_chunks([], default_policy())
    with pytest.raises(InputError, match="chunk 0 is not a SeriesBatch"):
        assess_chunks([[1.0, 2.0]], default_policy())  # type: ignore[list-item]


def test_weights_a_policy_ignores_name_the_fleet_position():
    _, chunks = whole_and_chunks(2, 12, 6)
    policy = Policy.from_dict({"name": "volume", "fleet": {"weighting": "volume"}})
    with pytest.raises(InputError) as err:
        assess_chunks(chunks, policy)
    assert err.value.argument == "weights"
    assert err.value.index == 1  # series 0 has no weight given (every fourth is None)


def test_conform_refuses_a_wider_chunk():
    batch = make_batch([[1.0, 2.0, 3.0]], [[None, 2.5, 2.0]])
    with pytest.raises(InputError, match="more than the fleet's 2"):
        conform(batch, width=2)


def test_fleet_bias_from_parts_matches_a_direct_loop(small_blocks):
    # tests/core/test_fleet_bias.py direct_fleet: a plain loop over series and periods with
    # scipy's t distribution (Driscoll & Kraay 1998 with the EWC variance).
    rng = np.random.default_rng(42)
    n, t = 30, 50
    lengths = rng.integers(20, t + 1, n)
    e = rng.standard_normal((n, t)) + 0.3 * rng.standard_normal(t)[None, :] + 0.1
    rows = [e[i, : lengths[i]].tolist() for i in range(n)]
    rows[3][5] = None
    weights = rng.uniform(0.5, 3.0, n)
    batch = make_batch(rows, [[0.0] * len(r) for r in rows])
    from service.core import residuals_of

    res = residuals_of(batch)
    parts = [
        fleet_bias_part(res.rows(slice(lo, lo + 8)), weights[lo : lo + 8]) for lo in range(0, n, 8)
    ]
    got = fleet_bias_from_parts(combine(parts))
    offsets = (lengths.max() - lengths).tolist()
    want = direct_fleet(rows, weights, offsets)
    assert got.theta[0] == pytest.approx(want["theta"], rel=1e-10)
    assert got.std_error[0] == pytest.approx(want["se"], rel=1e-10)
    assert got.p_value[0] == pytest.approx(want["p"], rel=1e-8)
    assert got.naive_std_error[0] == pytest.approx(want["naive_se"], rel=1e-10)
    assert int(got.bins[0]) == want["b"] and int(got.n_periods[0]) == want["n"]
    # And the general function agrees to rounding.
    general = fleet_bias(res, weights)
    assert got.std_error[0] == pytest.approx(float(general.std_error[0]), rel=1e-12)


def test_equal_with_a_baseline(small_blocks):
    # The baseline comparison's fleet figure too (an invented production version's holdout
    # forecasts, labelled): chunks are row ranges of the whole batch, baseline included.
    from service.core.batch import Baseline, SeriesBatch

    whole, _ = whole_and_chunks(17, 40, 40)
    rng = np.random.default_rng(17)
    h = whole.holdout
    forecasts = h.actuals + rng.standard_normal(h.actuals.shape) * 1.3
    fields = {f: getattr(whole, f) for f in SeriesBatch.__dataclass_fields__}
    fields["baseline"] = Baseline(forecasts=forecasts, label="2026.11")
    with_base = SeriesBatch(**fields)
    policy = default_policy()
    one = assess(with_base, policy)
    assert one.to_dict()["fleet"]["baseline"]["p_value"] is not None
    for size in (1, 7):
        chunks = [with_base.rows(slice(lo, lo + size)) for lo in range(0, 40, size)]
        assert_same(one, assess_chunks(chunks, policy, part_blocks=2))


@pytest.mark.parametrize("size", [1, 9, 60, 100])
def test_series_rows_made_in_parts_are_the_results_rows(small_blocks, size):
    # A big fleet's rows are made a few thousand at a time when they are stored; each part's
    # rows (with the series' reasons and pass sentences at their places) are the result's.
    _, chunks = whole_and_chunks(11, 60, 13)
    # Without the adjustment across series, some series warn or fail and carry reasons.
    strict = Policy.from_dict({"name": "unadjusted", "fleet": {"adjustment": "none"}})
    got = assess_chunks(chunks, strict, part_blocks=2)
    rows = [row for table in got.series_parts(size) for row in table.to_dicts()]
    assert rows == got.result().series.to_dicts()
    assert any(r["verdict"] != "pass" for r in rows)  # reasons are placed, not only passes
    head = got.result("none")
    assert len(head.series) == 0 and head.to_dict() | {"series": rows} == got.to_dict()
    with pytest.raises(ValueError):
        next(got.series_parts(0))
