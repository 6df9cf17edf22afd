"""What the battery and the timing runner share when they hand cases to worker processes:
asking a backend which cases it claims, and the progress bar."""

from __future__ import annotations

import sys
import threading
import time
from dataclasses import dataclass, field
from typing import Any, Callable

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
    from fftgauge.harness.shapes.fields import case_fields

    fields = [case_fields(c) for c in cases]  # 1-D or shaped cases (fftgauge.harness.shapes.fields)
    try:
        return worker.call(jobs.backend_claims, fields, max_n_pure_python,
                           timeout_seconds=timeout_seconds)
    except BackendFailure as exc:
        raise UsageError(f"backend {spec!r} failed while describing itself: {exc}") from None


#: Seconds between two progress lines when standard error is not a terminal (a log file).
PROGRESS_LINE_SECONDS = 10.0


@dataclass
class Progress:
    """Thread-safe progress counter: a tqdm bar on a terminal; on anything else (a log file, a
    CI console) one plain line every :data:`PROGRESS_LINE_SECONDS` (a bar's carriage returns
    would fill the log); nothing when quiet. ``stream`` and ``clock`` are injectable (tests)."""

    total: int
    quiet: bool
    desc: str = "checking"
    stream: Any = None
    clock: Callable[[], float] = time.monotonic
    _bar: Any = field(default=None, init=False)
    _done: int = field(default=0, init=False)
    _started: float = field(default=0.0, init=False)
    _last_line: float = field(default=0.0, init=False)
    _lock: threading.Lock = field(default_factory=threading.Lock, init=False)

    def __post_init__(self) -> None:
        self.stream = self.stream if self.stream is not None else sys.stderr
        self._started = self._last_line = self.clock()
        if not self.quiet and _is_terminal(self.stream):
            from tqdm import tqdm
            self._bar = tqdm(total=self.total, unit="case", desc=self.desc, leave=False, dynamic_ncols=True,
                             file=self.stream)

    def advance(self, k: int = 1, note: str | None = None) -> None:
        """Count ``k`` more cases done (``note``: what was last done)."""
        if self.quiet:
            return
        with self._lock:
            self._done += k
            if self._bar is not None:
                self._bar.update(k)
                if note:
                    self._bar.set_postfix_str(note, refresh=False)
                return
            now = self.clock()
            if now - self._last_line >= PROGRESS_LINE_SECONDS:
                self._last_line = now
                share = 100.0 * self._done / self.total if self.total else 100.0
                print(f"{self.desc}: {self._done}/{self.total} cases ({share:.0f}%) after {now - self._started:.0f} s"
                      + (f"; last {note}" if note else ""), file=self.stream, flush=True)

    def close(self) -> None:
        """Remove the bar (a terminal's); plain lines stay."""
        if self._bar is not None:
            self._bar.close()


def _is_terminal(stream: Any) -> bool:
    try:
        return bool(stream.isatty())
    except (AttributeError, ValueError):
        return False
