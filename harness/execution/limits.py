"""Resource limits of a worker's child: the memory cap, the CPU-time limit, no core dumps.

The memory cap
--------------
A runaway allocation must become an ``error`` row saying "exceeded the memory cap of X GiB",
never reach the system's out-of-memory killer (which may pick someone else's process on a
shared host). The cap is a resource limit the child sets on itself (:func:`limit_memory`):

- On Linux it is ``RLIMIT_DATA``, which (since Linux 4.7) counts the private writable memory
  a process maps: heap, anonymous ``mmap``, thread stacks. Unlike ``RLIMIT_AS`` it does not
  count address space only *reserved* (``PROT_NONE``): glibc reserves 64 MiB per thread
  arena, OpenBLAS and OpenMP runtimes reserve more, and under a 512 MiB
  ``RLIMIT_AS`` even ``import scipy.fft`` fails ("failed to map segment from shared object")
  where a 512 MiB ``RLIMIT_DATA`` lets it load and still stops a 2 GiB ``numpy.ones``.
- Elsewhere (other POSIX systems) it is ``RLIMIT_AS``; where neither exists, no cap.

The default (:func:`default_memory_limit_bytes`) is generous: half of the physical memory
(or of the container's memory limit, when smaller), divided by how many workers run at once,
and never under :data:`MIN_DEFAULT_CAP_BYTES`. ``memory_limit_bytes=None`` lifts it.

The CPU-time limit
------------------
Beside the wall-clock timeout the parent enforces, each job runs under ``RLIMIT_CPU``
(:func:`limit_cpu`): by default the job's timeout times the machine's CPU count, plus
:data:`CPU_SLACK_SECONDS`, so it never fires before the timeout would; it ends a job that
spins while the parent cannot stop it (a parent suspended, or gone while the job holds the
GIL). The kernel then sends SIGXCPU, which ends the child.
"""

from __future__ import annotations

import math
import os
import sys

import psutil

#: The smallest default memory cap, in bytes (2 GiB).
MIN_DEFAULT_CAP_BYTES = 2 * 2**30
#: Share of the physical memory the default caps of the workers running at once add up to.
DEFAULT_CAP_FRACTION = 0.5
#: CPU seconds added to every job's CPU-time limit (start-up, rounding, the kernel's ticks).
CPU_SLACK_SECONDS = 5.0
#: Files that hold the memory limit of this process's control group (v2, then v1).
CGROUP_LIMIT_FILES = ("/sys/fs/cgroup/memory.max", "/sys/fs/cgroup/memory/memory.limit_in_bytes")


def physical_memory_bytes() -> int:
    """Return the memory this process may use: the machine's physical memory, or the control
    group's limit when one is set and smaller (a container)."""
    total = int(psutil.virtual_memory().total)
    for path in CGROUP_LIMIT_FILES:
        try:
            with open(path) as fh:
                text = fh.read().strip()
        except OSError:
            continue
        if text.isdigit() and 0 < int(text) < total:
            return int(text)
    return total


def default_memory_limit_bytes(concurrency: int = 1, physical_bytes: int | None = None) -> int:
    """Return the default memory cap of one worker when ``concurrency`` workers run at once.

    ``DEFAULT_CAP_FRACTION`` (one half) of ``physical_bytes`` (default:
    :func:`physical_memory_bytes`) divided by ``concurrency``, rounded down to a whole MiB,
    and at least :data:`MIN_DEFAULT_CAP_BYTES`.

    Raises
    ------
    ValueError
        When ``concurrency`` is not a positive integer.

    Examples
    --------
    >>> default_memory_limit_bytes(4, physical_bytes=64 * 2**30) / 2**30
    8.0
    >>> default_memory_limit_bytes(16, physical_bytes=16 * 2**30) / 2**30
    2.0
    """
    if not isinstance(concurrency, int) or concurrency < 1:
        raise ValueError(f"concurrency must be a positive integer, got {concurrency!r}")
    physical = physical_memory_bytes() if physical_bytes is None else physical_bytes
    share = int(physical * DEFAULT_CAP_FRACTION / concurrency) // 2**20 * 2**20
    return max(MIN_DEFAULT_CAP_BYTES, share)


def memory_resource() -> int | None:
    """Return the ``resource`` constant the memory cap uses here (``RLIMIT_DATA`` on Linux,
    ``RLIMIT_AS`` elsewhere), or None where there is none."""
    try:
        import resource
    except ImportError:
        return None
    if sys.platform.startswith("linux"):
        return resource.RLIMIT_DATA
    return getattr(resource, "RLIMIT_AS", None)


def limit_memory(limit_bytes: int) -> bool:
    """Cap this process's memory at ``limit_bytes`` (never above the hard limit).

    Returns True when a cap was set, False where this platform has none.
    """
    which = memory_resource()
    if which is None:
        return False
    import resource

    soft, hard = resource.getrlimit(which)
    new = limit_bytes if hard == resource.RLIM_INFINITY else min(limit_bytes, hard)
    try:
        resource.setrlimit(which, (new, hard))
    except (ValueError, OSError):
        return False
    return True


def memory_in_use_bytes(pid: int) -> int | None:
    """Return what process ``pid`` has mapped in the measure the cap counts (Linux: ``VmData``
    of ``/proc/PID/status``; elsewhere its virtual size), or None when it cannot be read."""
    if sys.platform.startswith("linux"):
        try:
            with open(f"/proc/{pid}/status") as fh:
                for line in fh:
                    if line.startswith("VmData:"):
                        return int(line.split()[1]) * 1024
        except (OSError, ValueError, IndexError):
            return None
    try:
        return int(psutil.Process(pid).memory_info().vms)
    except psutil.Error:
        return None


def cpu_seconds_for(timeout_seconds: float | None, cpu_limit_seconds: float | None = None) -> float | None:
    """Return the CPU-time limit of one job: ``cpu_limit_seconds`` when given, else the
    wall-clock ``timeout_seconds`` times the CPU count plus :data:`CPU_SLACK_SECONDS`
    (None, no limit, for a job without a timeout)."""
    if cpu_limit_seconds is not None:
        return float(cpu_limit_seconds)
    if timeout_seconds is None or math.isinf(timeout_seconds):
        return None
    return timeout_seconds * (os.cpu_count() or 1) + CPU_SLACK_SECONDS


def limit_cpu(seconds: float | None) -> None:
    """Let this process use ``seconds`` more CPU time from now (``RLIMIT_CPU``, soft limit;
    None: no limit). Past it the kernel sends SIGXCPU, which ends the process. Never raises."""
    try:
        import resource
    except ImportError:
        return
    soft, hard = resource.getrlimit(resource.RLIMIT_CPU)
    if seconds is None:
        new = hard
    else:
        usage = resource.getrusage(resource.RUSAGE_SELF)
        new = int(math.ceil(usage.ru_utime + usage.ru_stime + seconds))
        if hard != resource.RLIM_INFINITY:
            new = min(new, hard)
    try:
        resource.setrlimit(resource.RLIMIT_CPU, (new, hard))
    except (ValueError, OSError):
        pass


def no_core_dumps() -> None:
    """Set ``RLIMIT_CORE`` to 0: a battery that crashes a backend on purpose, case after
    case, must not fill the disk with core files. Never raises."""
    try:
        import resource
        resource.setrlimit(resource.RLIMIT_CORE, (0, resource.getrlimit(resource.RLIMIT_CORE)[1]))
    except (ImportError, ValueError, OSError):
        pass
