"""The timing runner on a Dask cluster: ``fftgauge time --cluster ...``, one table of every
host's times.

Every host that offers a timing slot (a worker started with ``--resources timing=1``;
``local:N`` gives its workers one) times every case: the cases go out in chunks of about
:data:`~fftgauge.harness.timing.runner.WINDOW_CASES` cases, each pinned to its host and
needing its ``timing`` resource, and each chunk holds the host's timing slot (a Dask
``Lock`` per host) while it runs the local timer (:func:`~.tasks.time_chunk`): never two
timed cases at once on one host, however many workers it runs (shaped cases, ``--shapes``,
go out the same way, that many cases a chunk). Rows carry ``host`` and
``machine`` (the fingerprint of the host that measured them) and stream to the results file
as chunks finish.
"""

from __future__ import annotations

import dataclasses
from typing import Any

from fftgauge.harness.cases import KINDS, Case
from fftgauge.harness.cluster.collect import TaskLoop, Tally
from fftgauge.harness.cluster.session import ClusterLost, ClusterSession, call_with_timeout
from fftgauge.harness.cluster.target import ClusterTarget
from fftgauge.harness.errors import UsageError

#: The Dask worker resource one timed case needs: one per host's timing worker.
TIMING_RESOURCE = "timing"


def timing_hosts(session: ClusterSession) -> list[str]:
    """Return the hosts with at least one worker that offers a timing slot, in a stable order.

    Raises
    ------
    UsageError
        When no worker offers one (naming the option that gives it).
    """
    info = call_with_timeout(lambda: session.client.scheduler_info(n_workers=-1), 10.0, "the workers' list")
    hosts = sorted({w.get("host") for w in info.get("workers", {}).values()
                    if (w.get("resources") or {}).get(TIMING_RESOURCE, 0) >= 1})
    if not hosts:
        raise UsageError("no Dask worker offers a timing slot; start one worker per host with "
                         f"`dask worker {session.target.text} --resources {TIMING_RESOURCE}=1`")
    return hosts


def work_chunks(req: Any) -> list[tuple]:
    """Return the request's work in chunks: shaped cases (``--shapes``) :data:`WINDOW_CASES`
    at a time, in the order asked, or else :func:`size_chunks`."""
    from fftgauge.harness.timing.runner import WINDOW_CASES

    cases = list(getattr(req, "shape_cases", ()) or ())
    if cases:
        return [tuple(cases[i:i + WINDOW_CASES]) for i in range(0, len(cases), WINDOW_CASES)]
    return size_chunks(req)


def chunk_request(req: Any, chunk: tuple) -> Any:
    """Return the sub-request that times one chunk: its shaped cases, or its sizes."""
    if getattr(req, "shape_cases", ()):
        return dataclasses.replace(req, shape_cases=chunk)
    return dataclasses.replace(req, sizes=chunk)


def chunk_cases_of(req: Any, chunk: tuple) -> list[Any]:
    """Return the cases of a chunk (shaped cases, or every kind, precision and norm of its sizes)."""
    if getattr(req, "shape_cases", ()):
        return list(chunk)
    return [Case(k, d, n, norm) for k in (req.kinds or KINDS) for d in req.dtypes for norm in req.norms
            for n in chunk]


def size_chunks(req: Any) -> list[tuple[int, ...]]:
    """Return the request's sizes in chunks of about ``WINDOW_CASES`` cases (every kind,
    precision and normalisation of a size in one chunk), in the order asked."""
    from fftgauge.harness.timing.runner import WINDOW_CASES

    per_size = len(req.kinds or KINDS) * len(req.dtypes) * len(req.norms)
    step = max(1, WINDOW_CASES // max(1, per_size))
    return [tuple(req.sizes[i:i + step]) for i in range(0, len(req.sizes), step)]


def timing_envelope(req: Any, backends: dict[str, Any], session: ClusterSession) -> dict[str, Any]:
    """Return the ``fftgauge-time/1`` envelope of a cluster run (rows empty; ``complete`` false)."""
    from fftgauge.harness.results import envelope
    from fftgauge.harness.timing.runner import TIME_SCHEMA

    return envelope(TIME_SCHEMA, req.seed, extra={
        "complete": False, "threads": req.threads, "pinned_cpus": None, "backends": backends,
        "request": {"kinds": list(req.kinds or KINDS), "dtypes": list(req.dtypes), "norms": list(req.norms),
                    "sizes": list(req.sizes), "samples": req.samples, "budget_seconds": req.budget_seconds,
                    "cold_cache": req.cold_cache, "rounds": req.rounds,
                    **({"shapes": [c.label() for c in req.shape_cases]} if getattr(req, "shape_cases", ()) else {})},
        "cluster": session.record(),
    })


def describe_backends(session: ClusterSession, req: Any) -> dict[str, Any]:
    """Return the backends' records (label -> record), described on a worker.

    Raises
    ------
    UsageError
        When a SPEC cannot be loaded there, or two SPECs share a label.
    """
    from fftgauge.backends.registry import require_unique_labels
    from fftgauge.harness.cluster.tasks import describe_spec

    kinds = [k for k in (req.kinds or KINDS) if k in KINDS] or ["fft"]  # shaped kinds: the record is the same
    fields = [(k, d, req.sizes[0] if req.sizes else 8, norm) for k in kinds for d in req.dtypes for norm in req.norms]
    futures = {spec: session.client.submit(describe_spec, spec, req, fields, False, pure=False) for spec in req.specs}
    try:
        claims = call_with_timeout(lambda: {s: futures[s].result() for s in req.specs}, 600.0,
                                   "the backends' descriptions")
    except (UsageError, ClusterLost):
        raise
    except Exception as exc:  # noqa: BLE001 - a failing task: the user's cluster
        raise UsageError(f"a backend could not describe itself on the cluster: {type(exc).__name__}: {exc}") from None
    require_unique_labels({spec: claims[spec].label for spec in req.specs})
    return {claims[s].label: claims[s].record(s) for s in req.specs}


def error_rows_for(req: Any, labels: list[str], chunk: tuple, host: str | None, text: str) -> list[dict]:
    """Return one ``error`` time row per backend and case of a chunk that failed, naming the host."""
    from fftgauge.harness.timing.runner import placeholder_row

    return [{**placeholder_row(label, case, req.threads, "error", text), "host": host or "unknown"}
            for label in labels for case in chunk_cases_of(req, chunk)]


def run_timing_on_cluster(req: Any, target: ClusterTarget, pin: str | None = None, json_path: str | None = None,
                          quiet: bool = True, doc: dict[str, Any] | None = None) -> dict[str, Any]:
    """Time every case of ``req`` on every host of the cluster that offers a timing slot;
    return the ``fftgauge-time/1`` document (``doc`` filled in place when given, so an
    interrupted run's caller holds what finished). ``pin`` is ``--pin-cpu``, applied on each host.

    Raises
    ------
    UsageError
        For an unreachable scheduler, workers lacking fftgauge or a backend, no timing slot,
        or a scheduler lost mid-run (what finished is written first, ``complete: false``).
    KeyboardInterrupt
        An interruption (``doc`` holds what finished, written with ``complete: false``).
    """
    from fftgauge.harness.cluster.session import cluster_session

    doc = {} if doc is None else doc
    with cluster_session(target, list(req.specs), req.threads, quiet=quiet) as session:
        return timing_in_session(session, req, pin, json_path, quiet, doc)


def timing_in_session(session: ClusterSession, req: Any, pin: str | None, json_path: str | None, quiet: bool,
                      doc: dict[str, Any]) -> dict[str, Any]:
    """:func:`run_timing_on_cluster`'s body, on an open session."""
    from fftgauge.harness.cluster.tasks import time_chunk
    from fftgauge.harness.execution.dispatch import Progress
    from fftgauge.harness.results import ResultsWriter
    from fftgauge.harness.shapes.fields import row_order_key

    hosts = timing_hosts(session)
    backends = describe_backends(session, req)
    labels = list(backends)
    doc.update(timing_envelope(req, backends, session))
    writer = ResultsWriter(json_path, doc)
    chunks = [(host, chunk) for chunk in work_chunks(req) for host in hosts]
    per_case = len(req.specs)
    progress = Progress(total=per_case * sum(len(chunk_cases_of(req, c)) for _, c in chunks), quiet=quiet,
                        desc="timing on the cluster")
    tally = Tally()
    pending = list(chunks)

    def make_next() -> Any:
        if not pending:
            return None
        host, chunk = pending.pop(0)
        sub = chunk_request(req, chunk)
        future = session.client.submit(time_chunk, sub, pin, f"fftgauge-timing-slot-{host}", workers=[host],
                                       allow_other_workers=False, resources={TIMING_RESOURCE: 1}, pure=False)
        tally.sent += 1
        return future, (host, chunk)

    def on_result(meta: Any, result: dict[str, Any]) -> None:
        writer.add(result["rows"])
        tally.done, tally.rows = tally.done + 1, tally.rows + len(result["rows"])
        progress.advance(per_case * len(chunk_cases_of(req, meta[1])), note=tally.note(len(chunks)))

    def on_failure(meta: Any, text: str, host: str | None) -> None:
        rows = error_rows_for(req, labels, meta[1], host or meta[0], text)
        writer.add(rows)
        tally.done, tally.rows, tally.failures = tally.done + 1, tally.rows + len(rows), tally.failures + 1
        progress.advance(per_case * len(chunk_cases_of(req, meta[1])), note=tally.note(len(chunks)))

    loop = TaskLoop(session, make_next, on_result, on_failure, capacity=2 * len(hosts),
                    pinned_host=lambda meta: meta[0])
    finished = False
    try:
        loop.run()
        finished = True
    except ClusterLost as exc:
        raise UsageError(f"{exc}: the rows that finished were written (\"complete\": false); rerun when the "
                         f"scheduler is back") from None
    finally:
        progress.close()
        position = {label: i for i, label in enumerate(labels)}
        host_pos = {h: i for i, h in enumerate(hosts)}
        doc["rows"].sort(key=lambda r: (host_pos.get(r.get("host"), len(hosts)), row_order_key(r),
                                        position.get(r["backend"], 0)))
        doc["cluster"]["tasks"] = tally.done
        writer.close(complete=finished)
    return doc


def hosts_of(doc: dict[str, Any]) -> list[str]:
    """Return the hosts of a timing document's rows, in order of first appearance."""
    return list(dict.fromkeys(r["host"] for r in doc.get("rows", []) if r.get("host")))


def per_host_summary(doc: dict[str, Any], summary: Any) -> str:
    """Return ``summary(doc)``; with several hosts, of the rows as :func:`rows_for_plot` gives
    them (each backend as ``BACKEND @ HOST``), so one table compares the hosts, the fastest
    marked across them."""
    if len(hosts_of(doc)) <= 1:
        return summary(doc)
    return summary({**doc, "rows": rows_for_plot(doc["rows"])})


def rows_for_plot(rows: list[dict[str, Any]]) -> list[dict[str, Any]]:
    """Return rows for the time plot: with several hosts, each backend as ``BACKEND @ HOST``
    (one line per host); with one, the rows as they are."""
    hosts = {r.get("host") for r in rows if r.get("host")}
    if len(hosts) <= 1:
        return rows
    return [{**r, "backend": f"{r['backend']} @ {r.get('host')}"} for r in rows]
