"""The batcher on its own: how passes are formed, capped and what a vanished client leaves.

``assessing.run_many`` is replaced by a recorder that answers each job with a stand-in outcome,
so these tests look only at the grouping (the answers themselves are tested in
test_batching.py against separate calls and statsmodels/scipy).
"""

from __future__ import annotations

import asyncio
from typing import Any

import pytest

from service.api import assessing
from service.api.batching import SubmissionBatcher
from service.api.metrics import Metrics


class Recorder:
    def __init__(self) -> None:
        self.passes: list[list[Any]] = []

    def __call__(self, _engine: Any, jobs: list[Any]) -> list[Any]:
        self.passes.append(list(jobs))
        return [f"answer:{job}" for job in jobs]


@pytest.fixture
def recorder(monkeypatch: pytest.MonkeyPatch) -> Recorder:
    rec = Recorder()
    monkeypatch.setattr(assessing, "run_many", rec)
    return rec


async def submit_after(batcher: SubmissionBatcher, job: str, turns: int) -> Any:
    for _ in range(turns):  # arrive a few turns of the event loop later
        await asyncio.sleep(0)
    return await batcher.submit(job)  # type: ignore[arg-type]


def test_submissions_ready_together_share_one_pass(recorder: Recorder):
    async def scenario() -> list[Any]:
        batcher = SubmissionBatcher(store=None, metrics=Metrics())  # type: ignore[arg-type]
        # Arriving over a few turns of the loop, as requests that pass a few awaits do.
        return await asyncio.gather(*(submit_after(batcher, f"j{i}", i % 3) for i in range(6)))

    answers = asyncio.run(scenario())
    assert answers == [f"answer:j{i}" for i in range(6)]
    assert [len(p) for p in recorder.passes] == [6]


def test_a_lone_submission_is_not_held_back(recorder: Recorder):
    async def scenario() -> Any:
        batcher = SubmissionBatcher(store=None)  # type: ignore[arg-type]
        return await asyncio.wait_for(batcher.submit("alone"), 5)  # type: ignore[arg-type]

    assert asyncio.run(scenario()) == "answer:alone"
    assert recorder.passes == [["alone"]]


def test_passes_are_capped(recorder: Recorder):
    async def scenario() -> list[Any]:
        batcher = SubmissionBatcher(store=None, max_jobs=3)  # type: ignore[arg-type]
        return await asyncio.gather(*(batcher.submit(f"j{i}") for i in range(7)))  # type: ignore[arg-type]

    answers = asyncio.run(scenario())
    assert answers == [f"answer:j{i}" for i in range(7)]
    assert [len(p) for p in recorder.passes] == [3, 3, 1]
    assert [j for p in recorder.passes for j in p] == [f"j{i}" for i in range(7)]


def test_a_submission_whose_client_went_away_is_dropped(recorder: Recorder):
    async def scenario() -> list[Any]:
        batcher = SubmissionBatcher(store=None, metrics=Metrics())  # type: ignore[arg-type]
        gone = asyncio.ensure_future(batcher.submit("gone"))  # type: ignore[arg-type]
        kept = asyncio.ensure_future(batcher.submit("kept"))  # type: ignore[arg-type]
        await asyncio.sleep(0)  # both are waiting now
        gone.cancel()
        return [await kept, gone.cancelled()]

    assert asyncio.run(scenario()) == ["answer:kept", True]
    assert recorder.passes == [["kept"]]  # never assessed, so never stored


def test_a_failing_pass_fails_each_of_its_submissions(monkeypatch: pytest.MonkeyPatch):
    def broken(_engine: Any, jobs: list[Any]) -> list[Any]:
        raise RuntimeError("policy lookup failed")

    monkeypatch.setattr(assessing, "run_many", broken)

    async def scenario() -> list[Any]:
        batcher = SubmissionBatcher(store=None)  # type: ignore[arg-type]
        return await asyncio.gather(
            *(batcher.submit(f"j{i}") for i in range(3)),  # type: ignore[arg-type]
            return_exceptions=True,
        )

    answers = asyncio.run(scenario())
    assert all(isinstance(a, RuntimeError) for a in answers)
