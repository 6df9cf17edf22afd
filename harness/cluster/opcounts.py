"""``fftgauge count --cluster ...``: the operation-count table computed on a Dask cluster.

The sizes are dealt out to :data:`TASKS_PER_THREAD` tasks per Dask thread, size ``i`` to
task ``i mod tasks`` (the instrumented counts cost more for larger sizes, so dealing them
round keeps the tasks even); each task runs the local
:func:`~fftgauge.harness.timing.opcount.count_table` on its sizes (:func:`~.tasks.count_chunk`),
and the rows come back in the order of the sizes asked for, equal to a local run's.
"""

from __future__ import annotations

from typing import Any

from fftgauge.harness.cluster.collect import TaskLoop, Tally
from fftgauge.harness.cluster.session import ClusterLost, call_with_timeout
from fftgauge.harness.cluster.target import ClusterTarget
from fftgauge.harness.errors import UsageError

#: Tasks per Dask thread.
TASKS_PER_THREAD = 4


def deal(sizes: list[int], tasks: int) -> list[list[int]]:
    """Return the positions ``0..len(sizes)-1`` dealt round to ``tasks`` tasks (empty ones left out)."""
    hands = [list(range(i, len(sizes), tasks)) for i in range(max(1, tasks))]
    return [hand for hand in hands if hand]


def count_on_cluster(sizes: list[int], count_trivial: bool, target: ClusterTarget,
                     quiet: bool = True) -> tuple[list[dict[str, Any]], dict[str, Any]]:
    """Return (``count``'s rows in the order of ``sizes``, the envelope's ``cluster`` record).

    Raises
    ------
    UsageError
        For an unreachable scheduler, workers lacking fftgauge, a task that failed (the
        counts are deterministic: a failure is no finding), or a scheduler lost mid-run.
    """
    from fftgauge.harness.cluster.session import cluster_session
    from fftgauge.harness.cluster.tasks import count_chunk
    from fftgauge.harness.execution.dispatch import Progress
    from fftgauge.harness.timing.opcount import DEFAULT_COUNTING_SPECS

    with cluster_session(target, list(DEFAULT_COUNTING_SPECS.values()), quiet=quiet) as session:
        threads = sum(call_with_timeout(session.client.nthreads, 10.0, "the workers' thread counts").values())
        hands = deal(list(sizes), TASKS_PER_THREAD * max(1, threads))
        rows: list[Any] = [None] * len(sizes)
        failures: list[str] = []
        progress = Progress(total=len(sizes), quiet=quiet, desc="counting on the cluster")
        tally = Tally()
        pending = list(hands)

        def make_next() -> Any:
            if not pending:
                return None
            hand = pending.pop(0)
            tally.sent += 1
            return session.client.submit(count_chunk, [sizes[i] for i in hand], count_trivial, pure=False), hand

        def on_result(hand: list[int], result: dict[str, Any]) -> None:
            for i, row in zip(hand, result["rows"]):
                rows[i] = row
            tally.done, tally.rows = tally.done + 1, tally.rows + len(hand)
            progress.advance(len(hand), note=tally.note(len(hands)))

        def on_failure(hand: list[int], text: str, host: str | None) -> None:
            failures.append(text)
            tally.done, tally.failures = tally.done + 1, tally.failures + 1
            progress.advance(len(hand), note=tally.note(len(hands)))

        try:
            TaskLoop(session, make_next, on_result, on_failure, capacity=2 * max(1, threads)).run()
        except ClusterLost as exc:
            raise UsageError(f"{exc}; nothing was written, rerun when the scheduler is back") from None
        finally:
            progress.close()
        if failures:
            raise UsageError(f"{len(failures)} counting task(s) failed on the cluster, the first: {failures[0]}")
        record = session.record()
        record["tasks"] = tally.done
        return rows, record
