"""One shutdown path for every command: SIGINT, SIGTERM and SIGHUP become an exception in the
main thread, so the command stops dispatching, ends its workers, writes what finished, prints
its summary and exits with the shell's code for the signal (128 + its number: 130, 143, 129).

Python turns SIGINT into :class:`KeyboardInterrupt` by itself; SIGTERM (what CI sends on
cancel or time-out) and SIGHUP (a closed terminal) would end the process at once, writing
nothing. Inside :func:`stop_on_signals` all three raise :class:`StopRequested` (a
KeyboardInterrupt, so code that handles Ctrl-C handles the others too). A second signal while
the command is already stopping ends the process at once with the first signal's code. A
signal that the process was started with ignored (a background job's SIGINT, ``nohup``'s
SIGHUP) stays ignored.

Examples
--------
>>> with stop_on_signals():                              # doctest: +SKIP
...     try:
...         run_everything()
...     except StopRequested as stop:
...         write_what_finished()
...         raise SystemExit(stop.exit_code)
"""

from __future__ import annotations

import contextlib
import os
import signal
import threading
from typing import Iterator

#: The signals a command stops on.
STOP_SIGNALS = tuple(getattr(signal, name) for name in ("SIGINT", "SIGTERM", "SIGHUP") if hasattr(signal, name))


def exit_code_for(signal_number: int) -> int:
    """Return the exit code a shell reports for a process ended by ``signal_number`` (128 + it)."""
    return 128 + int(signal_number)


class StopRequested(KeyboardInterrupt):
    """A signal asked the command to stop; ``signal_number``, ``signal_name`` and
    ``exit_code`` (128 + the number) say which."""

    def __init__(self, signal_number: int):
        self.signal_number = int(signal_number)
        self.signal_name = signal.Signals(self.signal_number).name
        self.exit_code = exit_code_for(self.signal_number)
        super().__init__(f"stopped by {self.signal_name}")


def stop_reason(exc: BaseException) -> tuple[str, int]:
    """Return ``(signal name, exit code)`` for an interruption: a :class:`StopRequested`, or a
    plain KeyboardInterrupt (SIGINT, 130)."""
    if isinstance(exc, StopRequested):
        return exc.signal_name, exc.exit_code
    return "SIGINT", exit_code_for(signal.SIGINT)


@contextlib.contextmanager
def stop_on_signals(signals: tuple[int, ...] = STOP_SIGNALS) -> Iterator[None]:
    """Within the block, each of ``signals`` raises :class:`StopRequested` in the main thread
    (once; a second signal exits the process at once). Outside the main thread, or for a
    signal the process ignores, nothing is changed. The previous handlers come back on exit."""
    if threading.current_thread() is not threading.main_thread():
        yield
        return
    first: list[int] = []

    def handler(signum: int, frame: object) -> None:
        if first:
            os._exit(exit_code_for(first[0]))
        first.append(signum)
        raise StopRequested(signum)

    previous = {}
    for signum in signals:
        current = signal.getsignal(signum)
        if current is signal.SIG_IGN:
            continue
        previous[signum] = current
        signal.signal(signum, handler)
    try:
        yield
    finally:
        for signum, old in previous.items():
            signal.signal(signum, old)
