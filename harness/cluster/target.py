"""The ``--cluster`` value: a Dask scheduler's address, or ``local:N`` for a cluster of N
processes on this machine that fftgauge starts and closes. Parsed at the boundary, without
importing dask (a wrong value is an exit-2 error before any work)."""

from __future__ import annotations

import re
from dataclasses import dataclass
from typing import Any

from fftgauge.harness.errors import UsageError

#: The address schemes of Dask's communication layer that fftgauge accepts.
SCHEMES = ("tcp", "tls", "ws", "wss", "ucx")
#: The most processes ``local:N`` starts.
MAX_LOCAL_PROCESSES = 512

_ADDRESS = re.compile(r"^(?:(?P<scheme>[a-z]+)://)?(?P<host>\[[0-9A-Fa-f:.]+\]|[A-Za-z0-9_.\-]+):(?P<port>\d{1,5})$")
_LOCAL = re.compile(r"^local:(?P<count>\d+)$")

HOW_TO = ("give a scheduler's address (tcp://HOST:8786, from `dask scheduler`) or local:N for N processes "
          "on this machine")


@dataclass(frozen=True)
class ClusterTarget:
    """Where the work goes: ``address`` of a running scheduler, or ``local_processes`` > 0
    for a LocalCluster that fftgauge starts (``address`` None then)."""

    text: str
    address: str | None = None
    local_processes: int = 0

    @property
    def is_local(self) -> bool:
        """True for ``local:N`` (fftgauge starts and closes the cluster)."""
        return self.local_processes > 0


def parse_cluster(text: str | None) -> ClusterTarget | None:
    """Return the :class:`ClusterTarget` of a ``--cluster`` value, or None when not given.

    Accepted: ``local:N`` (1 <= N <= :data:`MAX_LOCAL_PROCESSES`), ``SCHEME://HOST:PORT``
    with a scheme of :data:`SCHEMES`, and ``HOST:PORT`` (taken as ``tcp://HOST:PORT``).

    Raises
    ------
    UsageError
        For anything else, naming the value and what is accepted.
    """
    if text is None:
        return None
    value = text.strip()
    local = _LOCAL.match(value)
    if local:
        count = int(local["count"])
        if not 1 <= count <= MAX_LOCAL_PROCESSES:
            raise UsageError(f"--cluster {text!r}: local:N takes 1 <= N <= {MAX_LOCAL_PROCESSES}")
        return ClusterTarget(text=value, local_processes=count)
    match = _ADDRESS.match(value)
    if not match:
        raise UsageError(f"--cluster {text!r} is not an address; {HOW_TO}")
    scheme = match["scheme"] or "tcp"
    if scheme not in SCHEMES:
        raise UsageError(f"--cluster {text!r}: unknown scheme {scheme!r} (one of {', '.join(SCHEMES)}); {HOW_TO}")
    port = int(match["port"])
    if not 1 <= port <= 65535:
        raise UsageError(f"--cluster {text!r}: port {port} is outside 1..65535; {HOW_TO}")
    return ClusterTarget(text=value, address=f"{scheme}://{match['host']}:{port}")


def add_cluster_option(parser: Any, what: str) -> None:
    """Add ``--cluster ADDRESS|local:N`` to a command's ``parser`` (``what``: the work it sends)."""
    parser.add_argument("--cluster", metavar="ADDRESS|local:N",
                        help=f"run {what} as Dask tasks: on the scheduler at ADDRESS (tcp://HOST:8786; its workers "
                             f"need this fftgauge and the backends' libraries, see `fftgauge backends`), or on "
                             f"local:N, N processes on this machine started and closed by fftgauge "
                             f"(needs the extra fftgauge[cluster])")


def cluster_from_args(args: Any) -> ClusterTarget | None:
    """Return the parsed ``--cluster`` of a command's arguments (None when not given), having
    checked that dask.distributed is installed, without importing it.

    Raises
    ------
    UsageError
        For a value that is not an address (:func:`parse_cluster`), or no dask.distributed.
    """
    import importlib.util

    target = parse_cluster(getattr(args, "cluster", None))
    if target is not None and importlib.util.find_spec("distributed") is None:
        raise UsageError("--cluster needs dask.distributed: pip install 'fftgauge[cluster]'")
    return target


def cluster_lines() -> list[str]:
    """Return what ``fftgauge backends`` says about ``--cluster``: whether dask.distributed is
    installed here (its version, read without importing it) and how to start a cluster."""
    import importlib.metadata

    from fftgauge import __version__

    try:
        here = f"dask.distributed {importlib.metadata.version('distributed')} is installed"
    except importlib.metadata.PackageNotFoundError:
        here = "dask.distributed is not installed (pip install 'fftgauge[cluster]')"
    return [f"cluster (--cluster on check, time, count): {here}; local:N needs nothing more.",
            "  on a cluster: `dask scheduler` on one machine (port 8786), then on every host "
            "`dask worker tcp://SCHEDULER:8786 --resources timing=1`;",
            f"  every worker needs fftgauge {__version__} and the libraries of the backends asked for "
            "(checked at start; docs/cluster.md)"]
