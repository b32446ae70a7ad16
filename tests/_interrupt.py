"""Ctrl-C tests: run code in a child process and interrupt it once it is under way."""

from __future__ import annotations

import signal
import subprocess
import sys
import time

# A child started from a background job inherits an ignored SIGINT; restore Python's handler
# so the signal raises KeyboardInterrupt there as it does in a terminal.
RESTORE_CTRL_C = "import signal; signal.signal(signal.SIGINT, signal.default_int_handler)\n"

#: The one bound of every Ctrl-C test: the interrupted call stops within this many seconds
#: of the signal. The calls under test run for tens of seconds to minutes, so a stop within
#: it shows the interrupt is honoured mid-call; the target is about a second, and the slack
#: is for a loaded 2-core CI machine (common practice).
STOPS_WITHIN = 5.0


def interrupt(code: str, *, after: float, timeout: float) -> tuple[str, float]:
    """Run ``code`` (which prints "ready" before its long call) in a child, send SIGINT
    ``after`` seconds after "ready", and return its output and the seconds from the signal
    to its exit. The child is never left running."""
    proc = subprocess.Popen([sys.executable, "-c", RESTORE_CTRL_C + code], stdout=subprocess.PIPE,
                            text=True)
    try:
        assert proc.stdout.readline().strip() == "ready"
        time.sleep(after)
        sent = time.perf_counter()
        proc.send_signal(signal.SIGINT)
        out, _ = proc.communicate(timeout=timeout)
        return out, time.perf_counter() - sent
    finally:
        proc.kill()
