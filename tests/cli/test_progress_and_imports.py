"""Progress on a terminal only; a light import for --help and server mode."""

from __future__ import annotations

import io
import json
import os
import subprocess
import sys
import time
from pathlib import Path

from cli_helpers import SMALL_BODY, closed_port

from service.cli.progress import Spinner, interactive

ROOT = Path(__file__).resolve().parents[2]


class Terminal(io.StringIO):
    def isatty(self) -> bool:
        return True


def test_spinner_draws_on_a_terminal_and_wipes_its_line():
    term = Terminal()
    with Spinner("assessing big.json", enabled=True, stream=term, delay=0.0, interval=0.01):
        time.sleep(0.05)
    text = term.getvalue()
    assert "assessing big.json" in text and text.endswith("\r\033[K")


def test_spinner_waits_before_drawing_so_quick_work_stays_silent():
    term = Terminal()
    with Spinner("quick", enabled=True, stream=term, delay=5.0):
        pass
    assert term.getvalue() == ""


def test_spinner_disabled_writes_nothing():
    term = Terminal()
    with Spinner("x", enabled=False, stream=term, delay=0.0, interval=0.01):
        time.sleep(0.03)
    assert term.getvalue() == ""


def test_interactive_needs_both_streams_on_a_terminal():
    assert interactive(Terminal(), Terminal())
    assert not interactive(io.StringIO(), Terminal())  # stdout piped into a CI log
    assert not interactive(Terminal(), io.StringIO())


PROBE = """
import sys
from service.cli import main
code = main(sys.argv[1:])
heavy = sorted(m for m in ("scipy", "numpy", "fastapi", "sqlalchemy", "pydantic", "starlette")
               if m in sys.modules)
print("HEAVY=" + ",".join(heavy), file=sys.stderr)
sys.exit(code)
"""


def probe(*argv: str) -> tuple[int, str]:
    proc = subprocess.run(
        [sys.executable, "-c", PROBE, *argv], capture_output=True, text=True, timeout=60, cwd=ROOT
    )
    heavy = [line for line in proc.stderr.splitlines() if line.startswith("HEAVY=")]
    return proc.returncode, heavy[-1]


def test_help_imports_no_heavy_module():
    assert probe("--help") == (0, "HEAVY=")


def test_server_mode_imports_no_heavy_module(tmp_path):
    path = tmp_path / "req.json"
    path.write_text(json.dumps(SMALL_BODY))
    port = closed_port()
    code, heavy = probe(
        "assess", str(path), "--server", f"http://127.0.0.1:{port}", "--retries", "0"
    )
    assert (code, heavy) == (3, "HEAVY=")


def test_console_entry_point_runs_as_module():
    proc = subprocess.run(
        [sys.executable, "-m", "service.cli", "assess"],
        capture_output=True,
        text=True,
        timeout=60,
        cwd=ROOT,
    )
    assert proc.returncode == 2
    assert proc.stderr.count("\n") == 1 and "required: FILE" in proc.stderr


def test_closed_output_pipe_keeps_the_gate_exit_code(tmp_path):
    from service import demo

    demo.write_demo(str(tmp_path))
    read_end, write_end = os.pipe()
    os.close(read_end)  # the reader is gone before anything is written (like `| head -0`)
    try:
        proc = subprocess.run(
            [
                sys.executable,
                "-m",
                "service.cli",
                "assess",
                str(tmp_path / "stale.json"),
                "--offline",
            ],
            stdout=write_end,
            stderr=subprocess.PIPE,
            text=True,
            timeout=120,
            cwd=ROOT,
        )
    finally:
        os.close(write_end)
    assert proc.returncode == 1
    assert "Traceback" not in proc.stderr
