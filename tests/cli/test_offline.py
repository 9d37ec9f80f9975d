"""``plumbline assess --offline``: the core in-process, numbers checked against statsmodels and
scipy. Every series here is invented (simulated from fixed seeds)."""

from __future__ import annotations

import json

import numpy as np
import pytest
from scipy import stats
from statsmodels.stats.diagnostic import acorr_ljungbox

from service import demo


def body(residuals: np.ndarray, *, model: str = "invented-model", level: float = 50.0) -> dict:
    """Series whose fitted values are a flat level and actuals level + ``residuals``."""
    series = []
    for i, e in enumerate(residuals):
        fitted = np.full(e.shape, level)
        series.append({"id": f"s{i}", "actuals": (fitted + e).tolist(), "fitted": fitted.tolist()})
    return {"model": model, "version": "1", "series": series}


def write(tmp_path, doc, name="req.json"):
    path = tmp_path / name
    path.write_text(json.dumps(doc))
    return path


def noise(seed: int, n_series: int = 10, t: int = 120) -> np.ndarray:
    return np.random.default_rng(seed).standard_normal((n_series, t))


def test_sound_residuals_pass_exit_0(cli, tmp_path):
    run = cli("assess", str(write(tmp_path, body(noise(1)))), "--offline")
    assert run.code == 0, run.out + run.err
    assert run.out.startswith("verdict: PASS")
    assert "stored:  no (offline)" in run.out


def test_biased_residuals_fail_exit_1(cli, tmp_path):
    e = noise(2) + 0.6  # every series 0.6 sd low
    # the premise, checked outside the project: scipy's one-sample t test
    assert all(stats.ttest_1samp(row, 0.0).pvalue < 1e-4 for row in e)
    run = cli("assess", str(write(tmp_path, body(e))), "--offline", "--json")
    assert run.code == 1
    result = json.loads(run.out)
    assert result["verdict"] == "fail" and result["id"] is None
    bias = {c["name"]: c for c in result["checks"]}["bias"]
    assert bias["status"] == "fail" and bias["series_failed"] == 10
    # mean_error is the plain mean of the residuals (numpy)
    for s, row in zip(result["series"], e, strict=True):
        assert s["bias"]["mean_error"] == pytest.approx(row.mean(), rel=1e-9)


def test_ljung_box_statistic_matches_statsmodels(cli, tmp_path):
    rng = np.random.default_rng(3)
    e = np.zeros((4, 150))
    shocks = rng.standard_normal((4, 150))
    for t in range(150):  # AR(1), phi 0.6: autocorrelation left in the residuals
        e[:, t] = shocks[:, t] + (0.6 * e[:, t - 1] if t else 0.0)
    run = cli("assess", str(write(tmp_path, body(e))), "--offline", "--json", "--model-params", "1")
    result = json.loads(run.out)
    assert run.code == 1
    for s, row in zip(result["series"], e, strict=True):
        lb = {c["name"]: c for c in s["checks"]}["ljung_box"]
        details = lb["details"]
        assert details["df"] == details["lags"] - 1  # --model-params 1 reached the core
        lags, df = details["classical_lags"], details["classical_df"]
        assert df == lags - 1
        # The classical Ljung-Box figures in the check's details (statsmodels 0.14).
        ref = acorr_ljungbox(row, lags=[lags], model_df=1)
        assert details["ljung_box"] == pytest.approx(float(ref["lb_stat"].iloc[0]), rel=1e-9)
        assert details["ljung_box_p_value"] == pytest.approx(
            float(ref["lb_pvalue"].iloc[0]), rel=1e-6
        )
        assert lb["status"] == "fail"


def test_fail_on_warn_blocks_a_warning(cli, files_dir):
    path = files_dir / "shared-week.json"
    assert cli("assess", str(path), "--offline").code == 0
    run = cli("assess", str(path), "--offline", "--fail-on", "warn")
    assert run.code == 1 and "gate: BLOCKS (verdict warn" in run.out


@pytest.fixture
def files_dir(tmp_path):
    directory = tmp_path / "demo"
    demo.write_demo(str(directory))
    return directory


def test_csv_offline_matches_json_offline(cli, files_dir):
    a = json.loads(cli("assess", str(files_dir / "weekday.json"), "--offline", "--json").out)
    run = cli(
        "assess",
        str(files_dir / "weekday.csv"),
        "--offline",
        "--json",
        "--model",
        "wrenfield-pickups-weekday",
        "--version",
        demo.VERSION,
        "--season-length",
        "7",
    )
    b = json.loads(run.out)
    assert run.code == 0
    assert a["checks"] == b["checks"] and a["series"] == b["series"]
    assert b["model"] == "wrenfield-pickups-weekday" and b["season_length"] == 7


def test_stdin_is_read_with_dash(cli, files_dir, monkeypatch):
    import io
    import sys

    data = (files_dir / "stale.json").read_bytes()
    monkeypatch.setattr(sys, "stdin", io.TextIOWrapper(io.BytesIO(data)))
    run = cli("assess", "-", "--offline")
    assert run.code == 1 and run.out.startswith("verdict: FAIL")


def test_policy_file_is_used_offline(cli, tmp_path, files_dir):
    policy = tmp_path / "lenient.json"
    policy.write_text(
        json.dumps(
            {
                "name": "lenient",
                "version": 3,
                "checks": {
                    "bias": {"enabled": False},
                    "interval_coverage": {"enabled": False},
                    "benchmark_skill": {"enabled": False},
                    "tracking_signal": {"enabled": False},
                    "mase": {"enabled": False},
                    "rmsse": {"enabled": False},
                    "holdout_bias": {"enabled": False},
                },
            }
        )
    )
    run = cli("assess", str(files_dir / "stale.json"), "--offline", "--policy", str(policy))
    assert "policy lenient v3" in run.out
    result = json.loads(
        cli(
            "assess", str(files_dir / "stale.json"), "--offline", "--policy", str(policy), "--json"
        ).out
    )
    assert result["policy"] == {"name": "lenient", "version": 3}
    assert [c["name"] for c in result["checks"]] == [
        "data_sufficiency",
        "ljung_box",
        "arch_lm",
        "jarque_bera",
    ]


def test_invalid_policy_file_names_the_field(cli, tmp_path, files_dir):
    policy = tmp_path / "bad.json"
    policy.write_text(json.dumps({"checks": {"bias": {"fail_p": 2}}}))
    run = cli("assess", str(files_dir / "stale.json"), "--offline", "--policy", str(policy))
    assert run.code == 2 and len(run.err.splitlines()) == 1
    assert "policy.checks.bias.fail_p" in run.err


def test_stored_policy_name_is_refused_offline(cli, files_dir):
    run = cli("assess", str(files_dir / "stale.json"), "--offline", "--policy", "release")
    assert run.code == 2
    assert "'release' is stored on a server" in run.err and "--policy FILE" in run.err


def test_invalid_request_names_the_field_offline(cli, tmp_path):
    doc = {
        "model": "m",
        "version": "1",
        "series": [
            {"id": "a", "actuals": [1.0, 2.0, 3.0], "fitted": [1.0, 2.0]},
            {"id": "b", "actuals": [1.0, 2.0], "fitted": [1.0]},
        ],
    }
    run = cli("assess", str(write(tmp_path, doc)), "--offline")
    assert run.code == 2 and len(run.err.splitlines()) == 1
    assert "invalid request" in run.err and "series[0]" in run.err and "series[1]" in run.err


def test_missing_model_is_named(cli, tmp_path):
    doc = body(noise(4, 2, 30))
    del doc["model"]
    run = cli("assess", str(write(tmp_path, doc)), "--offline")
    assert run.code == 2 and "model" in run.err


def test_csv_bad_cell_is_named_offline(cli, tmp_path):
    path = tmp_path / "bad.csv"
    path.write_text("series_id,actual,fitted\na,1,1\na,two,1\n")
    run = cli("assess", str(path), "--offline", "--model", "m", "--version", "1")
    assert run.code == 2 and "line[3]" in run.err and len(run.err.splitlines()) == 1
