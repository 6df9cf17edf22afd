"""What the battery and the timing runner share when they hand cases to worker processes:
asking a backend which cases it claims, and the progress bar."""

from __future__ import annotations

import threading
from dataclasses import dataclass, field
from typing import Any

from fftgauge.harness.cases import Case
from fftgauge.harness.errors import BackendFailure, UsageError


def backend_claims(backend: Any, case_fields: list[tuple], max_n_pure_python: int | None) -> dict[str, Any]:
    """Worker job: return the backend's description and, per case, why it is skipped (or None).

    ``max_n_pure_python`` caps the sizes given to backends that declare ``max_n`` (the
    pure-Python references), so a default run stays quick.
    """
    caps = backend.capabilities()
    reasons = []
    for fields in case_fields:
        case = Case(*fields)
        reason = backend.unsupported_reason(case)
        if reason is None and max_n_pure_python and caps.max_n is not None and case.n > max_n_pure_python:
            reason = (f"{backend.label} is a pure-Python reference: this run limits it to n <= "
                      f"{max_n_pure_python} (n = {case.n}); ask for it by its sizes to go further")
        reasons.append(reason)
    return {"label": backend.label, "describe": backend.describe(), "reasons": reasons}


def describe_cases(worker: Any, spec: str, cases: list[Case], max_n_pure_python: int | None,
                   timeout_seconds: float) -> dict[str, Any]:
    """Ask a backend's worker for its description and which of ``cases`` it claims.

    Returns the :func:`backend_claims` dict (``label``, ``describe``, ``reasons``).

    Raises
    ------
    UsageError
        When the SPEC cannot be loaded, or the backend fails while describing itself.
    """
    fields = [(c.kind, c.dtype, c.n, c.norm) for c in cases]
    try:
        return worker.call("fftgauge.harness.execution.dispatch:backend_claims", fields, max_n_pure_python,
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
