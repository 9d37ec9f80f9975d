"""The ``plumbline`` argument parser: every subcommand and option."""

from __future__ import annotations

import argparse
from collections.abc import Callable
from typing import NoReturn

from .errors import Exit

SCOPES = ("submit", "read", "admin")


class Parser(argparse.ArgumentParser):
    """An ArgumentParser whose usage errors are one line on stderr and exit code 2."""

    def error(self, message: str) -> NoReturn:
        self.exit(Exit.USAGE, f"{self.prog}: error: {message} (see: {self.prog} --help)\n")


def _int_at_least(low: int) -> Callable[[str], int]:
    def convert(text: str) -> int:
        try:
            value = int(text)
        except ValueError:
            raise argparse.ArgumentTypeError(f"expected an integer, got {text!r}") from None
        if value < low:
            raise argparse.ArgumentTypeError(f"must be >= {low}, got {value}")
        return value

    return convert


def _positive_float(text: str) -> float:
    try:
        value = float(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"expected a number, got {text!r}") from None
    if not value > 0:
        raise argparse.ArgumentTypeError(f"must be > 0, got {text}")
    return value


def _level(text: str) -> float:
    value = _positive_float(text)
    if not value < 1:
        raise argparse.ArgumentTypeError(f"must be between 0 and 1, got {text}")
    return value


def _server_options(p: argparse.ArgumentParser, *, timeout: float = 30.0) -> None:
    g = p.add_argument_group("server")
    g.add_argument(
        "--server",
        metavar="URL",
        help="service root, e.g. http://127.0.0.1:8000 (default: $PLUMBLINE_SERVER)",
    )
    g.add_argument("--token", metavar="T", help="bearer token (default: $PLUMBLINE_TOKEN)")
    g.add_argument(
        "--timeout",
        metavar="SECONDS",
        type=_positive_float,
        default=timeout,
        help=f"seconds to wait for one answer (default {timeout:g})",
    )
    g.add_argument(
        "--retries",
        metavar="N",
        type=_int_at_least(0),
        default=3,
        help="retries on connection errors, 5xx and 429 answers, after the wait the server "
        "asks for in Retry-After, else with backoff (default 3)",
    )


def build_parser() -> Parser:
    parser = Parser(
        prog="plumbline",
        description="Gate forecasting model releases on residual diagnostics over whole fleets "
        "of series. A verdict is statistical evidence, not a guarantee.",
        epilog="Exit codes: 0 the gate passes, 1 the gate blocks, 2 bad input or usage, "
        "3 server unreachable or server error.",
    )
    parser.add_argument("--version", action="version", version=f"plumbline {_version()}")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND", required=True)

    # assess ----------------------------------------------------------------
    p = sub.add_parser(
        "assess",
        help="assess a file of series and gate on its verdict",
        description="Assess FILE (JSON in the request body's shape, or the long format as CSV, "
        "Parquet or an Arrow IPC stream) on a server or --offline. Exit 0 when the gate "
        "passes, 1 when the verdict is at or worse than --fail-on.",
    )
    p.add_argument(
        "file",
        metavar="FILE",
        help="JSON, CSV, Parquet (.parquet) or Arrow (.arrow) file ('-' reads standard input)",
    )
    p.add_argument(
        "--format",
        choices=("json", "csv", "arrow", "parquet"),
        help="file format (default: from the extension, else from the content)",
    )
    p.add_argument("--model", metavar="M", help="model name (overrides the file's)")
    p.add_argument("--version", metavar="V", help="model version (overrides the file's)")
    p.add_argument(
        "--policy",
        metavar="NAME|FILE",
        help="a stored policy name, or a JSON policy file sent inline (default: the file's, "
        "else 'default')",
    )
    p.add_argument(
        "--season-length",
        metavar="M",
        type=_int_at_least(1),
        help="season length, e.g. 7 for daily data with a weekly cycle (default 1)",
    )
    p.add_argument(
        "--model-params",
        metavar="K",
        type=_int_at_least(0),
        help="parameters the model estimated (reduces the Ljung-Box df; default 0)",
    )
    p.add_argument(
        "--level",
        metavar="L",
        type=_level,
        help="CSV, Arrow and Parquet: nominal level of the intervals",
    )
    p.add_argument(
        "--baseline",
        metavar="VERSION|latest-pass",
        help="compare the holdout with a stored version of the same model, or with the newest "
        "other version whose latest verdict passed (latest-pass); a significantly less "
        "accurate version fails the gate",
    )
    p.add_argument(
        "--burn-in",
        metavar="N",
        type=_int_at_least(0),
        help="periods to leave out at the start of every series, e.g. an ARIMA's first d + mD "
        "fitted values (overrides the file's request-wide burn_in; a series' own stays)",
    )
    p.add_argument(
        "--label",
        metavar="KEY=VALUE",
        action="append",
        default=[],
        help="a label to store with the assessment (repeatable)",
    )
    p.add_argument(
        "--fail-on",
        choices=("fail", "warn"),
        default="fail",
        help="block (exit 1) on this verdict or worse (default fail)",
    )
    p.add_argument("--json", action="store_true", help="print the full result as JSON")
    p.add_argument(
        "--offline", action="store_true", help="compute locally, no server, nothing stored"
    )
    p.add_argument(
        "--no-store",
        dest="store",
        action="store_false",
        help="server mode: compute without storing",
    )
    p.add_argument(
        "--idempotency-key",
        metavar="KEY",
        help="server mode: the key for this assessment (default: a new one per run), e.g. the "
        "pipeline run id, so a re-run job gets the stored result instead of storing again",
    )
    job = p.add_mutually_exclusive_group()
    job.add_argument(
        "--as-job",
        dest="as_job",
        action="store_true",
        default=None,
        help="server mode: run it as a background job on the server and wait for it, with a "
        "progress bar on a terminal (default: for files over --job-above)",
    )
    job.add_argument(
        "--no-job",
        dest="as_job",
        action="store_false",
        help="server mode: one request that waits for the answer, however large the file",
    )
    p.add_argument(
        "--job-above",
        metavar="MIB",
        type=_positive_float,
        help="server mode: send requests larger than this many MiB as jobs (default 8)",
    )
    _server_options(p, timeout=300.0)

    # verdict ---------------------------------------------------------------
    p = sub.add_parser(
        "verdict",
        help="check the latest stored verdict of a model (for a deployment step)",
        description="Exit 0 when the latest stored verdict of MODEL meets --require, 1 when it "
        "does not (or none is stored), 3 when the server is unreachable.",
    )
    p.add_argument("model", metavar="MODEL")
    p.add_argument("--version", metavar="V", help="only assessments of this version")
    p.add_argument(
        "--require",
        choices=("pass", "warn"),
        default="pass",
        help="pass: only pass meets it; warn: pass or warn (default pass)",
    )
    p.add_argument("--json", action="store_true", help="print the answer as JSON")
    _server_options(p)

    # tokens ----------------------------------------------------------------
    p = sub.add_parser(
        "tokens",
        help="create, list and revoke API tokens",
        description="Through the API with an admin token (--server), or straight on the "
        "database (--database, or $PLUMBLINE_DATABASE_URL) for a first set-up.",
    )
    tsub = p.add_subparsers(dest="tokens_command", metavar="ACTION", required=True)
    t = tsub.add_parser("create", help="create a token; its secret is printed once")
    t.add_argument(
        "--scope",
        dest="scopes",
        metavar="SCOPE",
        action="append",
        choices=SCOPES,
        required=True,
        help="submit, read or admin (repeatable)",
    )
    t.add_argument("--label", metavar="NAME", required=True, help="who or what uses it")
    t = tsub.add_parser("list", help="list tokens (no secrets)")
    t = tsub.add_parser("revoke", help="revoke a token")
    t.add_argument("token_id", metavar="ID")
    for name in ("create", "list", "revoke"):
        t = tsub.choices[name]
        t.add_argument("--json", action="store_true", help="print the answer as JSON")
        t.add_argument(
            "--database", metavar="URL", help="work on this database instead of a server"
        )
        _server_options(t)

    # serve / db / demo -----------------------------------------------------
    p = sub.add_parser("serve", help="start the REST service")
    p.add_argument("--host", default="127.0.0.1", help="interface (default 127.0.0.1)")
    p.add_argument("--port", type=_int_at_least(1), default=8000, help="port (default 8000)")
    p.add_argument(
        "--workers",
        metavar="N",
        type=_int_at_least(1),
        default=1,
        help="worker processes (default 1)",
    )

    p = sub.add_parser(
        "work",
        help="run background jobs from the database, without serving HTTP",
        description="Take the queued background assessments (POST with Prefer: respond-async) "
        "from the service's database and run them until stopped (SIGTERM or Ctrl-C). Any "
        "number of these may share one PostgreSQL database with the servers; the database "
        "must be migrated (plumbline db upgrade).",
    )
    p.add_argument(
        "--threads",
        metavar="N",
        type=_int_at_least(1),
        help="jobs run at once (default: $PLUMBLINE_JOB_WORKERS, else 1)",
    )
    p.add_argument(
        "--database",
        metavar="URL",
        help="SQLAlchemy URL (default: $PLUMBLINE_DATABASE_URL, else sqlite:///plumbline.db)",
    )

    p = sub.add_parser("db", help="database maintenance")
    dsub = p.add_subparsers(dest="db_command", metavar="ACTION", required=True)
    d = dsub.add_parser("upgrade", help="apply the database migrations")
    d.add_argument(
        "--database",
        metavar="URL",
        help="SQLAlchemy URL (default: $PLUMBLINE_DATABASE_URL, else sqlite:///plumbline.db)",
    )

    p = sub.add_parser(
        "demo",
        help="write an invented demo scenario and assess it offline",
        description="Writes invented data (a fictional bike-share network) for three models to "
        "DIR and assesses each offline: one sound, one biased, one that leaves the weekly "
        "cycle in its residuals.",
    )
    p.add_argument(
        "directory",
        metavar="DIR",
        nargs="?",
        default="plumbline-demo",
        help="where to write the files (default ./plumbline-demo)",
    )
    return parser


def _version() -> str:
    from .. import __version__

    return __version__
