"""The typed result (service/results/): the gate's records, their one serializer, reading a
document back, the series table and the plain-text summary."""

from __future__ import annotations

import dataclasses
import io

import numpy as np
import orjson
import pytest

from service.core import assess, default_policy, make_batch
from service.core.gate import assess_many, assess_many_results
from service.core.policy import Policy
from service.results import (
    AssessmentDocument,
    AssessmentResult,
    CheckSummary,
    Reason,
    SeriesCheck,
    SeriesResult,
    SeriesTable,
    Status,
    to_dicts,
)


def invented_batch(n=6, t=80, horizon=8, seed=7, prefix="bay"):
    """Invented daily counts at some harbour bays: some biased, some autocorrelated."""
    rng = np.random.default_rng(seed)
    actuals = 50 + 4 * rng.standard_normal((n, t + horizon))
    e = rng.standard_normal((n, t))
    e[: n // 3] += 2.0  # biased rows
    e[n // 3 : 2 * n // 3, 1:] += 0.7 * e[n // 3 : 2 * n // 3, :-1]  # autocorrelated rows
    fitted = actuals[:, :t] - e
    fitted[:, 0] = np.nan
    hf = actuals[:, t:] + rng.standard_normal((n, horizon))
    return make_batch(
        actuals[:, :t],
        fitted,
        ids=[f"{prefix}-{i}" for i in range(n)],
        holdout_actuals=actuals[:, t:],
        holdout_forecasts=hf,
        holdout_lower=hf - 2.0,
        holdout_upper=hf + 2.0,
        level=0.9,
    )


def dumped(value) -> bytes:
    return orjson.dumps(value)


def envelope(result: AssessmentResult, **changes) -> AssessmentDocument:
    fields = {
        "id": "a-1",
        "created_at": "2026-12-01T06:00:00+00:00",
        "model": "harbour-bays",
        "version": "7",
        "stored": True,
        "labels": {"scenario": "invented"},
        "season_length": 1,
        "model_params": 0,
        "extra": {},
        "result": result,
    }
    return AssessmentDocument(**(fields | changes))


def test_the_gate_returns_typed_records_and_to_dict_is_their_serializer():
    assessment = assess(invented_batch(), default_policy())
    result = assessment.result()
    assert isinstance(result, AssessmentResult) and result.verdict is assessment.verdict
    assert all(isinstance(r, Reason) for r in result.reasons) and result.reasons
    assert all(isinstance(c, CheckSummary) for c in result.checks)
    assert isinstance(result.series, SeriesTable) and len(result.series) == 6
    series = result.series[0]
    assert isinstance(series, SeriesResult) and series.id == "bay-0"
    assert isinstance(series.verdict, Status) and series.verdict in ("pass", "warn", "fail")
    assert isinstance(series.check("bias"), SeriesCheck) and series.check("no-such") is None
    assert set(series.sections) == {"bias"}
    d = assessment.to_dict()
    # The one serializer: equal values, equal keys in equal order (the bytes).
    assert dumped(result.to_dict()) == dumped(d)
    assert list(d) == ["verdict", "policy", "reasons", "checks", "fleet", "series"]
    assert list(d["series"][0]) == ["id", "verdict", "n_obs", "weight", "bias", "checks"]
    # The counts, then each fleet-level test the registered checks declare, in their order.
    assert list(d["fleet"]) == [
        "n_series",
        "n_failed",
        "n_warned",
        "n_passed",
        "bias",
        "autocorrelation",
        "accuracy",
        "holdout_bias",
        "coverage",
    ]
    assert list(d["series"][0]["checks"][0]) == [f.name for f in dataclasses.fields(SeriesCheck)]
    assert list(d["checks"][0]) == [f.name for f in dataclasses.fields(CheckSummary)]
    assert list(d["reasons"][0]) == [f.name for f in dataclasses.fields(Reason)]
    assert d["series"][0] == series.to_dict()


@pytest.mark.parametrize(
    "changes",
    [
        {},
        {"checks": {"bias": {"enabled": False}}},  # the bias section is null throughout
        {"checks": {"tracking_signal": {"enabled": False}}},  # a section field is null
        {"fleet": {"weighting": "count", "adjustment": "none"}},
    ],
)
def test_from_dict_reads_back_what_to_dict_wrote(changes):
    policy = Policy.from_dict({**default_policy().to_dict(), **changes})
    d = assess(invented_batch(), policy).to_dict()
    again = AssessmentResult.from_dict(orjson.loads(dumped(d)))
    assert dumped(again.to_dict()) == dumped(d)
    assert again == AssessmentResult.from_dict(d)
    doc = envelope(again)
    assert dumped(AssessmentDocument.from_dict(doc.to_dict()).to_dict()) == dumped(doc.to_dict())


def test_series_table_records_rows_and_slices():
    result = assess(invented_batch(n=9), default_policy()).result()
    table = result.series
    rows = table.to_dicts()
    assert rows == [s.to_dict() for s in table]
    assert [s.id for s in table[2:5]] == ["bay-2", "bay-3", "bay-4"]
    assert table[2:5].to_dicts() == rows[2:5]
    assert table[-1].id == "bay-8" and table.find("bay-4") == table[4]
    assert table.find("nope") is None
    assert SeriesTable.of(list(table)) == table
    assert table.column("verdict") == tuple(r["verdict"] for r in rows)
    assert table.check_column("bias", "p_value") == tuple(r["checks"][1]["p_value"] for r in rows)
    assert table.section_column("bias", "mean_error") == tuple(
        r["bias"]["mean_error"] for r in rows
    )
    with pytest.raises(IndexError):
        table[9]
    with pytest.raises(KeyError):
        table.column("checks")


def test_stacked_parts_share_columns_and_serialize_as_separate_calls():
    policy = default_policy()
    batches = [invented_batch(n=3, seed=s, prefix=f"p{s}") for s in range(4)]
    results = assess_many_results([(b, policy) for b in batches])
    # The parts are runs of one set of columns, built once.
    assert len({id(r.series.columns) for r in results}) == 1
    alone = [assess(b, policy).to_dict() for b in batches]
    assert [dumped(d) for d in to_dicts(results)] == [dumped(d) for d in alone]
    assert [dumped(r.to_dict()) for r in results] == [dumped(d) for d in alone]
    assert results[1] == assess(batches[1], policy).result()
    assert [a.result() for a in assess_many([(b, policy) for b in batches])] == results
    # A record given twice gets rows of its own each time.
    first, second = to_dicts([results[0], results[0]])
    first["series"][0]["id"] = "changed"
    assert second["series"][0]["id"] == "p0-0"


def test_records_are_frozen():
    result = assess(invented_batch(), default_policy()).result()
    doc = envelope(result)
    with pytest.raises(dataclasses.FrozenInstanceError):
        doc.verdict = "pass"  # type: ignore[misc]
    with pytest.raises(dataclasses.FrozenInstanceError):
        result.reasons[0].message = "x"  # type: ignore[misc]
    with pytest.raises(TypeError):
        doc.labels["scenario"] = "x"  # type: ignore[index]
    with pytest.raises(TypeError):
        result.series[0].sections["bias"]["mean_error"] = 0.0  # type: ignore[index]
    with pytest.raises(TypeError):
        result.fleet.statistics["bias"]["p_value"] = 1.0  # type: ignore[index]
    with pytest.raises(TypeError):
        result.series[0].checks[0].details["n_obs"] = 1  # type: ignore[index]


def _document() -> dict:
    return envelope(assess(invented_batch(n=3), default_policy()).result()).to_dict()


def _broken(change) -> dict:
    d = orjson.loads(dumped(_document()))
    change(d)
    return d


@pytest.mark.parametrize(
    ("change", "message"),
    [
        (lambda d: d.pop("verdict"), "'verdict' is missing"),
        (lambda d: d.update(verdict="skipped"), "'verdict' is 'skipped', expected one of pass"),
        (lambda d: d.update(stored="yes"), "'stored' is 'yes', expected true or false"),
        (lambda d: d["policy"].update(version="1"), "'policy.version' is '1', expected an int"),
        (lambda d: d["reasons"][0].pop("message"), "'reasons[0].message' is missing"),
        (lambda d: d["checks"][2].update(extra=1), "'checks[2].extra' is not"),
        (lambda d: d["fleet"].update(n_failed=None), "'fleet.n_failed' is None"),
        (
            lambda d: d["series"][1]["checks"][3].update(p_value="0.1"),
            "'series[1].checks[3].p_value' is '0.1', expected a number or null",
        ),
        (lambda d: d["series"][2].pop("n_obs"), "'series[2].n_obs' is missing"),
        (lambda d: d["series"][1].update(n_obs=None), "'series[1].n_obs' is None, expected an in"),
        (lambda d: d["series"][0]["checks"][0].update(message=None), "checks[0].message' is None"),
        (lambda d: d["series"][2]["checks"].reverse(), "'series[2].checks' lists other checks"),
        (lambda d: d["series"][1].update(bias=None), "'series[1].bias' is None, expected an ob"),
        (lambda d: d.update(labels={"a": 1}), "'labels.a' is 1, expected a string"),
        (lambda d: d.update(series={}), "'series' is an object, expected a list"),
    ],
)
def test_from_dict_names_the_first_field_that_is_off(change, message):
    with pytest.raises(ValueError, match=message.replace("[", r"\[").replace("]", r"\]")):
        AssessmentDocument.from_dict(_broken(change))


def test_null_where_the_type_allows_it():
    d = _broken(lambda d: d["series"][1].update(weight=None))
    assert AssessmentDocument.from_dict(d).series[1].weight is None


def test_further_top_level_fields_are_kept():
    d = {**_document(), "links": {"report": "https://plumbline.invalid/r/a-1"}}
    doc = AssessmentDocument.from_dict(d)
    assert doc.extra["links"]["report"] == "https://plumbline.invalid/r/a-1"
    assert doc.to_dict() == d
    assert AssessmentDocument.from_dict(d, replayed=True).replayed


SUMMARY = """\
verdict: FAIL   model harbour-bays 7   policy default v1
series:  2 assessed, 1 failed, 0 warned, 1 passed
stored:  assessment a-1 (stored earlier under the same Idempotency-Key)
report:  https://plumbline.invalid/r/a-1

reasons (worst first):
  fail  bias  [bay-0] the mean residual is +2.1
  ... and 1 more (see the report)

  check  status  tested  failed  warned  untested  failed%
  bias   fail         2       1       0         0    50.0%

gate: BLOCKS (verdict fail is at or worse than --fail-on warn)
"""


def _small_document() -> AssessmentDocument:
    def row(sid, status):
        entry = {
            "name": "bias",
            "status": status,
            "statistic": 2.0,
            "p_value": 0.01,
            "p_adjusted": 0.02,
            "details": {"lags": 3},
            "message": "",
        }
        return {
            "id": sid,
            "verdict": status,
            "n_obs": 50,
            "weight": 1.0,
            "bias": None,
            "checks": [entry],
        }

    reason = {"check": "bias", "status": "fail", "series_id": "bay-0"}
    return AssessmentDocument.from_dict(
        {
            "id": "a-1",
            "created_at": None,
            "model": "harbour-bays",
            "version": "7",
            "stored": True,
            "labels": {},
            "season_length": 1,
            "model_params": 0,
            "verdict": "fail",
            "policy": {"name": "default", "version": 1},
            "reasons": [
                {**reason, "message": "the mean residual is +2.1"},
                {**reason, "series_id": None, "message": "one of two series fails"},
            ],
            "checks": [
                {
                    "name": "bias",
                    "status": "fail",
                    "series_tested": 2,
                    "series_failed": 1,
                    "series_warned": 0,
                    "series_skipped": 0,
                    "failed_share": 0.5,
                    "warned_share": 0.0,
                    "message": "",
                }
            ],
            "fleet": {"n_series": 2, "n_failed": 1, "n_warned": 0, "n_passed": 1},
            "series": [row("bay-0", "fail"), row("bay-1", "pass")],
        },
        replayed=True,
    )


def test_summary_is_the_plain_text_the_cli_prints():
    from service.cli import render

    doc = _small_document()
    text = doc.summary(
        fail_on="warn",
        link="https://plumbline.invalid/r/a-1",
        max_reasons=1,
        more="see the report",
    )
    assert text == SUMMARY
    out = io.StringIO()
    render.assessment(doc, out, fail_on="warn", where="offline", max_reasons=1)
    assert out.getvalue() == doc.summary(
        fail_on="warn", where="offline", max_reasons=1, more="--json prints them all"
    )
    # Without the CLI's parts: no gate line, not stored, no hint.
    plain = doc.result.summary()
    assert plain.startswith("verdict: FAIL   model (no model given)   policy default v1\n")
    assert "stored:  no\n" in plain and "gate:" not in plain
