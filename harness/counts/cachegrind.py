"""Counting a case's instructions per transform under valgrind's cachegrind.

One *run* is a fresh process, ``valgrind --tool=cachegrind python -s driver.py ...``
(:mod:`fftgauge.harness.counts.driver`), that makes ``K`` (or ``2K``) transforms after the
same start-up; per transform, ``(I(2K) - I(K)) / K`` (:func:`per_transform`). A shaped case
(:class:`~fftgauge.harness.shapes.case.ShapeCase`) is counted the same way, one call of the
whole array being one transform here (its ``batch`` transforms of N points). What makes a
count wander between identical runs is pinned down (:func:`run_environment`): the hash seed
(``PYTHONHASHSEED=0``), no bytecode written (a first run writing ``.pyc`` files would count
more), single-threaded BLAS/OpenMP pools (idle worker threads spin), no working directory on the import
path (its listing changes between runs, and the interpreter would read it; the driver drops
its own folder too), no user site (``-s``), every module compiled before the counted runs into a
bytecode cache of the count's own and frozen there (:func:`prime`, :func:`freeze_bytecode`: a
source file edited while a case is counted no longer changes the runs after the edit), the
operating system's entropy replaced by a seeded stream in the driver
(:func:`fftgauge.harness.counts.driver.pin_entropy`), and address-space randomisation switched
off with ``setarch -R`` where the machine allows it.
Measured on the development machine (Python 3.11, numpy 2.4, valgrind 3.19): with the entropy
pinned, fresh runs of the same count give the same total to the instruction (3 of 3, spread 0;
651,489,420-651,493,908 before, from the entropy-seeded start-up), and the same per-transform
count with 1 or 100 bytes more environment, another bytecode cache path, or randomisation on.

Cachegrind's output file holds an ``events:`` line naming the counted events and a
``summary:`` line with their totals (:func:`parse_counts`); with ``--cache-sim=yes`` the
events include the simulated last-level misses ``ILmr``, ``DLmr`` and ``DLmw``
(:func:`ll_misses`).
"""

from __future__ import annotations

import math
import os
import shutil
import subprocess
import sys
import tempfile
import time
from dataclasses import dataclass
from functools import lru_cache

from fftgauge.harness.cases import Case
from fftgauge.harness.errors import BackendFailure, UsageError
from fftgauge.harness.shapes.case import ShapeCase

#: How to install valgrind where it is missing (Debian and Ubuntu CI images).
INSTALL_LINE = "apt-get install valgrind"
#: The driver program run under cachegrind.
DRIVER = os.path.join(os.path.dirname(os.path.abspath(__file__)), "driver.py")
#: Exit status of the driver when the backend failed (:func:`fftgauge.harness.counts.driver.main`).
DRIVER_FAILED = 3
#: Simulated last-level miss events of cachegrind (instruction reads, data reads, data writes).
LL_MISS_EVENTS = ("ILmr", "DLmr", "DLmw")
#: Environment variables that size thread pools of numerical libraries: all set to 1.
THREAD_POOL_VARIABLES = ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS", "NUMEXPR_NUM_THREADS",
                         "VECLIB_MAXIMUM_THREADS")


def find_valgrind() -> str | None:
    """Return the path of the ``valgrind`` program on PATH, or None."""
    return shutil.which("valgrind")


@lru_cache(maxsize=None)
def valgrind_version(path: str) -> str:
    """Return ``valgrind --version`` of the program at ``path`` (e.g. ``valgrind-3.19.0``), or
    ``unknown`` when it does not answer."""
    try:
        out = subprocess.run([path, "--version"], capture_output=True, text=True, timeout=30)
    except (OSError, subprocess.SubprocessError):
        return "unknown"
    return out.stdout.strip() or "unknown"


def availability_line() -> str:
    """Return one line saying whether the ``instructions`` metric can run here."""
    path = find_valgrind()
    if path is None:
        return f"valgrind: not found; the instructions metric needs it ({INSTALL_LINE})"
    return f"valgrind: {valgrind_version(path)} at {path} (the instructions metric can run)"


def require_valgrind() -> str:
    """Return the path of valgrind.

    Raises
    ------
    UsageError
        When valgrind is not on PATH; the message gives the install line.
    """
    path = find_valgrind()
    if path is None:
        raise UsageError(f"--metric instructions counts under valgrind's cachegrind, which is not installed "
                         f"here: install it ({INSTALL_LINE}) or use --metric time")
    return path


#: CPU flags (``/proc/cpuinfo``) that decide which code paths numerical libraries take.
ISA_FLAG_PREFIXES = ("sse", "ssse", "avx", "fma", "bmi", "asimd", "sve", "neon")


def host_instruction_set(cpuinfo: str = "/proc/cpuinfo") -> list[str]:
    """Return this CPU's flags of :data:`ISA_FLAG_PREFIXES`, sorted (empty where unreadable).

    Under valgrind a program sees valgrind's own CPU, not this one: valgrind 3.19 on a CPU
    with AVX-512 offers AVX, AVX2 and FMA3 only (numpy's ``__cpu_features__`` read so here),
    so libraries that choose their kernels at run time count their AVX2 paths.
    """
    try:
        with open(cpuinfo, encoding="utf-8", errors="replace") as fh:
            for line in fh:
                key, _, rest = line.partition(":")
                if key.strip() in ("flags", "Features"):
                    return sorted({f for f in rest.split() if f.startswith(ISA_FLAG_PREFIXES)})
    except OSError:
        pass
    return []


@lru_cache(maxsize=None)
def setarch_prefix() -> tuple[str, ...]:
    """Return ``("setarch", "-R")`` when that switches address-space randomisation off here
    (a container may forbid it), else ``()``."""
    path = shutil.which("setarch")
    if path is None:
        return ()
    try:
        ok = subprocess.run([path, "-R", "true"], capture_output=True, timeout=30).returncode == 0
    except (OSError, subprocess.SubprocessError):
        ok = False
    return (path, "-R") if ok else ()


def parse_counts(text: str) -> dict[str, int]:
    """Return the totals of a cachegrind output file, event name -> count.

    The ``events:`` line names the events; the ``summary:`` line (or, failing that, a
    ``totals:`` line) holds their totals in the same order; a total left off at the end is 0
    (the format allows it).

    Raises
    ------
    ValueError
        When the text has no ``events:`` line or no totals.
    """
    events: list[str] | None = None
    totals: list[int] | None = None
    fallback: list[int] | None = None
    for line in text.splitlines():
        key, _, rest = line.partition(":")
        if key == "events":
            events = rest.split()
        elif key == "summary":
            totals = [int(v) for v in rest.split()]
        elif key == "totals":
            fallback = [int(v) for v in rest.split()]
    totals = totals if totals is not None else fallback
    if not events or totals is None:
        raise ValueError("not a cachegrind output file (no events: line or no summary: line)")
    if len(totals) > len(events):
        raise ValueError(f"cachegrind summary holds {len(totals)} totals for {len(events)} events")
    return {name: (totals[i] if i < len(totals) else 0) for i, name in enumerate(events)}


def ll_misses(counts: dict[str, int]) -> int | None:
    """Return the simulated last-level misses (``ILmr + DLmr + DLmw``), or None without cache simulation."""
    if not all(e in counts for e in LL_MISS_EVENTS):
        return None
    return sum(counts[e] for e in LL_MISS_EVENTS)


def run_environment(base: dict[str, str] | None = None, pycache: str | None = None) -> dict[str, str]:
    """Return the environment of a counted run: ``base`` (default: this process's) without
    ``PYTHON*`` variables other than ``PYTHONPATH``, plus ``PYTHONHASHSEED=0``,
    ``PYTHONDONTWRITEBYTECODE=1``, ``PYTHONPYCACHEPREFIX=pycache`` when given (a bytecode cache
    of the count's own, filled by :func:`prime`) and every :data:`THREAD_POOL_VARIABLES` set to 1."""
    env = {k: v for k, v in (os.environ if base is None else base).items()
           if not k.startswith("PYTHON") or k == "PYTHONPATH"}
    env.update(PYTHONHASHSEED="0", PYTHONDONTWRITEBYTECODE="1")
    if pycache is not None:
        env["PYTHONPYCACHEPREFIX"] = pycache
    env.update({name: "1" for name in THREAD_POOL_VARIABLES})
    return env


#: The caches simulated with ``--cache-sim``: (size in bytes, ways, line bytes) per level, fixed
#: (not the host's, which valgrind would read and which differ between machines: 480 MiB of L3
#: on the development machine) so that stored miss counts compare across hosts. A common
#: desktop configuration: 32 KiB 8-way L1s, an 8 MiB 16-way last level, 64-byte lines.
SIMULATED_CACHES = {"I1": (32768, 8, 64), "D1": (32768, 8, 64), "LL": (8388608, 16, 64)}


def cache_options(caches: dict[str, tuple[int, int, int]] | None = None) -> list[str]:
    """Return cachegrind's ``--I1``/``--D1``/``--LL`` options: :data:`SIMULATED_CACHES` with the
    levels of ``caches`` in their place."""
    levels = {**SIMULATED_CACHES, **(caches or {})}
    return [f"--{level}={size},{ways},{line}" for level, (size, ways, line) in levels.items()]


def driver_command(spec: str, case: Case | ShapeCase, seed: int, calls: int, threads: int) -> list[str]:
    """Return the driver's command line (this interpreter, ``-s``, :data:`DRIVER` and its
    arguments: :mod:`fftgauge.harness.counts.driver`) for ``calls`` transforms of a 1-D or a
    shaped ``case``."""
    from fftgauge.harness.counts.driver import case_args, shape_args

    return [sys.executable, "-s", DRIVER, spec, *case_args(case), str(seed), str(calls), str(threads),
            *shape_args(case)]


def driver_argv(valgrind: str, out_file: str, spec: str, case: Case | ShapeCase, seed: int, calls: int,
                threads: int, cache_sim: bool, caches: dict[str, tuple[int, int, int]] | None = None) -> list[str]:
    """Return the command line of one counted run of ``calls`` transforms (with ``cache_sim``,
    the caches of :func:`cache_options`)."""
    sim = ["--cache-sim=yes", *cache_options(caches)] if cache_sim else ["--cache-sim=no"]
    return [*setarch_prefix(), valgrind, "--tool=cachegrind", *sim,
            "-q", f"--cachegrind-out-file={out_file}", *driver_command(spec, case, seed, calls, threads)]


def failure_line(stderr: str, returncode: int) -> str:
    """Return the one line that says why a driver run failed: the driver's own line when it
    wrote one, else the last line of standard error with the exit status."""
    lines = [ln for ln in stderr.splitlines() if ln.strip()]
    said = next((ln for ln in reversed(lines) if ln.startswith("fftgauge-count-driver:")), None)
    if said is not None:
        return said.partition(":")[2].strip()
    last = lines[-1].strip() if lines else "no message"
    return f"crashed under valgrind (exit status {returncode}): {last}"


def prime(spec: str, case: Case | ShapeCase, seed: int, threads: int = 1, timeout: float = 120.0,
          pycache: str | None = None) -> None:
    """Run the driver once without valgrind, bytecode writing allowed: every module the counted
    runs import is then compiled already (a module compiled in one counted run and read from
    its cache in the next would count differently), and a backend that fails is found in
    seconds, not minutes. With ``pycache``, that cache is then frozen (:func:`freeze_bytecode`):
    the counted runs use the code as it was compiled here, whatever is edited afterwards.

    Raises
    ------
    BackendFailure
        When the run fails (its one line) or runs past ``timeout`` seconds.
    """
    env = run_environment(pycache=pycache)
    env.pop("PYTHONDONTWRITEBYTECODE")
    argv = driver_command(spec, case, seed, 1, threads)
    try:
        done = subprocess.run(argv, env=env, capture_output=True, text=True, timeout=timeout)
    except subprocess.TimeoutExpired:
        raise BackendFailure(f"one transform took more than {timeout:g} s without valgrind (--timeout)") from None
    if done.returncode != 0:
        raise BackendFailure(failure_line(done.stderr, done.returncode).replace("under valgrind", "without valgrind"))
    if pycache is not None:
        freeze_bytecode(pycache)


#: Flags of a PEP 552 bytecode header saying "hash-based, source not checked".
UNCHECKED_HASH_FLAGS = (1).to_bytes(4, "little")


def freeze_bytecode(folder: str) -> int:
    """Rewrite every timestamp-based ``.pyc`` under ``folder`` as an unchecked hash-based one
    (PEP 552: the same magic and code, flags ``0b01``, the 8 bytes of mtime and size kept as the
    unchecked hash); return how many were rewritten.

    The interpreter then loads the code compiled by :func:`prime` without looking at the
    source: a module edited between the first counted run and the last (a shared working tree,
    an editor saving) no longer makes one run compile it and count millions of instructions
    more than the others.
    """
    import importlib.util

    rewritten = 0
    for root, _, files in os.walk(folder):
        for name in files:
            if not name.endswith(".pyc"):
                continue
            path = os.path.join(root, name)
            try:
                with open(path, "rb") as fh:
                    data = fh.read()
                if len(data) < 16 or data[:4] != importlib.util.MAGIC_NUMBER or data[4:8] != bytes(4):
                    continue
                with open(path, "wb") as fh:
                    fh.write(data[:4] + UNCHECKED_HASH_FLAGS + data[8:])
                rewritten += 1
            except OSError:
                continue
    return rewritten


@dataclass(frozen=True)
class RunCount:
    """One counted run: its ``calls`` transforms, cachegrind's totals and its wall seconds."""

    calls: int
    counts: dict[str, int]
    seconds: float


def count_run(valgrind: str, spec: str, case: Case | ShapeCase, seed: int, calls: int, threads: int = 1,
              cache_sim: bool = False, timeout: float = 120.0, pycache: str | None = None,
              caches: dict[str, tuple[int, int, int]] | None = None) -> RunCount:
    """Run the driver once under cachegrind and return its :class:`RunCount`.

    Raises
    ------
    BackendFailure
        When the run fails (the backend's one line, or valgrind's exit status), runs past
        ``timeout`` seconds, or leaves no readable output file.
    """
    with tempfile.TemporaryDirectory(prefix="fftgauge-count-") as work:
        out_file = os.path.join(work, "cachegrind.out")
        argv = driver_argv(valgrind, out_file, spec, case, seed, calls, threads, cache_sim, caches)
        started = time.monotonic()
        try:
            done = subprocess.run(argv, env=run_environment(pycache=pycache), capture_output=True, text=True,
                                  timeout=timeout)
        except subprocess.TimeoutExpired:
            raise BackendFailure(f"a counted run of {calls} transform(s) took more than {timeout:g} s under "
                                 f"valgrind (--timeout)") from None
        seconds = time.monotonic() - started
        if done.returncode != 0:
            raise BackendFailure(failure_line(done.stderr, done.returncode))
        try:
            with open(out_file, encoding="utf-8", errors="replace") as fh:
                counts = parse_counts(fh.read())
        except (OSError, ValueError) as exc:
            raise BackendFailure(f"cachegrind left no readable output: {exc}") from None
    return RunCount(calls, counts, seconds)


def per_transform(short: RunCount, long: RunCount, event: str = "Ir") -> float:
    """Return ``(I(2K) - I(K)) / K`` of ``event`` from a run of K calls and one of 2K calls.

    Raises
    ------
    BackendFailure
        When the longer run counted no more than the shorter one (nothing was transformed).
    """
    extra = long.calls - short.calls
    diff = long.counts.get(event, 0) - short.counts.get(event, 0)
    if extra <= 0 or (event == "Ir" and diff <= 0):
        raise BackendFailure(f"a run of {long.calls} transforms counted no more {event} than one of "
                             f"{short.calls}: the transform does no work the count can see")
    return diff / extra


#: Work per counted run (points x log2 points) the automatic K aims at (:func:`default_calls`).
TARGET_POINT_LOGS = 2 ** 21


def default_calls(n: int, batch: int = 1) -> int:
    """Return the automatic K for size ``n``: about :data:`TARGET_POINT_LOGS` / (batch n log2 n)
    calls of ``batch`` transforms each, between 4 and 1000 (enough that the start-up's few
    thousand wandering instructions are far below 1e-4 of the K calls' count)."""
    work = batch * n * max(1.0, math.log2(max(n, 2)))
    return int(min(1000, max(4, math.ceil(TARGET_POINT_LOGS / work))))


def calls_for(case: Case | ShapeCase) -> int:
    """Return the automatic K of a case (:func:`default_calls`): by ``n`` for a 1-D case, by N
    (the points of one transform) and the batch for a shaped one, whose call transforms the
    whole array."""
    if isinstance(case, ShapeCase):
        return default_calls(case.points, case.batch)
    return default_calls(case.n)
