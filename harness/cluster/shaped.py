"""The shaped battery (``--shapes``) on a Dask cluster: ``fftgauge check --shapes ... --cluster ...``.

The same cases, checks, rows and results file as
:func:`fftgauge.harness.shapes.battery.run_check_request`: the 1-D cases of ``--sizes`` first
(:func:`~.battery.battery_in_session`), then the shaped ones, in one session and one file.
Each backend describes its shaped cases on a Dask worker; its claimed cases then go out in
chunks of whole arrays (every kind, precision and layout of one shape and axes together,
largest input first, as a local lane takes them), sized by the rule of :mod:`.chunks`, each
run by :func:`~.tasks.run_shaped_chunk` in the isolated worker processes of a local run.
"""

from __future__ import annotations

import uuid
from typing import Any

from fftgauge.harness.cluster.battery import (DESCRIBE_TIMEOUT_SECONDS, BatteryFeed, ChunkMeta, battery_in_session,
                                              cluster_threads, drive_feed)
from fftgauge.harness.cluster.chunks import shape_groups
from fftgauge.harness.cluster.session import ClusterLost, ClusterSession, call_with_timeout
from fftgauge.harness.errors import UsageError


class ShapedFeed(BatteryFeed):
    """The shaped battery's tasks: per backend, chunks of whole arrays, largest input first."""

    def groups(self, indices: list[int]) -> Any:
        """Return the claimed case indices grouped by array (shape and axes), largest input first."""
        return shape_groups(indices, self.cases)

    def submit(self, spec: str, indices: list[int]) -> Any:
        """Return the future of the task that runs the shaped cases ``indices`` of ``spec``."""
        from fftgauge.harness.cluster.tasks import run_shaped_chunk

        claims = self.claims[spec]
        return self.session.client.submit(run_shaped_chunk, spec, claims.label,
                                          getattr(claims.capabilities, "conventions", None),
                                          [self.cases[i] for i in indices], self.req, self.check_names,
                                          self.stop_name, pure=False)

    def error_rows(self, meta: ChunkMeta, text: str, host: str | None) -> list[dict]:
        """Return an ``error`` row per check of every case of a chunk that failed, naming the host."""
        from fftgauge.harness.shapes.battery import case_row

        label = self.claims[meta.spec].label
        return [{**case_row(label, self.cases[i], "error", text, check=name), "host": host or "unknown"}
                for i in meta.indices for name in self.check_names]


def describe_shaped_on_cluster(session: ClusterSession, req: Any, cases: list[Any]) -> dict[str, Any]:
    """Return SPEC -> claims of the shaped cases, each backend described by a task.

    Raises
    ------
    UsageError
        When a backend cannot be loaded or fails to describe itself.
    ClusterLost
        When the descriptions took longer than :data:`~.battery.DESCRIBE_TIMEOUT_SECONDS`.
    """
    from fftgauge.harness.cluster.tasks import describe_shaped_spec

    futures = {spec: session.client.submit(describe_shaped_spec, spec, req, cases, pure=False) for spec in req.specs}
    try:
        return call_with_timeout(lambda: {spec: futures[spec].result() for spec in req.specs},
                                 DESCRIBE_TIMEOUT_SECONDS, "the backends' descriptions")
    except (UsageError, ClusterLost):
        raise
    except Exception as exc:  # noqa: BLE001 - a lost worker or a failing task: the user's cluster
        raise UsageError(f"a backend could not describe itself on the cluster: {type(exc).__name__}: {exc}") from None


def shaped_in_session(session: ClusterSession, req: Any, json_path: str | None, quiet: bool,
                      doc: dict[str, Any] | None = None) -> dict[str, Any]:
    """Run the shaped cases of ``req`` on an open session; return the ``fftgauge-check/1``
    document (``doc``, a 1-D run's document to add the rows to, or a new one): the envelope,
    skip rows and row order of :func:`fftgauge.harness.shapes.battery.run_shaped_battery`.

    Raises what :func:`~.battery.drive_feed` raises, and UsageError for a backend that does not describe itself.
    """
    from fftgauge.backends.registry import require_unique_labels
    from fftgauge.harness.results import ResultsWriter
    from fftgauge.harness.shapes.battery import case_row, shaped_check_names, shaped_envelope, sort_shaped_rows

    cases = list(req.shape_cases)
    names = shaped_check_names(req)
    claims = describe_shaped_on_cluster(session, req, cases)
    require_unique_labels({spec: claims[spec].label for spec in req.specs})
    doc = shaped_envelope(req, claims, names, doc)
    doc.setdefault("cluster", session.record())
    writer = ResultsWriter(json_path, doc)
    writer.add([case_row(claims[spec].label, c, "skip", reason)
                for spec in req.specs for c, reason in zip(cases, claims[spec].reasons) if reason is not None])
    feed = ShapedFeed(session, req, claims, cases, names, f"fftgauge-stop-{uuid.uuid4().hex}", cluster_threads(session))
    return drive_feed(session, feed, writer, doc, json_path, quiet, "checking shapes on the cluster",
                      lambda: sort_shaped_rows(doc, req, claims), "shaped_chunks")


def check_request_in_session(session: ClusterSession, req: Any, json_path: str | None, quiet: bool) -> dict[str, Any]:
    """Run what a ``check`` request asks on an open session, as
    :func:`fftgauge.harness.shapes.battery.run_check_request` does locally: the 1-D battery of
    its sizes, the shaped battery of its shapes, or both (1-D first, one document and file)."""
    from fftgauge.harness.shapes.battery import line_request

    if not req.shape_cases:
        return battery_in_session(session, req, json_path, quiet)
    doc = None
    line_req = line_request(req)
    if line_req is not None:
        doc = battery_in_session(session, line_req, None if json_path == "-" else json_path, quiet)
    return shaped_in_session(session, req, json_path, quiet, doc)
