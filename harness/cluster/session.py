"""A run's hold on a Dask cluster: connect (or start ``local:N``), check every worker, measure
the per-task overhead, and close everything again, every wait with a timeout.

dask is imported here and in the other modules of this package only; the command modules
import this package only when ``--cluster`` is given.
"""

from __future__ import annotations

import contextlib
import logging
import statistics
import sys
import threading
import time
from dataclasses import dataclass, field
from typing import Any, Callable, Iterator

from fftgauge import __version__
from fftgauge.harness.cluster.target import ClusterTarget
from fftgauge.harness.errors import UsageError

#: Seconds to reach a scheduler (and a LocalCluster's workers to come up).
CONNECT_TIMEOUT_SECONDS = 10.0
#: Seconds the start-up probe of every worker may take.
PROBE_TIMEOUT_SECONDS = 180.0
#: Seconds the release of the workers' processes, and the closing of client and cluster, may take.
CLOSE_TIMEOUT_SECONDS = 20.0
#: No-op tasks whose round trips give the per-task overhead (the median is kept).
OVERHEAD_PROBES = 7

INSTALL_HINT = "install the same fftgauge and the backends' libraries on every worker (docs/cluster.md)"


class ClusterLost(Exception):
    """The scheduler went away (or stopped answering) during a run."""


@dataclass
class ClusterSession:
    """A connected client, with what the start-up learned: ``hosts`` (host -> fingerprint),
    ``workers`` (worker address -> host), ``overhead_seconds`` (median round trip of an
    empty task), ``dashboard`` (address, or None) and ``address`` (the scheduler's)."""

    client: Any
    target: ClusterTarget
    address: str
    dashboard: str | None = None
    workers: dict[str, str] = field(default_factory=dict)
    hosts: dict[str, dict] = field(default_factory=dict)
    overhead_seconds: float = 0.0

    def record(self) -> dict[str, Any]:
        """Return the envelope's ``cluster`` field: scheduler, workers per host, fingerprints, overhead."""
        per_host: dict[str, int] = {}
        for host in self.workers.values():
            per_host[host] = per_host.get(host, 0) + 1
        return {"scheduler": self.target.text, "workers": len(self.workers), "workers_per_host": per_host,
                "hosts": self.hosts, "task_overhead_seconds": self.overhead_seconds}

    def alive(self) -> bool:
        """Return True while the client is connected to the scheduler."""
        return getattr(self.client, "status", "closed") == "running"


def call_with_timeout(func: Callable[[], Any], seconds: float, what: str) -> Any:
    """Return ``func()`` run in a helper thread, waiting at most ``seconds``.

    Raises
    ------
    ClusterLost
        When it did not return in time (the thread is left to end by itself: a daemon).
    BaseException
        Whatever ``func`` raised.
    """
    box: dict[str, Any] = {}

    def target() -> None:
        try:
            box["value"] = func()
        except BaseException as exc:  # noqa: BLE001 - raised again below
            box["error"] = exc

    thread = threading.Thread(target=target, name="fftgauge-cluster-call", daemon=True)
    thread.start()
    thread.join(seconds)
    if thread.is_alive():
        raise ClusterLost(f"{what} got no answer within {seconds:g} s")
    if "error" in box:
        raise box["error"]
    return box.get("value")


def start_local_cluster(processes: int) -> Any:
    """Return a started ``LocalCluster`` of ``processes`` one-thread worker processes, each
    with one timing slot, a dashboard on a free port, a lost worker's task retried once.

    Raises
    ------
    UsageError
        When the processes do not come up within :data:`CONNECT_TIMEOUT_SECONDS` per process.
    """
    import dask
    from distributed import LocalCluster

    try:
        with dask.config.set({"distributed.scheduler.allowed-failures": 1}):
            return LocalCluster(n_workers=processes, threads_per_worker=1, processes=True,
                                resources={"timing": 1}, dashboard_address=":0", silence_logs=logging.ERROR,
                                host="127.0.0.1")
    except Exception as exc:  # noqa: BLE001 - any failure to start is the user's environment
        raise UsageError(f"--cluster local:{processes}: the local cluster did not start ({type(exc).__name__}: "
                         f"{exc})") from None


def connect(target: ClusterTarget, cluster: Any = None) -> Any:
    """Return a Client connected to ``target`` (or to ``cluster``, a started LocalCluster).

    Raises
    ------
    UsageError
        When the scheduler cannot be reached within :data:`CONNECT_TIMEOUT_SECONDS`.
    """
    from distributed import Client

    address = cluster.scheduler_address if cluster is not None else target.address
    try:
        return Client(address, timeout=CONNECT_TIMEOUT_SECONDS, set_as_default=False)
    except (OSError, TimeoutError) as exc:
        raise UsageError(f"cannot reach the Dask scheduler at {target.text} within {CONNECT_TIMEOUT_SECONDS:g} s "
                         f"({type(exc).__name__}); start one with `dask scheduler` and workers with "
                         f"`dask worker {target.address or 'tcp://HOST:8786'}`, or check the address") from None


def worker_problems(answers: dict[str, Any], workers: dict[str, str]) -> list[str]:
    """Return one phrase per worker that lacks something (fftgauge, its version, a backend's
    library), from the probe's answers (worker address -> :func:`~.tasks.probe_worker`'s
    dict, or the exception the worker raised); empty when every worker has everything."""
    problems = []
    for address, answer in sorted(answers.items()):
        where = f"host {workers.get(address, address)} (worker {address})"
        if isinstance(answer, BaseException):
            what = str(answer) if type(answer) is Exception else f"{type(answer).__name__}: {answer}"
            problems.append(f"{where} cannot run fftgauge ({what}); install fftgauge {__version__} there")
            continue
        if answer.get("fftgauge") != __version__:
            problems.append(f"{where} has fftgauge {answer.get('fftgauge')}, this machine {__version__}")
        for spec, why in sorted(answer.get("missing", {}).items()):
            problems.append(f"{where} cannot load backend {spec!r}: {why}")
    return problems


def probe_workers(client: Any, specs: list[str], threads: int | None) -> tuple[dict[str, str], dict[str, dict]]:
    """Run the probe on every worker; return (worker address -> host, host -> fingerprint).

    Raises
    ------
    UsageError
        When the cluster has no worker, or a worker lacks fftgauge (or its version) or a
        backend's library: one line naming each host and what it lacks.
    """
    from fftgauge.harness.cluster.tasks import probe_worker

    answers = call_with_timeout(lambda: client.run(probe_worker, specs, threads, on_error="return"),
                                PROBE_TIMEOUT_SECONDS, "the check of the workers")
    if not answers:
        raise UsageError("the Dask cluster has no worker; start one with `dask worker SCHEDULER-ADDRESS "
                         "--resources timing=1`")
    workers = {addr: (a["host"] if isinstance(a, dict) else _address_host(addr)) for addr, a in answers.items()}
    problems = worker_problems(answers, workers)
    if problems:
        raise UsageError("; ".join(problems) + f"; {INSTALL_HINT}")
    hosts = {a["host"]: a["machine"] for a in answers.values()}
    return workers, hosts


def _address_host(address: str) -> str:
    from fftgauge.harness.cluster.tasks import host_of

    return host_of(address)


def measure_overhead(client: Any, probes: int = OVERHEAD_PROBES) -> float:
    """Return the median seconds of an empty task's round trip (submit to result), one after
    another: what each task costs beyond its work (scheduling and transfer)."""
    from fftgauge.harness.cluster.tasks import noop

    seconds = []
    for i in range(probes):
        started = time.perf_counter()
        call_with_timeout(lambda: client.submit(noop, i, pure=False).result(timeout=CONNECT_TIMEOUT_SECONDS),
                          CONNECT_TIMEOUT_SECONDS * 2, "an empty task")
        seconds.append(time.perf_counter() - started)
    return statistics.median(seconds)


def dashboard_address(client: Any) -> str | None:
    """Return the scheduler's dashboard address, or None when it serves none (no bokeh)."""
    try:
        services = client.scheduler_info().get("services", {})
    except Exception:  # noqa: BLE001 - only informative
        return None
    if "dashboard" not in services:
        return None
    return client.dashboard_link


def release(client: Any) -> None:
    """Close the worker processes every Dask worker keeps (:func:`~.tasks.release_workers`),
    waiting at most :data:`CLOSE_TIMEOUT_SECONDS`; a scheduler already gone is no error."""
    from fftgauge.harness.cluster.tasks import release_workers

    with contextlib.suppress(Exception):
        call_with_timeout(lambda: client.run(release_workers, on_error="ignore"), CLOSE_TIMEOUT_SECONDS,
                          "the release of the workers' processes")


@contextlib.contextmanager
def cluster_session(target: ClusterTarget, specs: list[str], threads: int | None = None,
                    quiet: bool = False, probe: bool = True) -> Iterator[ClusterSession]:
    """Connect to ``target`` (starting ``local:N``), check the workers (``probe``), print the
    dashboard address (unless ``quiet``), yield the :class:`ClusterSession`; on leaving,
    release the workers' processes and close the client (and the local cluster).

    Raises
    ------
    UsageError
        For an unreachable scheduler, a cluster without workers, workers lacking fftgauge
        or a backend's library (:func:`probe_workers`), or a :class:`ClusterLost` (a wait
        that ran out) raised in the block.
    """
    quieted = quiet_dask_logs()
    cluster = start_local_cluster(target.local_processes) if target.is_local else None
    client = None
    try:
        client = connect(target, cluster)
        session = ClusterSession(client=client, target=target, address=client.scheduler.address)
        if probe:
            session.workers, session.hosts = probe_workers(client, list(specs), threads)
        session.overhead_seconds = measure_overhead(client)
        session.dashboard = dashboard_address(client)
        if not quiet:
            board = session.dashboard or "none (the scheduler has no bokeh)"
            print(f"cluster {target.text}: {len(session.workers)} worker(s) on {len(set(session.workers.values()))} "
                  f"host(s); dashboard {board}", file=sys.stderr)
        yield session
    except ClusterLost as exc:  # a wait that ran out: the cluster stopped answering
        raise UsageError(f"{exc} (cluster {target.text}); check the scheduler and its workers") from None
    finally:
        if client is not None:
            release(client)
            with contextlib.suppress(Exception):
                call_with_timeout(lambda: client.close(timeout=CLOSE_TIMEOUT_SECONDS), CLOSE_TIMEOUT_SECONDS * 2,
                                  "closing the client")
        if cluster is not None:
            with contextlib.suppress(Exception):
                call_with_timeout(lambda: cluster.close(timeout=CLOSE_TIMEOUT_SECONDS), CLOSE_TIMEOUT_SECONDS * 2,
                                  "closing the local cluster")
        for logger, level in quieted.items():
            logger.setLevel(level)


#: The loggers of dask that speak to the terminal during a run (their messages become fftgauge's one line).
DASK_LOGGERS = ("distributed", "distributed.client", "distributed.scheduler", "distributed.worker",
                "distributed.nanny", "distributed.core", "distributed.comm", "distributed.batched")


def quiet_dask_logs() -> dict[logging.Logger, int]:
    """Raise dask's client-side loggers to CRITICAL (what goes wrong is said in fftgauge's own
    words); return logger -> the level to put back. Imports distributed first: its import
    sets the levels from dask's configuration."""
    import distributed  # noqa: F401

    before = {}
    for name in DASK_LOGGERS:
        logger = logging.getLogger(name)
        before[logger] = logger.level
        logger.setLevel(logging.CRITICAL)
    return before
