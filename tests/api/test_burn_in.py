"""burn_in: a model's start-up periods left out of every check, per request or per series,
through JSON and CSV, stored with the inputs (the fitted values as sent) and redrawn by the
report; and each series' given length, so a trailing missing actual is a gap."""

from __future__ import annotations

import numpy as np
import pytest
from statsmodels.stats.diagnostic import acorr_ljungbox

from service.ingest import RequestInvalid, parse_csv_request, parse_json_request

from .helpers import ADMIN, white_noise_series


def series_doc(n: int = 80, burn: int | None = None, **series_burn: int) -> dict:
    """An invented fleet of two white-noise series; the first three fitted values of each are
    start-up values far off (20 units) as a model's first fitted values can be."""
    series = []
    for k, sid in enumerate(("depot-1", "depot-2")):
        s = white_noise_series(sid, n=n, seed=10 + k)
        s["fitted"][:3] = [v - 20.0 for v in s["fitted"][:3]]
        if sid in series_burn:
            s["burn_in"] = series_burn[sid]
        series.append(s)
    doc = {"model": "m", "version": "1", "series": series}
    if burn is not None:
        doc["burn_in"] = burn
    return doc


def check(result: dict, sid: str, name: str) -> dict:
    series = next(s for s in result["series"] if s["id"] == sid)
    return next(c for c in series["checks"] if c["name"] == name)


def test_burn_in_leaves_out_the_first_periods_as_statsmodels_sees_them(client):
    doc = series_doc(burn=3)
    r = client.post("/v1/assessments", json=doc, headers=ADMIN)
    assert r.status_code == 201, r.text
    out = r.json()
    for s in doc["series"]:
        e = np.array(s["actuals"]) - np.array(s["fitted"])
        kept = e[3:]
        suff = check(out, s["id"], "data_sufficiency")["details"]
        assert suff["burn_in"] == 3 and suff["n_obs"] == kept.size
        bias = check(out, s["id"], "bias")["details"]
        np.testing.assert_allclose(bias["mean_error"], kept.mean(), rtol=1e-12)
        lb = check(out, s["id"], "ljung_box")["details"]
        # statsmodels acorr_ljungbox(kept, lags=[10]): the classical statistic in details.
        ref = acorr_ljungbox(kept, lags=[lb["classical_lags"]], model_df=0)
        np.testing.assert_allclose(lb["ljung_box"], ref["lb_stat"].iloc[0], rtol=1e-10)
        np.testing.assert_allclose(lb["ljung_box_p_value"], ref["lb_pvalue"].iloc[0], rtol=1e-8)


def test_without_burn_in_the_start_up_values_count(client):
    out = client.post("/v1/assessments", json=series_doc(), headers=ADMIN).json()
    suff = check(out, "depot-1", "data_sufficiency")["details"]
    assert suff["burn_in"] == 0 and suff["n_obs"] == 80


def test_a_series_own_burn_in_wins(client):
    doc = series_doc(burn=3, **{"depot-2": 5})
    out = client.post("/v1/assessments", json=doc, headers=ADMIN).json()
    assert check(out, "depot-1", "data_sufficiency")["details"]["burn_in"] == 3
    assert check(out, "depot-2", "data_sufficiency")["details"]["n_obs"] == 75


def to_csv(doc: dict) -> str:
    lines = ["series_id,actual,fitted"]
    for s in doc["series"]:
        lines += [f"{s['id']},{a},{f}" for a, f in zip(s["actuals"], s["fitted"], strict=True)]
    return "\n".join(lines) + "\n"


def test_csv_takes_burn_in_as_a_query_parameter():
    doc = series_doc(burn=3)
    from_csv = parse_csv_request(to_csv(doc), {"model": "m", "version": "1", "burn_in": "3"})
    from_json = parse_json_request(doc)
    np.testing.assert_array_equal(from_csv.batch.fitted, from_json.batch.fitted)
    np.testing.assert_array_equal(from_csv.batch.burn_in, [3, 3])
    assert np.isnan(from_json.batch.fitted[:, :3]).all()
    # The fitted values as sent are kept beside the batch's.
    np.testing.assert_array_equal(from_json.fitted_sent(0), doc["series"][0]["fitted"])


@pytest.mark.parametrize(
    ("change", "loc"),
    [
        ({"burn_in": -1}, "burn_in"),
        ({"burn_in": "3"}, "burn_in"),
        ({"burn_in": 2.5}, "burn_in"),
    ],
)
def test_bad_burn_in_is_named(change, loc):
    with pytest.raises(RequestInvalid) as info:
        parse_json_request({**series_doc(), **change})
    assert [e["loc"] for e in info.value.errors] == [loc]
    doc = series_doc()
    doc["series"][1]["burn_in"] = change["burn_in"]
    with pytest.raises(RequestInvalid) as info:
        parse_json_request(doc)
    assert [e["loc"] for e in info.value.errors] == [f"series[1].{loc}"]
    with pytest.raises(RequestInvalid) as info:
        parse_csv_request(to_csv(doc), {"model": "m", "version": "1", "burn_in": "x"})
    assert [e["loc"] for e in info.value.errors] == ["burn_in"]


def test_stored_inputs_keep_the_fitted_values_and_the_report_draws_without_them(client):
    doc = series_doc(**{"depot-1": 3})
    a = client.post("/v1/assessments", json=doc, headers=ADMIN).json()
    store = client.app.state.store
    inputs = {s.series_id: s for s in store.series_inputs(assessment_id=a["id"])}
    assert inputs["depot-1"].burn_in == 3 and inputs["depot-2"].burn_in == 0
    np.testing.assert_array_equal(inputs["depot-1"].fitted, doc["series"][0]["fitted"])
    page = client.get(f"/v1/assessments/{a['id']}/report/series/depot-1", headers=ADMIN)
    assert page.status_code == 200
    assert "Burn-in left out" in page.text and "the first 3 periods" in page.text
    other = client.get(f"/v1/assessments/{a['id']}/report/series/depot-2", headers=ADMIN)
    assert "Burn-in left out" not in other.text


def test_a_trailing_missing_actual_is_a_gap():
    # The last two periods have neither an actual nor a fitted value: they are still periods of
    # the series as sent (gaps), not cut off.
    doc = series_doc(n=30)
    for s in doc["series"]:
        s["actuals"][-2:] = [None, None]
        s["fitted"][-2:] = [None, None]
    req = parse_json_request(doc)
    np.testing.assert_array_equal(req.batch.lengths, [30, 30])
    from service.core import residuals_of

    res = residuals_of(req.batch)
    np.testing.assert_array_equal(res.n_missing, [2, 2])
    np.testing.assert_array_equal(res.n_obs, [28, 28])
