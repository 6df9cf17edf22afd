"""How many cases one Dask task carries: enough that the per-task overhead (scheduling and
the rows' transfer, measured at start) is a small share of the task, few enough that the
run does not end on one long task while the other workers idle.

The rule (:func:`chunk_cases`): a task should take ``overhead / OVERHEAD_SHARE`` seconds
(the overhead then costs at most :data:`OVERHEAD_SHARE` of the work), but at most a
``1 / TAIL_TASKS_PER_WORKER`` share of each worker's remaining work (so the last tasks
are short), and at least :data:`MIN_TASK_SECONDS` (below which a task is all overhead
whatever the estimate says). A backend's seconds per case are not known before its first
tasks: they start with one size each, and every finished task updates the estimate.
"""

from __future__ import annotations

import math
from collections import deque
from dataclasses import dataclass, field

#: Largest share of a task's time its overhead may take.
OVERHEAD_SHARE = 0.05
#: Tasks each worker should still get from the remaining work (load balance at the end).
TAIL_TASKS_PER_WORKER = 4
#: Shortest task worth sending, in seconds.
MIN_TASK_SECONDS = 0.2
#: Most cases one task carries.
MAX_CHUNK_CASES = 5000
#: Weight of the newest task in the running estimate of seconds per case.
ESTIMATE_WEIGHT = 0.5


def chunk_cases(overhead_seconds: float, case_seconds: float, remaining_cases: int, workers: int) -> int:
    """Return how many cases the next task gets (at least 1, at most ``remaining_cases``).

    ``overhead_seconds``: one task's cost beyond its work; ``case_seconds``: the estimated
    seconds of one case; ``remaining_cases``: cases not yet sent; ``workers``: Dask threads.
    """
    if remaining_cases <= 0:
        return 0
    if case_seconds <= 0:
        return min(remaining_cases, MAX_CHUNK_CASES)
    target = max(overhead_seconds / OVERHEAD_SHARE, MIN_TASK_SECONDS)
    tail = remaining_cases * case_seconds / max(1, workers * TAIL_TASKS_PER_WORKER)
    seconds = max(min(target, tail), MIN_TASK_SECONDS)
    return int(max(1, min(remaining_cases, MAX_CHUNK_CASES, math.ceil(seconds / case_seconds))))


@dataclass
class SpecQueue:
    """One backend's claimed cases in run order (largest size first, the cases of one size
    together), handed out in chunks; ``case_seconds`` its running estimate (None: unknown)."""

    spec: str
    groups: deque  # of tuple[int, ...]: the case indices of one size
    case_seconds: float | None = None
    left: int = field(default=0)

    def __post_init__(self) -> None:
        self.left = sum(len(g) for g in self.groups)

    def take(self, cases: int | None) -> list[int]:
        """Return the next ``cases`` case indices (whole sizes; None or unknown estimate: one size)."""
        chunk: list[int] = []
        while self.groups and (not chunk or (cases is not None and len(chunk) + len(self.groups[0]) <= cases)):
            chunk.extend(self.groups.popleft())
        self.left -= len(chunk)
        return chunk

    def learn(self, cases: int, seconds: float) -> None:
        """Update the seconds-per-case estimate with a finished task's."""
        if cases <= 0:
            return
        fresh = seconds / cases
        self.case_seconds = fresh if self.case_seconds is None else (
            ESTIMATE_WEIGHT * fresh + (1 - ESTIMATE_WEIGHT) * self.case_seconds)


def size_groups(indices: list[int], sizes: list[int]) -> deque:
    """Return ``indices`` grouped by size, largest size first (each group in the given order)."""
    by_size: dict[int, list[int]] = {}
    for i in indices:
        by_size.setdefault(sizes[i], []).append(i)
    return deque(tuple(by_size[n]) for n in sorted(by_size, reverse=True))


def shape_groups(indices: list[int], cases: list) -> deque:
    """Return the shaped case indices grouped by array (shape and axes: every kind, precision and
    layout of it together), largest input first, as the local shaped battery orders them
    (:class:`fftgauge.harness.shapes.battery.ShapedQueue`)."""
    by_shape: dict[tuple, list[int]] = {}
    for i in indices:
        by_shape.setdefault((cases[i].shape, cases[i].axes), []).append(i)
    order = sorted(by_shape, key=lambda key: -cases[by_shape[key][0]].input_bytes())
    return deque(tuple(by_shape[key]) for key in order)
