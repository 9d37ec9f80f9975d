"""The contributor guide's walk-through works: one new module is all a check needs.

The example check in DEVELOPERS.md ("Adding a check") is written, as it stands there, into a copy
of the package as ``service/core/checks/sign_runs.py``; a fresh interpreter on that copy must
list it in the catalogue, accept its policy options, run it in the gate with its reason sentence,
and give the statistic of a reference implementation.
"""

from __future__ import annotations

import json
import re
import shutil
import subprocess
import sys
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[2]
MARKER = "# service/core/checks/sign_runs.py"

PROBE = r"""
import json, sys
import numpy as np
import service
from service.core import CATALOGUE, CHECK_NAMES, PolicyError, assess, make_batch, run_checks
from service.core.policy import Policy

out = {"package": service.__file__, "names": list(CHECK_NAMES)}
spec = {s.name: s for s in CATALOGUE}["sign_runs"]
out["source"] = spec.source
policy = Policy.from_dict({"checks": {"sign_runs": {"warn_p": 0.2, "fail_p": 0.1,
                                                     "min_obs": 12}}})
out["rule"] = policy.to_dict()["checks"]["sign_runs"]
try:
    Policy.from_dict({"checks": {"sign_runs": {"min_obs": -1}}})
except PolicyError as exc:
    out["bad"] = exc.errors
rng = np.random.default_rng(7)
noise = rng.standard_normal((3, 60))
noise[1] = np.where(np.arange(60) % 2 == 0, 1.0, -1.0) * (1.0 + rng.random(60))
noise[2, 20] = np.nan
actuals = 100.0 + noise
fitted = np.full_like(actuals, 100.0)
fitted[2, 20] = np.nan
batch = make_batch(actuals, fitted, ids=["a", "b", "c"])
checks = run_checks(batch)
out["z"] = checks["sign_runs"].statistic.tolist()
out["residuals"] = np.where(np.isnan(actuals - fitted), None, actuals - fitted).tolist()
result = assess(batch, policy).to_dict()
out["reasons"] = [r for r in result["reasons"] if r["check"] == "sign_runs"]
out["series_checks"] = [
    [c["name"] for c in s["checks"]] for s in result["series"]
]
print(json.dumps(out))
"""


def _example_module() -> str:
    text = (ROOT / "DEVELOPERS.md").read_text()
    blocks = re.findall(r"```python\n(.*?)```", text, flags=re.S)
    (block,) = [b for b in blocks if b.startswith(MARKER)]
    return block


def _runs_z(x: np.ndarray) -> float:
    """statsmodels' runs test z on the signs (no continuity correction)."""
    from statsmodels.sandbox.stats.runs import runstest_1samp

    return float(runstest_1samp(x, cutoff=0.0, correction=False)[0])


def test_the_guide_example_is_a_whole_check(tmp_path: Path):
    copy = tmp_path / "service"
    shutil.copytree(ROOT / "service", copy, ignore=shutil.ignore_patterns("__pycache__", "*.pyc"))
    (copy / "core" / "checks" / "sign_runs.py").write_text(_example_module())
    done = subprocess.run(
        [sys.executable, "-c", PROBE], cwd=tmp_path, capture_output=True, text=True, check=True
    )
    out = json.loads(done.stdout)
    # The interpreter ran the copy, with the new check in its catalogue position.
    assert Path(out["package"]).resolve().is_relative_to(tmp_path.resolve())
    names = out["names"]
    assert names.index("sign_runs") == names.index("ljung_box") + 1
    assert out["source"].startswith("Wald & Wolfowitz (1940)")
    # Its policy options are parsed, validated and written back.
    assert out["rule"] == {
        "enabled": True,
        "warn_p": 0.2,
        "fail_p": 0.1,
        "adjust": True,
        "min_obs": 12,
    }
    assert out["bad"] == [{"loc": "checks.sign_runs.min_obs", "message": "must be an integer >= 0"}]
    # The statistic is statsmodels' runs test on the signs of the observed residuals.
    for row, z in zip(out["residuals"], out["z"], strict=True):
        x = np.array([v for v in row if v is not None])
        np.testing.assert_allclose(z, _runs_z(x), rtol=1e-12)  # runstest_1samp(x, cutoff=0)
    # Alternating signs fail the series (and so one third of the fleet), with the sentences
    # the module declares.
    assert [(r["series_id"], r["status"]) for r in out["reasons"]] == [
        (None, "fail"),
        ("b", "fail"),
    ]
    assert out["reasons"][0]["message"].startswith("Runs of residual signs: 1 of 3 series fail")
    assert "change sign too often" in out["reasons"][1]["message"]
    assert all("sign_runs" in s for s in out["series_checks"])
