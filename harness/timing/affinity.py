"""CPU pinning for the timed commands: every worker of a timing run on the same CPU(s).

Why
---
On a virtual machine the CPUs a process is given are not alike: each virtual CPU runs on a
host core whose other tenants change from second to second, so the same code runs at
different speeds on CPU 0 and on CPU 1. Measured on the project's 2-core virtual machine
(``benchmarks/bench_placement.py``: numpy against numpy in two fresh worker processes,
blocks interleaved as the gate does, six pairs of processes per size): with the scheduler
placing the processes freely, the ratios of one pair of processes ranged over 0.944-1.044
at n = 4096 (standard deviation 0.034 across pairs) with another job loading the machine
(an earlier throwaway run of the same method saw 0.86-1.26); pinned to one CPU,
0.991-1.017 (0.010). What remains after
pinning (about 1-2% between processes: where code and data landed in memory) is what the
gate's several processes per side average out (:class:`fftgauge.harness.gate.sampling.WorkerSampler`).
A gate comparing two processes, or a run compared with yesterday's, is therefore only fair
when every process it times runs on the same CPU.

The timed commands (``fftgauge time`` and ``fftgauge gate``) pin their own thread to the
chosen CPUs for the length of the run (:func:`pinned`); the worker processes they start
inherit the set (Linux passes a thread's affinity to the processes it starts), including
workers restarted after a crash. The parent's own work (statistics between rounds) never
overlaps a timed block: sampling is sequential, so sharing the CPU costs nothing.

The choice (:func:`choose_cpus`): ``auto`` takes the *last* ``threads`` CPUs of the
process's allowed set (CPU 0 usually takes more of the machine's interrupts; common
practice), ``off`` does not pin, and a comma list of CPU numbers is taken as given. With
``threads`` larger than the allowed set, ``auto`` does not pin (it cannot give each thread a CPU).
"""

from __future__ import annotations

import os
from contextlib import contextmanager
from typing import Iterator

from fftgauge.harness.errors import UsageError

#: Accepted words of ``--pin-cpu`` besides CPU numbers.
PIN_WORDS = ("auto", "off")


def allowed_cpus() -> tuple[int, ...] | None:
    """Return the CPUs this thread may run on, sorted, or None where the OS cannot tell or set them."""
    getter = getattr(os, "sched_getaffinity", None)
    if getter is None or getattr(os, "sched_setaffinity", None) is None:
        return None
    return tuple(sorted(getter(0)))


def parse_pin(text: str | None) -> str | tuple[int, ...]:
    """Return ``auto``, ``off`` or the CPU numbers of a ``--pin-cpu`` value (default ``auto``).

    Raises
    ------
    UsageError
        For anything else, or a CPU this process may not use (the message lists those it may).
    """
    if text is None:
        return "auto"
    raw = str(text).strip().lower()
    if raw in PIN_WORDS:
        return raw
    try:
        cpus = tuple(dict.fromkeys(int(part) for part in raw.split(",")))
    except ValueError:
        raise UsageError(f"--pin-cpu {text!r}: write auto, off, or CPU numbers such as 1 or 2,3") from None
    allowed = allowed_cpus()
    if allowed is None:
        raise UsageError(f"--pin-cpu {text!r}: this platform cannot pin processes to CPUs; use --pin-cpu off")
    outside = [c for c in cpus if c not in allowed]
    if outside:
        raise UsageError(f"--pin-cpu {text!r}: CPU {outside[0]} is not one this process may use "
                         f"({', '.join(map(str, allowed))})")
    return cpus


def choose_cpus(pin: str | tuple[int, ...], threads: int | None) -> tuple[int, ...] | None:
    """Return the CPUs a timed run should be pinned to, or None for no pinning.

    ``pin`` is what :func:`parse_pin` returned; ``threads`` the run's thread count (None = 1).
    """
    if pin == "off":
        return None
    if isinstance(pin, tuple):
        return pin
    allowed = allowed_cpus()
    want = max(1, threads or 1)
    if allowed is None or want > len(allowed):
        return None
    return allowed[-want:]


@contextmanager
def pinned(cpus: tuple[int, ...] | None) -> Iterator[tuple[int, ...] | None]:
    """Pin the calling thread (and so the processes it starts) to ``cpus`` inside the block.

    Yields the CPUs pinned to (None when ``cpus`` is None or pinning failed); the previous
    set is restored on exit.
    """
    if not cpus or allowed_cpus() is None:
        yield None
        return
    before = os.sched_getaffinity(0)
    try:
        os.sched_setaffinity(0, set(cpus))
    except OSError:
        yield None
        return
    try:
        yield tuple(cpus)
    finally:
        os.sched_setaffinity(0, before)
