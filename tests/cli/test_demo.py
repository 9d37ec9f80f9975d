"""``plumbline demo`` end to end; the invented data's premises checked with scipy/statsmodels."""

from __future__ import annotations

import json

import numpy as np
from scipy import stats
from statsmodels.stats.diagnostic import acorr_ljungbox

from service import demo


def residuals(path) -> dict[str, np.ndarray]:
    doc = json.loads(path.read_text())
    return {s["id"]: np.array(s["actuals"]) - np.array(s["fitted"]) for s in doc["series"]}


def test_demo_writes_files_and_prints_a_verdict_per_model(cli, tmp_path):
    directory = tmp_path / "demo"
    run = cli("demo", str(directory))
    assert run.code == 0, run.err
    assert run.out.startswith("INVENTED DEMO DATA: Wrenfield Cycle Share")
    written = sorted(p.name for p in directory.iterdir())
    assert written == [
        "README.txt",
        "shared-week.json",
        "stale.json",
        "weekday.csv",
        "weekday.json",
    ]
    assert (directory / "README.txt").read_text().startswith("INVENTED DEMO DATA")
    verdicts = {
        line.split()[1]: line.split()[0]
        for line in run.out.splitlines()
        if line.startswith("  ") and line.split()[0] in ("PASS", "WARN", "FAIL")
    }
    assert verdicts == {"weekday.json": "PASS", "stale.json": "FAIL", "shared-week.json": "WARN"}
    # each demo file gives the same verdict through assess
    for name, verdict in verdicts.items():
        out = cli("assess", str(directory / name), "--offline").out
        assert out.startswith(f"verdict: {verdict}")


def test_demo_is_reproducible(tmp_path):
    demo.write_demo(str(tmp_path / "a"))
    demo.write_demo(str(tmp_path / "b"))
    for name in ("weekday.json", "stale.json", "shared-week.json", "weekday.csv"):
        assert (tmp_path / "a" / name).read_bytes() == (tmp_path / "b" / name).read_bytes()


def test_demo_premises_hold_by_outside_tests(tmp_path):
    demo.write_demo(str(tmp_path))
    sound = residuals(tmp_path / "weekday.json")
    stale = residuals(tmp_path / "stale.json")
    shared = residuals(tmp_path / "shared-week.json")
    # stale: every dock's residuals average above zero (scipy one-sample t test)
    assert all(stats.ttest_1samp(e, 0.0).pvalue < 1e-6 and e.mean() > 0 for e in stale.values())
    # sound: no dock's mean is far from zero (t test, Bonferroni over 24 docks at 1%)
    assert all(stats.ttest_1samp(e, 0.0).pvalue > 0.01 / 24 for e in sound.values())

    # shared weekly profile: the waterfront dock keeps a weekly cycle (statsmodels Ljung-Box on
    # 14 lags), the commuter docks do not
    def lb_p(e):
        return float(acorr_ljungbox(e, lags=[14])["lb_pvalue"].iloc[0])

    assert lb_p(shared["waterfront"]) < 1e-10
    assert all(lb_p(e) > 0.01 / 24 for k, e in shared.items() if k != "waterfront")


def test_demo_csv_is_the_json_request(tmp_path):
    demo.write_demo(str(tmp_path))
    doc = json.loads((tmp_path / "weekday.json").read_text())
    lines = (tmp_path / "weekday.csv").read_text().splitlines()
    assert lines[0] == "series_id,timestamp,part,actual,fitted,lower,upper"
    train = [line for line in lines[1:] if ",train," in line]
    hold = [line for line in lines[1:] if ",holdout," in line]
    n = len(doc["series"])
    assert len(train) == n * demo.TRAIN_DAYS and len(hold) == n * demo.HOLDOUT_DAYS
    first = doc["series"][0]
    cells = train[0].split(",")
    assert cells[0] == first["id"] and cells[1] == first["timestamps"][0]
    assert float(cells[3]) == first["actuals"][0] and float(cells[4]) == first["fitted"][0]


def test_demo_into_an_unwritable_place_is_one_line_exit_2(cli, tmp_path):
    blocker = tmp_path / "file"
    blocker.write_text("x")
    run = cli("demo", str(blocker / "sub"))
    assert run.code == 2 and len(run.err.splitlines()) == 1
    assert "cannot write the demo" in run.err
