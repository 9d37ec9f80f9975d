"""Answering concurrent small submissions together.

Under load many single-series (or few-series) assessments arrive at once. Each costs the
statistics core a fixed few hundred NumPy calls however few series it holds, and each stored
one a commit. Here the submissions that are waiting at the same moment are handed to
:func:`service.api.assessing.run_many` as one list: their checks run in one vectorised pass and
the stored ones are written in one transaction. Every submission still gets its own verdict on
its own series, exactly as if it had come alone.

Nothing waits on a timer: a pass starts as soon as a turn of the event loop brings no new
submission, so a lone request is assessed after a turn or two (microseconds), and under load the
requests that arrived while the previous pass ran make up the next one.
"""

from __future__ import annotations

import asyncio
from typing import Any

from service.store.port import Store

from . import assessing
from .metrics import Metrics

_Waiting = tuple[Any, assessing.Job, "asyncio.Future[assessing.Outcome]"]


class SubmissionBatcher:
    """Collects :class:`~service.api.assessing.Job` s on the event loop and runs them together.

    Each job is stored in the store it was submitted with (``store``, else the batcher's own);
    a pass runs the jobs of one store.
    """

    def __init__(
        self, store: Store | None = None, metrics: Metrics | None = None, max_jobs: int = 256
    ) -> None:
        self._store = store
        self._metrics = metrics
        self._max_jobs = max_jobs
        self._waiting: list[_Waiting] = []
        self._scheduled = False
        self._seen = 0  # submissions waiting when the pass last looked

    async def submit(self, job: assessing.Job, store: Store | None = None) -> assessing.Outcome:
        """Assess (and store) ``job`` in the next pass; its outcome, or its error raised."""
        loop = asyncio.get_running_loop()
        future: asyncio.Future[assessing.Outcome] = loop.create_future()
        self._waiting.append((self._store if store is None else store, job, future))
        if not self._scheduled:
            self._scheduled = True
            # After the callbacks already due: the requests ready now submit first.
            loop.call_soon(self._run)
        return await future

    def _run(self) -> None:
        loop = asyncio.get_running_loop()
        if len(self._waiting) < self._max_jobs and len(self._waiting) != self._seen:
            # Still growing: requests taken in together with the first ones are still on
            # their way here (each passes a few awaits first). Look again after one more turn
            # of the loop, so the pass starts only once a turn brought nobody new.
            self._seen = len(self._waiting)
            loop.call_soon(self._run)
            return
        self._seen = 0
        waiting, self._waiting = self._waiting[: self._max_jobs], self._waiting[self._max_jobs :]
        self._scheduled = bool(self._waiting)
        if self._scheduled:
            loop.call_soon(self._run)
        # A request whose client went away before its pass is dropped: it was never answered
        # (nor stored), so a retry starts afresh.
        live = [entry for entry in waiting if not entry[2].done()]
        while live:
            store = live[0][0]  # one store in practice; more only when one was swapped in
            same = [(job, future) for s, job, future in live if s is store]
            live = [entry for entry in live if entry[0] is not store]
            self._pass(store, same)

    def _pass(
        self, store: Any, live: list[tuple[assessing.Job, asyncio.Future[assessing.Outcome]]]
    ) -> None:
        if self._metrics is not None:
            self._metrics.batch_size.observe(len(live))
        try:
            outcomes = assessing.run_many(store, [job for job, _ in live])
        except Exception as exc:  # the pass as a whole failed (the database): every job
            for _, future in live:
                future.set_exception(exc)
            return
        for (_, future), outcome in zip(live, outcomes, strict=True):
            if future.done():
                continue
            if isinstance(outcome, BaseException):
                future.set_exception(outcome)
            else:
                future.set_result(outcome)
