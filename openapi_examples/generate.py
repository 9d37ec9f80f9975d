"""Write the OpenAPI examples of this folder, deterministically (seeded), from an invented
scenario: Crumb & Kiln, a fictional regional bakery chain, forecasts the loaves each of its
shops sells per day. All names and numbers are invented.

Run from the repository root: ``python openapi_examples/generate.py``. Requests are built here;
responses are what the service answers for them (computed in-process, without storing, then
given a fixed id and time so the files do not change from run to run).
"""

from __future__ import annotations

import sys
from pathlib import Path
from typing import Any

import numpy as np
import orjson

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE.parent))

SHOPS = ("harbour-st", "mill-lane", "old-town", "station-rd")
DAYS = 112  # sixteen weeks of training days
HOLDOUT = 14  # two weeks out of sample
START = np.datetime64("2026-08-03")  # a Monday
FIXED_ID = "0c1e5a7b9d2f4e6a8b0c1d2e3f405162"
FIXED_TIME = "2026-11-30T06:00:00+00:00"
SEED = 20261130


def _weekly_profile() -> np.ndarray:
    """Loaves sold relative to the weekly mean: busy Saturdays, quiet Mondays (invented)."""
    return np.array([0.82, 0.90, 0.95, 1.00, 1.08, 1.30, 0.95])


def _shop(rng: np.random.Generator, shop: str, kind: str) -> dict[str, Any]:
    base = rng.uniform(180, 420)
    t = np.arange(DAYS + HOLDOUT)
    season = _weekly_profile()[t % 7]
    mean = base * season
    noise = rng.normal(0.0, 0.04 * base, t.size)
    sold = np.round(mean + noise, 0)
    if kind == "sound":
        fitted = mean
    elif kind == "biased":
        # The model forecasts 7% too few loaves every day.
        fitted = 0.93 * mean
    elif kind == "seasonal-miss":
        # The model knows the level but not the week: a flat forecast for a weekly pattern.
        fitted = np.full(t.size, base * season.mean())
    else:
        raise ValueError(kind)
    stamps = [str(START + np.timedelta64(int(d), "D")) for d in t]
    half = 1.96 * 0.04 * base
    return {
        "id": shop,
        "actuals": sold[:DAYS].tolist(),
        "fitted": np.round(fitted[:DAYS], 1).tolist(),
        "timestamps": stamps[:DAYS],
        "holdout": {
            "actuals": sold[DAYS:].tolist(),
            "forecasts": np.round(fitted[DAYS:], 1).tolist(),
            "lower": np.round(fitted[DAYS:] - half, 1).tolist(),
            "upper": np.round(fitted[DAYS:] + half, 1).tolist(),
            "level": 0.95,
            "timestamps": stamps[DAYS:],
        },
    }


def _request(kind: str, version: str) -> dict[str, Any]:
    rng = np.random.default_rng([SEED, ["sound", "biased", "seasonal-miss"].index(kind)])
    return {
        "model": "daily-loaves",
        "version": version,
        "policy": "default",
        "season_length": 7,
        "model_params": 2,
        "labels": {"scenario": "invented: Crumb & Kiln bakery chain", "kind": kind},
        "series": [_shop(rng, shop, kind) for shop in SHOPS],
    }


def _csv(doc: dict[str, Any]) -> str:
    lines = ["series_id,timestamp,part,actual,fitted,lower,upper"]
    for s in doc["series"][:2]:
        for ts, a, f in zip(s["timestamps"], s["actuals"], s["fitted"], strict=True):
            lines.append(f"{s['id']},{ts},train,{a:g},{f:g},,")
        h = s["holdout"]
        for ts, a, f, lo, up in zip(
            h["timestamps"], h["actuals"], h["forecasts"], h["lower"], h["upper"], strict=True
        ):
            lines.append(f"{s['id']},{ts},holdout,{a:g},{f:g},{lo:g},{up:g}")
    return "\n".join(lines) + "\n"


def _fix(response: dict[str, Any]) -> dict[str, Any]:
    response = dict(response)
    if response.get("id", "absent") is None:
        response["id"] = FIXED_ID
        response["stored"] = True
    if "created_at" in response:
        response["created_at"] = FIXED_TIME
    return response


def _dump(path: Path, value: Any) -> None:
    path.write_bytes(orjson.dumps(value, option=orjson.OPT_INDENT_2) + b"\n")


def main() -> int:
    import tempfile

    from fastapi.testclient import TestClient

    from service.api.app import create_app
    from service.settings import Settings

    (HERE / "requests").mkdir(exist_ok=True)
    (HERE / "responses").mkdir(exist_ok=True)
    examples: list[dict[str, Any]] = []
    with tempfile.TemporaryDirectory() as tmp:
        settings = Settings(
            database_url=f"sqlite:///{tmp}/examples.db", admin_token="examples", examples_dir=tmp
        )
        with TestClient(create_app(settings)) as client:
            auth = {"Authorization": "Bearer examples"}

            def post(
                name: str, summary: str, request: Any, *, csv_params: str | None = None
            ) -> None:
                if csv_params is None:
                    r = client.post(
                        "/v1/assessments?store=false",
                        content=orjson.dumps(request),
                        headers={**auth, "Content-Type": "application/json"},
                    )
                    req_file = f"requests/{name}.json"
                    _dump(HERE / req_file, request)
                else:
                    r = client.post(
                        f"/v1/assessments?store=false&{csv_params}",
                        content=request.encode(),
                        headers={**auth, "Content-Type": "text/csv"},
                    )
                    req_file = f"requests/{name}.csv"
                    (HERE / req_file).write_text(request)
                answer = r.json()
                status = 201 if r.status_code == 200 else r.status_code
                res_file = f"responses/{name}.json"
                _dump(HERE / res_file, _fix(answer))
                entry: dict[str, Any] = {
                    "name": name,
                    "summary": summary,
                    "request": req_file,
                    "response": res_file,
                    "status": status,
                }
                if csv_params is not None:
                    entry["query"] = csv_params
                if status < 400:
                    entry["verdict"] = answer["verdict"]
                examples.append(entry)

            post(
                "sound-model",
                "Invented bakery chain: a sound daily model (weekly season)",
                _request("sound", "2026.11.30"),
            )
            post(
                "biased-model",
                "Invented bakery chain: forecasts 7% too low every day",
                _request("biased", "2026.11.30-b"),
            )
            post(
                "seasonal-miss",
                "Invented bakery chain: a flat forecast that misses the "
                "weekly pattern (autocorrelated residuals)",
                _request("seasonal-miss", "2026.11.30-c"),
            )
            post(
                "csv-upload",
                "Invented bakery chain: two shops as a CSV long-format upload",
                _csv(_request("sound", "2026.11.30")),
                csv_params="model=daily-loaves&version=2026.11.30&season_length=7"
                "&model_params=2&level=0.95",
            )
            bad = _request("sound", "2026.11.30")
            bad["series"] = bad["series"][:2]
            bad["series"][0]["fitted"] = bad["series"][0]["fitted"][:-3]
            bad["series"][1]["holdout"]["lower"][0] = bad["series"][1]["holdout"]["upper"][0] + 5
            bad["series"][1]["holdout"]["level"] = 95
            post(
                "invalid-body", "Error: fitted shorter than actuals, a level given in percent", bad
            )
            unknown = _request("sound", "2026.12.07")
            unknown["baseline"] = {"version": "2026.11.23"}
            post(
                "unknown-baseline",
                "Error: a baseline version of the model that is not stored",
                unknown,
            )
    _dump(
        HERE / "index.json",
        {
            "scenario": "Invented: Crumb & Kiln, a fictional bakery chain, and its daily loaves "
            "model. No real business or data.",
            "generated_by": "openapi_examples/generate.py",
            "examples": examples,
        },
    )
    for e in examples:
        print(f"{e['name']:16s} status {e['status']} verdict {e.get('verdict', '-')}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
