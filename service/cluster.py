"""Where a chunked assessment's parts run: in this process, or on the Dask cluster that
``PLUMBLINE_DASK_SCHEDULER`` names.

:func:`assess_chunks_on` is what a job runner calls: with no scheduler configured it runs
:func:`service.core.chunked.assess_chunks` here; with one, it connects a
``dask.distributed`` client (the ``cluster`` extra), hands the client to ``assess_chunks`` as
its executor (each part's checks and block parts run on a worker; the fleet decision is made
here from their results, to the same bits as in one process) and closes the client after.
dask is imported only when a scheduler is configured.
"""

from __future__ import annotations

from collections.abc import Iterable, Iterator
from contextlib import contextmanager
from typing import Any

from service.core import fleet_parts
from service.core.batch import SeriesBatch
from service.core.chunked import PART_BLOCKS, Progress, assess_chunks
from service.core.gate import Assessment
from service.core.policy import Policy
from service.results import AssessmentResult
from service.settings import Settings

CONNECT_TIMEOUT_SECONDS = 30


class ClusterUnavailable(RuntimeError):
    """The configured Dask cluster cannot be used (dask not installed, or not reachable)."""


def connect(address: str, *, timeout: float = CONNECT_TIMEOUT_SECONDS) -> Any:
    """A ``dask.distributed.Client`` of the scheduler at ``address`` (not made the default
    client of the process)."""
    try:
        from distributed import Client
    except ImportError:
        raise ClusterUnavailable(
            "PLUMBLINE_DASK_SCHEDULER is set but dask.distributed is not installed: install "
            "the cluster extra (pip install 'plumbline[cluster]')"
        ) from None
    try:
        return Client(address, set_as_default=False, timeout=timeout)
    except (OSError, TimeoutError) as exc:
        raise ClusterUnavailable(f"cannot reach the Dask scheduler at {address}: {exc}") from exc


@contextmanager
def cluster_executor(
    settings: Settings | None = None, *, timeout: float = CONNECT_TIMEOUT_SECONDS
) -> Iterator[Any]:
    """The client of the configured cluster for the ``with`` block (``None``: none is
    configured, run here); ``timeout``: seconds to wait for the scheduler."""
    address = (settings if settings is not None else Settings()).dask_scheduler
    if not address:
        yield None
        return
    client = connect(address, timeout=timeout)
    try:
        yield client
    finally:
        client.close()


def assess_chunks_on(
    chunks: Iterable[SeriesBatch],
    policy: Policy,
    progress: Progress | None = None,
    *,
    settings: Settings | None = None,
    total: int | None = None,
    part_blocks: int = PART_BLOCKS,
) -> Assessment:
    """:func:`~service.core.chunked.assess_chunks` on the configured cluster, or here."""
    with cluster_executor(settings) as executor:
        return assess_chunks(
            chunks, policy, progress, executor, total=total, part_blocks=part_blocks
        )


JOB_PART_BLOCKS = PART_BLOCKS
"""Blocks of series per part when a job's fleet is assessed in chunks."""


def chunked_work(job: Any, progress: Progress) -> AssessmentResult:
    """A background job's work in parts (``service.api.jobs.JobRunner``'s ``work``): the
    job's validated fleet assessed part by part with :func:`assess_chunks_on` (on the cluster
    that ``PLUMBLINE_DASK_SCHEDULER`` names, else here), its progress reported after each part.
    The result is the one :func:`service.api.jobs.assess_input` gives, to the last bit."""
    batch = job.request.batch
    n = batch.n_series
    size = JOB_PART_BLOCKS * fleet_parts.BLOCK
    progress(0, n)
    chunks = (batch.rows(slice(lo, lo + size)) for lo in range(0, n, size))
    found = assess_chunks_on(chunks, job.policy, progress, total=n, part_blocks=JOB_PART_BLOCKS)
    return found.result()


def job_work(settings: Settings) -> Any:
    """The work the job runner is given: :func:`chunked_work` when a Dask scheduler is
    configured, else ``None`` (the runner's default, one vectorised pass)."""
    return chunked_work if settings.dask_scheduler else None
