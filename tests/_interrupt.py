"""Ctrl-C tests: run code in a child process and interrupt it once it is under way."""

from __future__ import annotations

import signal
import subprocess
import sys
import textwrap
import time

# A child started from a background job inherits an ignored SIGINT; restore Python's handler
# so the signal raises KeyboardInterrupt there as it does in a terminal.
RESTORE_CTRL_C = "import signal; signal.signal(signal.SIGINT, signal.default_int_handler)\n"

#: The target: a long call stops within this many seconds of Ctrl-C. The core's loops check
#: for it every ~0.1 s (`parallel::HEARTBEAT`) and stop within one block of work (tens of
#: milliseconds on an idle core); tests/bench/interrupt_latency.py measures it per call.
TARGET = 1.0

#: Slack for a loaded CI machine: 2 cores shared with other jobs give our threads a fraction
#: of a core, so the block under way when the stop is asked, the heartbeat and the signal
#: delivery take several times their idle time, and the child may wait its turn to be
#: scheduled. Measured (tests/bench/interrupt_latency.py, release build, at a load of ~20 on
#: 2 cores): every call within 1 s but three, the worst the neighbours' prediction (blocks of
#: at least 64 points, ~4.7 s) and `vote_fractions` (its input checks in numpy); 4 s covers
#: those until their blocks are made finer, and then can shrink to about 2 s (common
#: practice: a bound a few times the measured worst case, so a test fails for a lost
#: Ctrl-C, not for a busy machine).
LOAD_MARGIN = 4.0

#: The one bound of every Ctrl-C test: the interrupted call stops within this many seconds
#: of the signal. The calls under test run for many seconds to minutes, so a stop within it
#: shows the interrupt is honoured mid-call.
STOPS_WITHIN = TARGET + LOAD_MARGIN


def interrupt(code: str, *, after: float, timeout: float) -> tuple[str, float]:
    """Run ``code`` (which prints "ready" before its long call, and a line as soon as the
    call raises) in a child, send SIGINT ``after`` seconds after "ready", and return its
    output and the seconds from the signal to that first line (the child's exit, which frees
    its arrays, is not counted). The child is never left running."""
    proc = subprocess.Popen([sys.executable, "-c", RESTORE_CTRL_C + code], stdout=subprocess.PIPE,
                            text=True)
    try:
        assert proc.stdout.readline().strip() == "ready"
        time.sleep(after)
        sent = time.perf_counter()
        proc.send_signal(signal.SIGINT)
        first = proc.stdout.readline()
        stopped = time.perf_counter() - sent
        rest, _ = proc.communicate(timeout=timeout)
        return first + rest, stopped
    finally:
        proc.kill()


def ctrl_c(setup: str, call: str, then: str = "", *, after: float = 0.5,
           timeout: float = 120) -> tuple[str, float]:
    """Run ``setup`` and then the statement ``call`` (sized to run for many seconds) in a
    child, and send SIGINT ``after`` seconds into the call. The child catches the
    KeyboardInterrupt of the call, notes the time, then runs ``then`` (checks that the
    objects are usable, printing what they find) and exits.

    Returns the output of ``then`` and the seconds from the signal to the KeyboardInterrupt
    (the child's wall clock when it caught it minus ours when we sent it: the same clock on
    one machine, and the child's exit is not counted). Raises AssertionError when the call
    finished before the signal or raised something else."""
    code = "\n".join([
        textwrap.dedent(setup),
        "import time as _time",
        'print("ready", flush=True)',
        "try:",
        textwrap.indent(textwrap.dedent(call).strip(), "    "),
        "except KeyboardInterrupt:",
        '    print(f"caught {_time.time()!r}", flush=True)',
        "else:",
        '    print("finished", flush=True)',
        textwrap.dedent(then),
    ])
    proc = subprocess.Popen([sys.executable, "-c", RESTORE_CTRL_C + code],
                            stdout=subprocess.PIPE, text=True)
    try:
        first = proc.stdout.readline().strip()
        assert first == "ready", f"the child failed before its call: {first!r}"
        time.sleep(after)
        sent = time.time()
        proc.send_signal(signal.SIGINT)
        out, _ = proc.communicate(timeout=timeout)
    finally:
        proc.kill()
    lines = out.splitlines()
    assert lines and lines[0] != "finished", "the call ended before the signal: make it longer"
    assert lines[0].startswith("caught "), f"no KeyboardInterrupt from the call: {out!r}"
    return "\n".join(lines[1:]), float(lines[0].split()[1]) - sent
