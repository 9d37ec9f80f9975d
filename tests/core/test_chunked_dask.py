"""The chunked assessment's parts on a Dask cluster (a LocalCluster of two workers in this
process): the same verdict and statistics, bit for bit, as the one-shot assessment."""

from __future__ import annotations

import pytest

distributed = pytest.importorskip("distributed")

from service.cluster import ClusterUnavailable, assess_chunks_on, cluster_executor  # noqa: E402
from service.core import (  # noqa: E402
    assess,
    default_policy,
    fleet_parts,
)
from service.core.chunked import assess_chunks  # noqa: E402
from service.settings import Settings  # noqa: E402

from .test_chunked import assert_same, whole_and_chunks  # noqa: E402


@pytest.fixture(scope="module")
def cluster():
    with distributed.LocalCluster(
        n_workers=2, threads_per_worker=1, processes=False, dashboard_address=None
    ) as local:
        yield local


def test_parts_on_the_cluster_equal_one_process(cluster, monkeypatch):
    monkeypatch.setattr(fleet_parts, "BLOCK", 8)
    whole, chunks = whole_and_chunks(20261204, 70, 9)
    policy = default_policy()
    seen = []
    with distributed.Client(cluster, set_as_default=False) as client:
        got = assess_chunks(
            chunks,
            policy,
            progress=lambda done, total: seen.append(done),
            executor=client,
            part_blocks=2,
            window=3,
        )
    assert_same(assess(whole, policy), got)
    assert seen == [16, 32, 48, 64, 70]


def test_the_scheduler_from_the_settings(cluster, monkeypatch):
    monkeypatch.setenv("PLUMBLINE_DASK_SCHEDULER", cluster.scheduler_address)
    whole, chunks = whole_and_chunks(5, 30, 30)
    policy = default_policy()
    with cluster_executor() as client:
        assert isinstance(client, distributed.Client)
    assert_same(assess(whole, policy), assess_chunks_on(chunks, policy))


def test_no_scheduler_runs_here():
    with cluster_executor(Settings(dask_scheduler=None)) as client:
        assert client is None


def test_an_unreachable_scheduler_is_named():
    settings = Settings(dask_scheduler="tcp://127.0.0.1:9")
    with pytest.raises(ClusterUnavailable, match="cannot reach the Dask scheduler"):
        with cluster_executor(settings, timeout=1):
            pass


def test_a_jobs_work_in_parts_on_the_cluster(cluster, monkeypatch):
    # The job runner's work when a scheduler is configured: the parsed upload's fleet in
    # parts on the cluster, the same result as the runner's default one-pass work.
    from service.api.jobs import JobInput, assess_input
    from service.cluster import chunked_work, job_work
    from service.ingest import parse_csv_request

    from ..api.test_parquet_chunks import PARAMS, invented_long, to_csv

    monkeypatch.setattr(fleet_parts, "BLOCK", 8)
    monkeypatch.setattr("service.cluster.JOB_PART_BLOCKS", 1)
    monkeypatch.setenv("PLUMBLINE_DASK_SCHEDULER", cluster.scheduler_address)
    assert job_work(Settings()) is chunked_work
    assert job_work(Settings(dask_scheduler=None)) is None
    req = parse_csv_request(to_csv(invented_long(n=30)), PARAMS)
    job = JobInput(request=req, policy=default_policy())
    seen = []
    got = chunked_work(job, lambda done, total: seen.append((done, total)))
    assert got.to_dict() == assess_input(job, lambda done, total: None).to_dict()
    assert seen[0] == (0, 30) and seen[-1] == (30, 30) and len(seen) == 5
