"""``plumbline assess``: on a server through the client, or offline with the core in-process."""

from __future__ import annotations

import argparse
import sys
from collections.abc import Callable
from typing import IO, Any

from ..client import AssessmentDocument, ClientError, JobStatus
from . import render
from .connect import client_from_args, note, retry_notice, server_from_args
from .csvbody import csv_as_body, errors_line, parse_csv
from .errors import CliError, Exit
from .inputs import AssessInput, Overrides, load_input, load_policy_option, parse_label
from .progress import Spinner, interactive


def overrides_from_args(args: argparse.Namespace) -> Overrides:
    return Overrides(
        model=args.model,
        version=args.version,
        policy=None if args.policy is None else load_policy_option(args.policy),
        season_length=args.season_length,
        model_params=args.model_params,
        level=args.level,
        labels=dict(parse_label(text) for text in args.label),
        baseline=args.baseline,
        burn_in=args.burn_in,
    )


def run(args: argparse.Namespace, out: IO[str] = sys.stdout) -> Exit:
    if args.offline and args.server:
        raise CliError("--offline and --server exclude each other")
    overrides = overrides_from_args(args)
    server = None if args.offline else server_from_args(args, purpose="assess against")
    link = None
    with Spinner(f"reading {args.file}", enabled=interactive()) as spin:
        inp = load_input(args.file, overrides, args.format)
        if server is None:
            spin.update(_what("assessing", inp) + " offline")
            result = assess_offline(inp)
            where = "offline"
        else:
            above = None if args.job_above is None else int(args.job_above * 1024 * 1024)
            with client_from_args(
                args, server, on_retry=retry_notice, job_above_bytes=above
            ) as client:
                spin.update(_what("assessing", inp) + f" on {server}")

                def progress(job: JobStatus) -> None:
                    spin.update(_what(f"job {job.state}:", inp) + f" on {server}")
                    spin.progress(job.series_done, job.series_total)

                result = send(
                    client,
                    inp,
                    store=args.store,
                    key=args.idempotency_key,
                    as_job=args.as_job,
                    on_progress=progress,
                )
                if result.id is not None:
                    spin.update("asking for a report link")
                    link = report_link(client, result)
            where = "--no-store"
    code = Exit.BLOCKS if result.blocks(args.fail_on) else Exit.PASSES
    args.exit_code = code  # what main answers if the output pipe closes early
    if args.json:
        render.dump_json(result.to_dict(), out)
    else:
        render.assessment(result, out, fail_on=args.fail_on, where=where, link=link)
    return code


def _what(verb: str, inp: AssessInput) -> str:
    n = inp.n_series
    return f"{verb} {inp.name}" + ("" if n is None else f" ({n:,} series)")


def send(
    client: Any,
    inp: AssessInput,
    *,
    store: bool,
    key: str | None = None,
    as_job: bool | None = None,
    on_progress: Callable[[JobStatus], None] | None = None,
) -> AssessmentDocument:
    """One assessment on the server (retried with one Idempotency-Key by the client); as a
    background job, waited for, when ``as_job`` is true or (``None``) the body is large."""
    body = inp.body
    job = {"as_job": as_job, "on_progress": on_progress}
    if inp.kind in ("csv", "arrow", "parquet"):
        if inp.inline_policy is None and not inp.labels:
            upload: dict[str, Any] = (
                {"csv": inp.text} if inp.kind == "csv" else {inp.kind: inp.data}
            )
            return client.assess(
                **upload, params=inp.params, store=store, idempotency_key=key, **job
            )
        body = csv_as_body(inp)
    try:
        return client.assess(body, store=store, idempotency_key=key, **job)
    except ValueError as exc:  # NaN/inf in the body
        raise CliError(f"{inp.name}: {exc}") from None


def report_link(client: Any, result: AssessmentDocument) -> str | None:
    """A shareable link to the result's report, made by the server
    (``POST /v1/assessments/{id}/links``); ``None`` when it offers none or refuses."""
    try:
        return client.create_link(result.id)
    except ClientError as exc:
        note(f"no report link ({exc})")
        return None


def assess_offline(inp: AssessInput) -> AssessmentDocument:
    """Validate with ``service.ingest`` and judge with the core gate, all in this process."""
    from .. import ingest
    from ..core import InputError
    from ..core.gate import assess
    from ..core.policy import Policy, PolicyError, default_policy

    if inp.kind == "json":
        try:
            request = ingest.parse_json_request(inp.body if inp.body is not None else {})
        except ingest.RequestInvalid as exc:
            raise CliError(f"{inp.name}: invalid request: {errors_line(exc.errors)}") from None
        except InputError as exc:
            raise CliError(f"{inp.name}: invalid request: {exc}") from None
        policy_value, labels = request.policy, dict(request.labels)
    else:
        request = parse_csv(inp)
    if request.baseline is not None:
        raise CliError(
            f"{inp.name}: a baseline ({request.baseline!r}) is read from the versions stored on "
            "a server; --offline has none: leave the baseline out or assess on a server"
        )
    if inp.kind != "json":
        policy_value = inp.inline_policy if inp.inline_policy is not None else request.policy
        labels = {**request.labels, **inp.labels}

    if isinstance(policy_value, str):
        policy = default_policy()
        if policy_value not in (policy.name, f"{policy.name}@{policy.version}"):
            raise CliError(
                f"policy {policy_value!r} is stored on a server; offline knows only "
                f"{policy.name!r}: pass a policy file with --policy FILE"
            )
    else:
        try:
            policy = Policy.from_dict(policy_value)
        except PolicyError as exc:
            errors = [{"loc": f"policy.{e['loc']}", "message": e["message"]} for e in exc.errors]
            raise CliError(f"{inp.name}: invalid policy: {errors_line(errors)}") from None

    return AssessmentDocument(
        id=None,
        created_at=None,
        model=request.model,
        version=request.version,
        stored=False,
        labels=labels,
        season_length=request.season_length,
        model_params=request.model_params,
        extra={},
        result=assess(request.batch, policy).result(),
    )
