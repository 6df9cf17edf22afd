"""What the battery and the timing runner share when they hand cases to worker processes:
asking a backend which cases it claims, and the progress bar."""

from __future__ import annotations

import threading
from dataclasses import dataclass, field
from typing import Any

from fftgauge.harness.execution import jobs
from fftgauge.harness.cases import Case
from fftgauge.harness.errors import BackendFailure, UsageError


def describe_cases(worker: Any, spec: str, cases: list[Case], max_n_pure_python: int | None,
                   timeout_seconds: float) -> Any:
    """Ask a backend's worker for its description and which of ``cases`` it claims.

    Returns the :class:`~fftgauge.backends.claims.BackendClaims` of :func:`jobs.backend_claims`
    (``label``, ``description``, ``reasons``).

    Raises
    ------
    UsageError
        When the SPEC cannot be loaded, or the backend fails while describing itself.
    """
    fields = [(c.kind, c.dtype, c.n, c.norm) for c in cases]
    try:
        return worker.call(jobs.backend_claims, fields, max_n_pure_python,
                           timeout_seconds=timeout_seconds)
    except BackendFailure as exc:
        raise UsageError(f"backend {spec!r} failed while describing itself: {exc}") from None


@dataclass
class Progress:
    """Thread-safe progress counter that drives a tqdm bar (or nothing when quiet)."""

    total: int
    quiet: bool
    desc: str = "checking"
    _bar: Any = field(default=None, init=False)
    _lock: threading.Lock = field(default_factory=threading.Lock, init=False)

    def __post_init__(self) -> None:
        if not self.quiet:
            from tqdm import tqdm
            self._bar = tqdm(total=self.total, unit="case", desc=self.desc, leave=False, dynamic_ncols=True)

    def advance(self, k: int = 1, note: str | None = None) -> None:
        if self._bar is not None:
            with self._lock:
                self._bar.update(k)
                if note:
                    self._bar.set_postfix_str(note, refresh=False)

    def close(self) -> None:
        if self._bar is not None:
            self._bar.close()
