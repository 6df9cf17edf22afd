"""The workload ``fftgauge pick`` chooses a library for, and the accuracy it needs.

A :class:`Workload` is what the user will run: sizes, kinds, precisions, one norm, a thread
budget, how many calls each plan serves, and optionally the accuracy needed. It is
validated once, here (:func:`build_workload`); every problem is a
:class:`~fftgauge.harness.errors.UsageError` naming the bad value.

Accuracy (``--accuracy``) is the largest relative rms error accepted, in one of two units:

- ``eps`` (the default unit): machine epsilon of the transform's precision, ``8`` or
  ``8eps`` (the battery's ``eps_units``);
- ``dB``: a signal-to-error ratio, ``120dB`` meaning a relative rms error of at most
  10^(-120/20) = 1e-6 (20 log10 of an amplitude ratio); ``-120dB`` (the error level
  itself) means the same. It is turned into eps units per precision.

Fixed-point precisions (``q15``, ``q31``) are judged by SQNR instead (``--sqnr``): the least
signal-to-quantisation-noise ratio in dB the backend must reach on every fixed-point case of
the workload, measured by the battery's ``sqnr`` check on complex noise whose peak is at the
stated input level (``--sqnr-level``, dBFS, one of the levels that check measures; default
0 dBFS, full scale). A requirement of S dB is met at a case when the measured SQNR is at
least S; the shortfall S - SQNR is reported when it is not. For scale: an ideal b-bit
quantiser reaches 6.02 b + 1.76 dB on a full-scale sine (98.1 dB for Q15's 16 bits).
"""

from __future__ import annotations

import math
import re
from dataclasses import dataclass
from typing import Sequence

from fftgauge.harness.cases import FIXED_DTYPES, KINDS, NORMS, parse_choice_list
from fftgauge.harness.dft import machine_epsilon
from fftgauge.harness.errors import UsageError
from fftgauge.harness.fixed.signals import LEVELS_DBFS

#: Calls per plan assumed when the user does not say.
DEFAULT_CALLS_PER_PLAN = 1000
#: The precision a workload that names none is in.
DEFAULT_DTYPES = ("float64",)
#: The precisions a workload may name: the floating-point ones, whose accuracy the battery
#: states in eps, and the fixed-point ones, judged by SQNR (``--sqnr``).
PICK_DTYPES = ("float32", "float64", "longdouble") + FIXED_DTYPES
#: The input levels (dBFS) at which a pick can hold a fixed-point backend to an SQNR: those
#: the battery's ``sqnr`` check measures.
SQNR_LEVELS_DBFS = tuple(float(v) for v in LEVELS_DBFS)
#: The level an SQNR requirement is held at when the user names none (full scale).
DEFAULT_SQNR_LEVEL_DBFS = 0.0

_NUMBER = r"[-+]?(\d+(\.\d*)?|\.\d+)([eE][-+]?\d+)?"
_SQNR = re.compile(rf"^\s*(?P<value>{_NUMBER})\s*(db)?\s*$", re.I)
_LEVEL = re.compile(rf"^\s*(?P<value>{_NUMBER})\s*(dbfs)?\s*$", re.I)
_ACCURACY = re.compile(r"^\s*(?P<value>[-+]?(\d+(\.\d*)?|\.\d+)([eE][-+]?\d+)?)\s*(?P<unit>eps|db)?\s*$", re.I)


@dataclass(frozen=True)
class AccuracyNeed:
    """The largest relative rms error accepted: ``eps_units`` (eps of the precision) or
    ``relative`` (a plain ratio, from dB); exactly one is set. ``text`` is as the user wrote it."""

    text: str
    eps_units: float | None = None
    relative: float | None = None

    def limit_eps(self, dtype: str) -> float:
        """Return the need in eps units of ``dtype``."""
        if self.eps_units is not None:
            return self.eps_units
        return self.relative / machine_epsilon(dtype)


def parse_accuracy(text: str) -> AccuracyNeed:
    """Return the :class:`AccuracyNeed` of an ``--accuracy`` value (``8``, ``8eps``, ``120dB``, ``-120dB``).

    Raises
    ------
    UsageError
        For anything else, a non-positive eps count, or 0 dB.
    """
    m = _ACCURACY.match(str(text))
    if not m:
        raise UsageError(f"--accuracy takes eps units (8, 8eps) or decibels (120dB), got {text!r}")
    value = float(m.group("value"))
    if (m.group("unit") or "eps").lower() == "db":
        if value == 0 or not math.isfinite(value):
            raise UsageError(f"--accuracy in dB must be a non-zero signal-to-error ratio such as 120dB, got {text!r}")
        return AccuracyNeed(str(text).strip(), relative=10.0 ** (-abs(value) / 20.0))
    if not value > 0 or not math.isfinite(value):
        raise UsageError(f"--accuracy in eps units must be positive, got {text!r}")
    return AccuracyNeed(str(text).strip(), eps_units=value)


@dataclass(frozen=True)
class SqnrNeed:
    """The least SQNR (dB) a backend must reach on every fixed-point case, on noise whose
    peak is at ``level_dbfs``; ``text`` is the requirement as the user wrote it."""

    text: str
    db: float
    level_dbfs: float = DEFAULT_SQNR_LEVEL_DBFS

    @property
    def level_key(self) -> str:
        """Return the level as the battery's ``noise_sqnr_db`` keys it (``"0"``, ``"-6"``)."""
        return f"{self.level_dbfs:g}"

    def phrase(self) -> str:
        """Return the requirement in words: ``SQNR of at least 60 dB at 0 dBFS``."""
        return f"SQNR of at least {self.db:g} dB at {self.level_dbfs:g} dBFS"


def parse_sqnr(text: str, level: str | None = None) -> SqnrNeed:
    """Return the :class:`SqnrNeed` of an ``--sqnr`` value (``60``, ``60dB``) and an optional
    ``--sqnr-level`` (``-6``, ``-6dBFS``; default :data:`DEFAULT_SQNR_LEVEL_DBFS`).

    Raises
    ------
    UsageError
        For a value that is not a number, not finite or not positive, or a level that is not
        one of :data:`SQNR_LEVELS_DBFS`.
    """
    m = _SQNR.match(str(text))
    if not m:
        raise UsageError(f"--sqnr takes the least SQNR in dB a fixed-point backend must reach (e.g. 60 or 60dB), "
                         f"got {text!r}")
    value = float(m.group("value"))
    if not math.isfinite(value) or not value > 0:
        raise UsageError(f"--sqnr must be a positive number of dB (e.g. 60), got {text!r}")
    level_dbfs = DEFAULT_SQNR_LEVEL_DBFS
    if level is not None:
        lm = _LEVEL.match(str(level))
        level_dbfs = float(lm.group("value")) if lm else math.nan
        if level_dbfs not in SQNR_LEVELS_DBFS:
            raise UsageError(f"--sqnr-level takes one of the levels the sqnr check measures "
                             f"({', '.join(f'{v:g}' for v in SQNR_LEVELS_DBFS)} dBFS), got {level!r}")
    return SqnrNeed(str(text).strip(), value, level_dbfs)


@dataclass(frozen=True)
class Workload:
    """What the user will run; validated by :func:`build_workload`, trusted afterwards."""

    sizes: tuple[int, ...]
    kinds: tuple[str, ...]
    dtypes: tuple[str, ...]
    norm: str = "backward"
    threads: int = 1
    calls_per_plan: int = DEFAULT_CALLS_PER_PLAN
    accuracy: AccuracyNeed | None = None
    sqnr: SqnrNeed | None = None

    @property
    def fixed_dtypes(self) -> tuple[str, ...]:
        """The workload's fixed-point precisions (those judged by SQNR)."""
        return tuple(d for d in self.dtypes if d in FIXED_DTYPES)

    @property
    def case_count(self) -> int:
        """Number of (kind, precision, size) cases."""
        return len(self.sizes) * len(self.kinds) * len(self.dtypes)

    def phrase(self) -> str:
        """Return the workload in words, e.g. ``4096-point float32 rfft with 1 thread``."""
        sizes = (f"{self.sizes[0]}-point" if len(self.sizes) == 1
                 else f"{len(self.sizes)} sizes ({short_list(self.sizes)})")
        threads = f"{self.threads} thread" + ("" if self.threads == 1 else "s")
        norm = "" if self.norm == "backward" else f", norm={self.norm}"
        need = "" if self.sqnr is None else f", needing an {self.sqnr.phrase()}"
        return f"{sizes} {'/'.join(self.dtypes)} {'/'.join(self.kinds)}{norm} with {threads}{need}"

    def as_dict(self) -> dict:
        """Return the workload as JSON-able values."""
        return {"sizes": list(self.sizes), "kinds": list(self.kinds), "dtypes": list(self.dtypes),
                "norm": self.norm, "threads": self.threads, "calls_per_plan": self.calls_per_plan,
                "accuracy": None if self.accuracy is None else self.accuracy.text,
                "sqnr_db": None if self.sqnr is None else self.sqnr.db,
                "sqnr_level_dbfs": None if self.sqnr is None else self.sqnr.level_dbfs}


def short_list(values: Sequence[int], most: int = 4) -> str:
    """Return ``values`` as ``a, b, c`` (the first ``most`` and a count of the rest)."""
    head = ", ".join(str(v) for v in values[:most])
    return head if len(values) <= most else f"{head} and {len(values) - most} more"


def build_workload(sizes: str | None, kinds: str | None = None, dtypes: str | None = None,
                   norm: str | None = None, threads: int | None = None, calls_per_plan: int | None = None,
                   accuracy: str | None = None, sqnr: str | None = None, sqnr_level: str | None = None) -> Workload:
    """Return the validated :class:`Workload` for these option values.

    ``sizes`` is required (the ``--sizes`` grammar); kinds default to ``fft``, precisions to
    float64, the norm to ``backward``, threads to 1, calls per plan to
    :data:`DEFAULT_CALLS_PER_PLAN`.

    Raises
    ------
    UsageError
        For missing or malformed sizes, an unknown kind, precision or norm, a thread count or
        call count below 1, a malformed accuracy or SQNR (the message names the value), an
        SQNR for a workload without a fixed-point precision, an SQNR level without an SQNR,
        or an accuracy in eps for a workload of fixed-point precisions only.
    """
    from fftgauge.harness.sizes import parse_sizes

    if not sizes:
        raise UsageError("pick needs the workload's sizes: --sizes N[,N...] (e.g. --sizes 4096)")
    if threads is not None and threads < 1:
        raise UsageError(f"--threads must be a positive integer, got {threads}")
    if calls_per_plan is not None and calls_per_plan < 1:
        raise UsageError(f"--calls-per-plan must be a positive integer (calls each plan serves), got {calls_per_plan}")
    norms = parse_choice_list(norm, NORMS, "norm") or ("backward",)
    if len(norms) != 1:
        raise UsageError(f"--norm takes one of {', '.join(NORMS)}, got {norm!r}")
    chosen = parse_choice_list(dtypes, PICK_DTYPES, "dtype") or DEFAULT_DTYPES
    need = None if sqnr is None else parse_sqnr(sqnr, sqnr_level)
    fixed = [d for d in chosen if d in FIXED_DTYPES]
    if need is not None and not fixed:
        raise UsageError(f"--sqnr applies to fixed-point precisions (--dtypes q15 or q31); the workload's are "
                         f"{', '.join(chosen)}: use --accuracy for floating point")
    if sqnr_level is not None and need is None:
        raise UsageError("--sqnr-level says at which input level the --sqnr requirement holds: give --sqnr too")
    if accuracy is not None and len(fixed) == len(chosen):
        raise UsageError(f"--accuracy applies to floating-point precisions; {', '.join(chosen)} "
                         "is judged by SQNR: use --sqnr DB")
    return Workload(
        sizes=tuple(parse_sizes(sizes)),
        kinds=parse_choice_list(kinds, KINDS, "kind") or ("fft",),
        dtypes=chosen,
        norm=norms[0], threads=threads or 1,
        calls_per_plan=calls_per_plan or DEFAULT_CALLS_PER_PLAN,
        accuracy=None if accuracy is None else parse_accuracy(accuracy),
        sqnr=need,
    )
