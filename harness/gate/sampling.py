"""Interleaved sampling for the gate: two backends (or one and a stored baseline) measured in
worker processes, block by block, in a seeded random order, with the yardstick among them.

The unit of measurement is a *block*: ``count`` samples of ``loops`` back-to-back calls of
one backend's plan for one case, run in that backend's worker by :func:`sample_block`. The
parent (:class:`WorkerSampler`) asks for blocks in *pairs*, one of the old backend and one of
the new, the order of each pair drawn at random (seeded), so slow drift of the machine
(thermal state, another tenant starting or stopping) lands on both sides alike instead of on
whichever ran second. In stored-baseline mode only the new side is sampled. Each call of
:meth:`WorkerSampler.sample` also slips one block of the yardstick (:mod:`fftgauge.harness.gate.yardstick`,
in a worker of its own) in at a random place, so the yardstick sees the same machine as
the samples it will correct.

Child side (job functions the worker runs; see :mod:`fftgauge.harness.execution.worker`):

- :func:`prepare_case` plans the case once, prepares the input (the timing runner's seeded
  input, purpose ``"time"``), warms up, picks ``loops`` with the timer's autorange (samples
  of about 1 ms, :data:`fftgauge.harness.timing.clock.TARGET_SAMPLE_SECONDS`) and measures the loop's
  own cost per call with the empty loop, exactly what the timer subtracts (until version
  0.2.0 the gate subtracted a null plan's call as well, some 20 ns per call more than
  ``fftgauge time``, so a gate run read a little faster than the ``time`` file it was
  compared with). The plan is cached in a
  module-level dict of the child, keyed by case and seed, so every later block of the case
  reuses it; a fresh child (after a crash) plans again on its first block.
- :func:`sample_block` runs one untimed call (the other side's process ran in between and
  may have evicted the caches), then ``count`` samples with garbage collection paused,
  and returns per-call seconds with the loop's cost subtracted. The samples are sent back
  after the timed region: no inter-process traffic happens while the clock runs.
- :func:`release_case` closes a cached plan.
"""

from __future__ import annotations

import gc
import random
import time
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from fftgauge.harness.execution import jobs
from fftgauge.harness.cases import Case
from fftgauge.harness.errors import BackendFailure, UnsupportedCase, UsageError

#: Empty-loop samples taken at preparation to measure the loop's own cost per call.
OVERHEAD_SAMPLES = 9

_PREPARED: dict[tuple, "_Prepared"] = {}
_CAPPED_THREADS: list[int | None] = []


@dataclass
class _Prepared:
    plan: Any
    x: np.ndarray
    loops: int
    overhead_seconds: float
    plan_seconds: float


def _cap_threads(threads: int | None) -> None:
    """Cap BLAS/OpenMP pools of this child at ``threads`` for the rest of its life (once)."""
    if _CAPPED_THREADS or threads is None:
        return
    from threadpoolctl import threadpool_limits

    threadpool_limits(limits=threads)
    _CAPPED_THREADS.append(threads)


def _prepared(backend: Any, case_fields: tuple, seed: int, threads: int | None) -> _Prepared:
    """Return the cached preparation of a case in this child, preparing it first if needed.

    Raises
    ------
    UnsupportedCase
        When the backend does not claim the case.
    Exception
        Whatever the backend raises while planning or executing.
    """
    key = (tuple(case_fields), seed)
    if key in _PREPARED:
        return _PREPARED[key]
    from fftgauge.harness.shapes.fields import case_from_fields, is_shaped
    from fftgauge.harness.shapes.timed import plan_for, timing_input
    from fftgauge.harness.timing.clock import autorange, gc_paused, time_empty_loop, warm_up

    case = case_from_fields(case_fields)  # 1-D or shaped (fftgauge.harness.shapes.fields)
    reason = backend.shaped_unsupported_reason(case) if is_shaped(case) else backend.unsupported_reason(case)
    if reason is not None:
        raise UnsupportedCase(reason)
    _cap_threads(threads)
    x = timing_input(case, seed)
    # inputs in the backend's declared convention (1-D), or laid out as the shaped case says
    plan, plan_seconds = plan_for(backend, case, time.perf_counter_ns)
    try:
        x_in = plan.prepare(np.array(x, copy=True))
        with gc_paused():
            warm_up(plan.execute, x_in)
            loops = autorange(plan.execute, x_in)
            empty_ns = [time_empty_loop(loops) for _ in range(OVERHEAD_SAMPLES)]
    except BaseException:
        plan.close()
        raise
    prepared = _Prepared(plan, x_in, loops, float(np.median(empty_ns)) / loops * 1e-9, plan_seconds)
    _PREPARED[key] = prepared
    return prepared


def prepare_case(backend: Any, case_fields: tuple, seed: int, threads: int | None = 1) -> dict[str, Any]:
    """Worker job: plan and prepare one case (see the module docstring); return what was chosen.

    Returns
    -------
    dict
        ``loops`` (calls per sample), ``plan_seconds``, ``overhead_seconds`` (per call).

    Raises
    ------
    UnsupportedCase
        When the backend does not claim the case.
    Exception
        Whatever the backend raises while planning or executing.
    """
    p = _prepared(backend, case_fields, seed, threads)
    return {"loops": p.loops, "plan_seconds": p.plan_seconds, "overhead_seconds": p.overhead_seconds}


def sample_block(backend: Any, case_fields: tuple, loops: int | None, count: int, seed: int,
                 threads: int | None = 1) -> list[float]:
    """Worker job: take ``count`` samples of ``loops`` calls of the case's plan; return seconds per call.

    ``loops`` None uses the loops :func:`prepare_case` chose in this child. Each sample's time
    has the loop's own cost per call (the empty loop, measured at preparation) subtracted.

    Raises
    ------
    UnsupportedCase
        When the backend does not claim the case.
    Exception
        Whatever the backend raises.
    """
    from fftgauge.harness.timing.clock import time_loops

    p = _prepared(backend, case_fields, seed, threads)
    loops = int(loops or p.loops)
    execute, x = p.plan.execute, p.x
    was_enabled = gc.isenabled()
    gc.disable()
    try:
        execute(x)
        raw_ns = [time_loops(execute, x, loops) for _ in range(count)]
    finally:
        if was_enabled:
            gc.enable()
    return [ns / loops * 1e-9 - p.overhead_seconds for ns in raw_ns]


def release_case(backend: Any, case_fields: tuple, seed: int) -> None:
    """Worker job: close and forget the cached plan of a case (nothing when there is none)."""
    p = _PREPARED.pop((tuple(case_fields), seed), None)
    if p is not None:
        p.plan.close()
        gc.collect()


# -- the parent's side -------------------------------------------------------------------------
@dataclass
class Draw:
    """What one :meth:`WorkerSampler.sample` call brought back: per-call seconds of each side
    (``old`` empty in stored mode) and of the yardstick."""

    old: list[float] = field(default_factory=list)
    new: list[float] = field(default_factory=list)
    yardstick: list[float] = field(default_factory=list)


class WorkerSampler:
    """Runs the gate's blocks in worker processes: ``processes`` per backend SPEC, one for the yardstick.

    Why several processes per side: two processes running the same code on the same CPU can
    differ by a few percent for their whole life (where the loader and the allocator placed
    code and data decides which cache sets and branch-predictor entries collide; see
    :mod:`fftgauge.harness.timing.affinity` for the larger effect of CPU placement, which pinning removes).
    A comparison of one old process with one new process would report that difference as a
    change. Each block pair therefore takes its old and its new block from processes drawn
    in turn from each side's set (every process of a side used equally often, the pairing
    shuffled), so the per-pair ratios vary over process placements and their median and
    interval describe the implementations, not one lucky or unlucky pair of processes.

    Parameters
    ----------
    sides : worker key -> backend SPEC (``{"old": ..., "new": ...}`` in A/B mode, where the two
        SPECs may be the same, or one key per SPEC for the stored-mode candidates).
    threads : thread option and BLAS/OpenMP cap of every backend.
    seed : seeds the inputs, the random order of the blocks and the choice of processes.
    samples_per_block : samples in one block (``count`` of :func:`sample_block`).
    timeout_seconds : how long one job (a block, a preparation, a battery case) may run.
    yardstick : also run the yardstick (default True).
    processes : worker processes per side (at least 1).

    Items passed to :meth:`prepare`, :meth:`sample` and :meth:`release` need ``case``,
    ``new_key`` and ``old_key`` (None in stored mode) attributes naming their workers.
    """

    def __init__(self, sides: dict[str, str], threads: int | None, seed: int, samples_per_block: int,
                 timeout_seconds: float, yardstick: bool = True, processes: int = 1):
        from fftgauge.harness.execution.worker import Worker

        self.threads = threads
        self.seed = seed
        self.samples_per_block = samples_per_block
        self.timeout_seconds = timeout_seconds
        self.specs = dict(sides)
        self.workers = {key: [Worker(spec, threads=threads) for _ in range(max(1, processes))]
                        for key, spec in sides.items()}
        self.yardstick_worker = Worker("null") if yardstick else None
        #: Why the yardstick stopped (its worker failed), or None.
        self.yardstick_failure: str | None = None
        self._rng = random.Random(seed)
        self._loops: dict[tuple[str, Case], int] = {}
        self._turns: dict[str, list[int]] = {key: [] for key in sides}

    def __enter__(self) -> "WorkerSampler":
        return self

    def __exit__(self, exc_type: Any, *exc: Any) -> None:
        if exc_type is not None and issubclass(exc_type, KeyboardInterrupt):
            self.abort()  # interrupted (Ctrl-C, SIGTERM, SIGHUP): no worker is waited for
        self.close()

    def _all_workers(self) -> list[Any]:
        return [w for replicas in self.workers.values() for w in replicas] + (
            [self.yardstick_worker] if self.yardstick_worker is not None else [])

    def abort(self) -> None:
        """Kill every worker and what its backend started, at once (a run being interrupted)."""
        for worker in self._all_workers():
            worker.abort()

    def close(self) -> None:
        """Stop every worker."""
        for replicas in self.workers.values():
            for worker in replicas:
                worker.close()
        if self.yardstick_worker is not None:
            self.yardstick_worker.close()

    def claims(self, key: str, cases: list[Case]) -> dict[str, Any]:
        """Return the label, description and per-case refusal reasons of the backend of worker
        ``key`` (:func:`fftgauge.harness.execution.dispatch.describe_cases`).

        Raises
        ------
        UsageError
            When the SPEC cannot be loaded or the backend fails while describing itself.
        """
        from fftgauge.harness.execution.dispatch import describe_cases

        return describe_cases(self.workers[key][0], self.specs[key], cases, None, self.timeout_seconds)

    @staticmethod
    def _fields(case: Any) -> tuple:
        from fftgauge.harness.shapes.fields import case_fields

        return case_fields(case)  # 1-D or shaped

    def prepare(self, item: Any) -> dict[str, dict[str, Any]]:
        """Prepare the item's case in every process of each of its sides; return the first
        process's :func:`prepare_case` dict per worker key.

        Every process of every side of the item then runs the loops per sample the first
        preparation chose, so the two sides' samples are of the same length.

        Raises
        ------
        UnsupportedCase
            When a side's plan refuses the case.
        BackendFailure
            When a side fails (the message names the SPEC).
        """
        out = {}
        for key in self._sides(item):
            for worker in self.workers[key]:
                try:
                    info = worker.call(jobs.prepare_case, self._fields(item.case),
                                       self.seed, self.threads, timeout_seconds=self.timeout_seconds)
                except BackendFailure as exc:
                    raise BackendFailure(f"{self.specs[key]}: {exc}") from None
                self._loops.setdefault((item.new_key, item.case), info["loops"])
                out.setdefault(key, info)
        return out

    def _sides(self, item: Any) -> list[str]:
        return [item.new_key] + ([item.old_key] if item.old_key else [])

    def _next_worker(self, key: str) -> Any:
        """Return the next process of side ``key``: each once per turn, in a shuffled order."""
        if not self._turns[key]:
            self._turns[key] = list(range(len(self.workers[key])))
            self._rng.shuffle(self._turns[key])
        return self.workers[key][self._turns[key].pop()]

    def _block(self, key: str, case: Case, loops: int | None) -> list[float]:
        try:
            return self._next_worker(key).call(jobs.sample_block, self._fields(case),
                                               loops, self.samples_per_block, self.seed,
                                               self.threads, timeout_seconds=self.timeout_seconds)
        except (BackendFailure, UnsupportedCase) as exc:
            raise BackendFailure(f"{self.specs[key]}: {exc}") from None

    def _yardstick_block(self) -> list[float]:
        if self.yardstick_worker is None or self.yardstick_failure is not None:
            return []
        try:
            return self.yardstick_worker.call(jobs.yardstick_block, self.samples_per_block,
                                              timeout_seconds=self.timeout_seconds)
        except (BackendFailure, UsageError) as exc:
            self.yardstick_failure = str(exc)
            return []

    def sample(self, item: Any, pairs: int) -> Draw:
        """Take ``pairs`` rounds of blocks of the item's sides, each round in a random order, with
        one yardstick block at a random place among them.

        Raises
        ------
        BackendFailure
            When a side fails (the message starts with its SPEC).
        """
        draw = Draw()
        loops = self._loops.get((item.new_key, item.case))
        yardstick_round = self._rng.randrange(pairs)
        for k in range(pairs):
            steps = self._sides(item)
            if k == yardstick_round:
                steps.append(None)
            self._rng.shuffle(steps)
            for key in steps:
                if key is None:
                    draw.yardstick.extend(self._yardstick_block())
                elif key == item.new_key:
                    draw.new.extend(self._block(key, item.case, loops))
                else:
                    draw.old.extend(self._block(key, item.case, loops))
        return draw

    def yardstick(self, blocks: int) -> list[float]:
        """Return the per-call seconds of ``blocks`` yardstick blocks ([] when it is unavailable)."""
        out: list[float] = []
        for _ in range(blocks):
            out.extend(self._yardstick_block())
        return out

    def release(self, item: Any) -> None:
        """Close the item's cached plans in its workers (failures are ignored: the run goes on)."""
        for key in self._sides(item):
            for worker in self.workers[key]:
                try:
                    worker.call(jobs.release_case, self._fields(item.case), self.seed,
                                timeout_seconds=self.timeout_seconds)
                except (BackendFailure, UnsupportedCase, UsageError):
                    pass

    def run_checks(self, key: str, case: Case, seed: int) -> list[dict[str, Any]]:
        """Run the whole correctness battery on one case in worker ``key``; return its rows.

        Raises
        ------
        BackendFailure
            When the worker fails (the message starts with its SPEC).
        """
        try:
            return self.workers[key][0].call(jobs.run_case_checks, self._fields(case), seed, None,
                                          timeout_seconds=self.timeout_seconds)
        except (BackendFailure, UnsupportedCase) as exc:
            raise BackendFailure(f"{self.specs[key]}: {exc}") from None
