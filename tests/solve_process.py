"""Helper: ``ohmgraph`` commands as separate processes that report their stages.

``OHMGRAPH_TEST_STAGES`` makes the process print ``ohmgraph: stage NAME`` on standard error;
``OHMGRAPH_TEST_PAUSE=NAME`` makes it wait at that stage until its standard input is closed
(:func:`ohmgraph.io.interrupts.checkpoint`), so a test acts at a known point without timing
guesses.
"""

from __future__ import annotations

import os
import subprocess
import sys
import threading

TIMEOUT = 180          # seconds: generous, the machine may be loaded


def start(folder, argv, pause=None):
    """Start ``ohmgraph ARGV...`` in ``folder``, reporting its stages."""
    env = {**os.environ, "OHMGRAPH_TEST_STAGES": "1"}
    if pause:
        env["OHMGRAPH_TEST_PAUSE"] = pause
    process = subprocess.Popen([sys.executable, "-m", "ohmgraph.io.cli", *map(str, argv)],
                               cwd=folder, env=env, stdin=subprocess.PIPE,
                               stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
    # a run that hangs is killed, so a reading test fails instead of waiting for ever
    process.watchdog = threading.Timer(TIMEOUT, process.kill)
    process.watchdog.daemon = True
    process.watchdog.start()
    return process


def start_solve(folder, network, output="out.h5", pause=None, force=False):
    """Start ``ohmgraph solve NETWORK -o OUTPUT`` in ``folder``."""
    return start(folder, ["solve", network, "-o", output] + (["--force"] if force else []),
                 pause)


def wait_for_stage(process, stage) -> list:
    """Read standard error until the process reports ``stage``; return the lines read."""
    lines = []
    while True:
        line = process.stderr.readline()
        assert line, f"the process ended before stage {stage}: {lines}"
        lines.append(line)
        if line.strip() == f"ohmgraph: stage {stage}":
            return lines


def release(process) -> None:
    """Let a paused process go on (close its standard input)."""
    process.stdin.close()
    process.stdin = None          # communicate() must not flush the closed pipe


def finish(process, lines=()) -> tuple[int, str, str]:
    """Release a paused process, wait for it; return (exit code, stdout, all of stderr)."""
    out, rest = process.communicate(timeout=TIMEOUT)
    process.watchdog.cancel()
    return process.returncode, out, "".join(lines) + rest


def messages(err: str) -> list:
    """Standard error without the stage reports."""
    return [line for line in err.splitlines() if not line.startswith("ohmgraph: stage")]
