"""``plumbline verdict``: does the latest stored verdict of a model meet a requirement?"""

from __future__ import annotations

import argparse
import sys
from typing import IO

from ..client import RequestRejected
from . import render
from .connect import client_from_args, server_from_args
from .errors import CliError, Exit


def run(args: argparse.Namespace, out: IO[str] = sys.stdout) -> Exit:
    server = server_from_args(args, purpose="ask")
    with client_from_args(args, server) as client:
        try:
            result = client.verdict(args.model, version=args.version, require=args.require)
        except RequestRejected as exc:
            if exc.status != 404:
                raise
            which = args.model + (f" version {args.version}" if args.version else "")
            # No stored verdict cannot meet a requirement: the deployment step must not run.
            raise CliError(
                f"no stored assessment for {which}; --require {args.require} not met",
                Exit.BLOCKS,
            ) from None
    code = Exit.PASSES if result.met else Exit.BLOCKS
    args.exit_code = code  # what main answers if the output pipe closes early
    if args.json:
        render.dump_json(
            {
                "model": result.model,
                "version": result.version,
                "verdict": result.verdict,
                "assessment_id": result.assessment_id,
                "created_at": result.created_at,
                "require": args.require,
                "met": result.met,
            },
            out,
        )
    else:
        render.verdict(result, out, require=args.require)
    return code
