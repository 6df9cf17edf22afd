"""Deliberately misbehaving backends, for the worker-process tests (tests/test_worker.py).

Each plain callable is loaded through a file SPEC such as
``tests/data/misbehaving.py:abort_fft`` and wrapped by the registry as a forward complex
FFT backend; each one misbehaves in one way, every time it is called. ``SelectiveBackend``
is an adapter class that misbehaves only for some sizes, so one worker can be shown to
carry on with good jobs after bad ones. Never load this module in the test process itself:
it aborts, crashes and hangs on purpose.
"""

from __future__ import annotations

import ctypes
import os
import signal
import subprocess
import sys
import time

import numpy as np

from fftgauge.backends.base import Backend, Capabilities, FunctionPlan, Plan
from fftgauge.harness.errors import UnsupportedCase

#: Bytes the memory hog asks for: 4 TiB, beyond any test machine and any sane limit.
HOG_BYTES = 2**42
#: Characters the chatty backend prints to standard output per call.
CHATTER_CHARS = 4_000_000
#: Marker the chatty backend prints, which must never reach the parent's standard output.
CHATTER_MARKER = "CHATTY-BACKEND-OUTPUT"


def abort_fft(x):
    """Abort the process (SIGABRT), as a failed C assertion does."""
    os.abort()


def segfault_fft(x):
    """Read address 0: a segmentation fault (SIGSEGV)."""
    return ctypes.string_at(0)


def hang_fft(x):
    """Sleep forever (a hang that SIGTERM does stop)."""
    while True:
        time.sleep(3600)


def busy_fft(x):
    """Spin forever with SIGTERM, SIGINT and SIGHUP ignored (only SIGKILL stops it)."""
    for name in ("SIGTERM", "SIGINT", "SIGHUP"):
        if hasattr(signal, name):
            signal.signal(getattr(signal, name), signal.SIG_IGN)
    while True:
        pass


def raise_fft(x):
    """Raise a ValueError, as a backend rejecting its input does."""
    raise ValueError("this backend refuses every input")


def hog_fft(x):
    """Ask for far too much memory (HOG_BYTES) and touch it."""
    return np.ones(HOG_BYTES // 8)


#: Bytes the 2 GiB hog allocates (and touches), past the small cap the tests set.
HOG_2GIB_BYTES = 2 * 2**30
#: Bytes the slow hog takes per step.
SLOW_HOG_STEP_BYTES = 32 * 2**20


def hog_2gib_fft(x):
    """Allocate HOG_2GIB_BYTES and touch every page (numpy.ones), then return the transform."""
    np.ones(HOG_2GIB_BYTES // 8)
    return np.fft.fft(x)


def slow_hog_fft(x):
    """Take memory a step at a time and keep it; when an allocation fails, swallow the
    MemoryError and wait (a backend that retries): it holds the memory until stopped. The
    steps are left untouched (numpy.empty), so the cap is reached at once however loaded
    the machine is."""
    held = []
    while True:
        try:
            held.append(np.empty(SLOW_HOG_STEP_BYTES // 8))
        except MemoryError:
            time.sleep(0.05)


def none_fft(x):
    """Return None (a backend that forgot its return statement)."""
    np.fft.fft(x)


def objects_fft(x):
    """Return a list of strings (not numbers)."""
    return ["not", "numbers"] * (len(x) // 2)


def wrong_shape_fft(x):
    """Return a right transform of the wrong length (half of it)."""
    return np.fft.fft(x)[: len(x) // 2]


def exit_fft(x):
    """Call sys.exit(3), as a backend whose error handling exits the process does."""
    sys.exit(3)


def chatty_fft(x):
    """Print CHATTER_CHARS characters to standard output (Python and C level), then
    return the right transform."""
    line = CHATTER_MARKER + "-" * 80 + "\n"
    sys.stdout.write(line * (CHATTER_CHARS // len(line)))
    sys.stdout.flush()
    os.write(1, line.encode())
    return np.fft.fft(x)


#: How long the processes the leaving backends start sleep, in seconds: a value no other
#: process on a test machine uses, so the tests can count them by their command line.
LEFTOVER_SLEEP = os.environ.get("FFTGAUGE_TEST_SLEEP_SECONDS", "987.654")  # tests/conftest.py sets it


def sleeper_fft(x):
    """Start ``sleep LEFTOVER_SLEEP`` (a plain child, in the worker's session) and return the
    right transform, leaving the sleeper running."""
    subprocess.Popen(["sleep", LEFTOVER_SLEEP])
    return np.fft.fft(x)


def session_sleeper_fft(x):
    """Start ``sleep LEFTOVER_SLEEP`` in a new session (``start_new_session``), then return."""
    subprocess.Popen(["sleep", LEFTOVER_SLEEP], start_new_session=True)
    return np.fft.fft(x)


def start_daemon_sleeper() -> int:
    """Start a daemonised ``sleep LEFTOVER_SLEEP`` (a shell runs ``setsid sleep ... &`` and
    exits, so the sleeper is an orphan in a session of its own); return its pid."""
    done = subprocess.run(["sh", "-c", f"setsid sleep {LEFTOVER_SLEEP} >/dev/null 2>&1 & echo $!"], check=True,
                          capture_output=True, text=True)
    return int(done.stdout.split()[-1])


def daemon_sleeper_fft(x):
    """Start a daemonised sleeper (:func:`start_daemon_sleeper`), then return."""
    start_daemon_sleeper()
    return np.fft.fft(x)


def wait_until_sleeping(pid: int, within_seconds: float = 30.0) -> None:
    """Return once process ``pid`` runs ``sleep LEFTOVER_SLEEP`` (its fork and exec done, however
    loaded the machine), or after ``within_seconds``."""
    deadline = time.monotonic() + within_seconds
    while time.monotonic() < deadline:
        try:
            with open(f"/proc/{pid}/cmdline", "rb") as fh:
                if fh.read().split(b"\0")[:2] == [b"sleep", LEFTOVER_SLEEP.encode()]:
                    return
        except OSError:
            pass
        time.sleep(0.02)


def daemon_then_abort_fft(x):
    """Start a daemonised sleeper, wait until it runs ``sleep``, then abort the process (SIGABRT)."""
    wait_until_sleeping(start_daemon_sleeper())
    os.abort()


def daemon_then_hang_fft(x):
    """Start a daemonised sleeper, then hang (until the worker's timeout stops the job)."""
    daemon_sleeper_fft(x)
    hang_fft(x)


#: The file the folder-scrubbing backend leaves in its working folder.
SCRUBBER_MARK = "left-by-scrubber.txt"


def scrub_cwd_fft(x):
    """Delete every file in the working folder, leave SCRUBBER_MARK there, return the transform."""
    for name in os.listdir("."):
        if os.path.isfile(name):
            os.unlink(name)
    with open(SCRUBBER_MARK, "w") as fh:
        fh.write("scrubbed\n")
    return np.fft.fft(x)


class _Unpicklable(Exception):
    """An exception that cannot be pickled: it holds a lambda and needs two arguments."""

    def __init__(self, code, detail):
        super().__init__(f"code {code}: {detail}")
        self.callback = lambda: code


def unpicklable_error_fft(x):
    """Raise an exception that pickle cannot carry."""
    raise _Unpicklable(17, "an error that cannot be pickled")


class _Unprintable(Exception):
    """An exception whose message itself raises."""

    def __str__(self):
        raise RuntimeError("no message for you")


def unprintable_error_fft(x):
    """Raise an exception whose ``str()`` raises."""
    raise _Unprintable()


class SelectiveBackend(Backend):
    """A forward-FFT adapter (numpy.fft underneath) that misbehaves for some sizes only.

    ``n`` selects the behaviour (see ``BEHAVIOUR``); ``n = REFUSED_N`` is refused at
    planning time with UnsupportedCase; every other size is a correct FFT.
    """

    name = "selective"
    description = "numpy.fft, except for a few sizes where it raises, crashes or hangs"
    BEHAVIOUR = {3: raise_fft, 5: segfault_fft, 7: hang_fft, 11: exit_fft}
    REFUSED_N = 13

    def capabilities(self) -> Capabilities:
        return Capabilities(kinds=("fft",), norms=("backward",))

    def plan(self, case) -> Plan:
        if case.n == self.REFUSED_N:
            raise UnsupportedCase(f"{self.name} refuses n = {case.n}")
        return FunctionPlan(case, self.BEHAVIOUR.get(case.n, np.fft.fft))


class UnsendableBackend(Backend):
    """An adapter whose ``describe()`` returns something that cannot be pickled."""

    name = "unsendable"

    def capabilities(self) -> Capabilities:
        return Capabilities()

    def plan(self, case) -> Plan:
        return FunctionPlan(case, np.fft.fft)

    def describe(self):
        return _UnsendableDescription(name=self.name, callback=lambda: None)


class _UnsendableDescription(dict):
    """A description whose ``as_dict()`` holds a lambda, which pickle cannot carry."""

    def as_dict(self):
        return self


class CrashOnLoadBackend(Backend):
    """An adapter that aborts the process in its constructor (while the worker loads it)."""

    name = "crash-on-load"

    def __init__(self, **opts):
        os.abort()

    def capabilities(self) -> Capabilities:
        return Capabilities()

    def plan(self, case) -> Plan:
        raise AssertionError("never reached")
