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
"""

from __future__ import annotations

import math
import re
from dataclasses import dataclass
from typing import Sequence

from fftgauge.harness.cases import KINDS, NORMS, parse_choice_list
from fftgauge.harness.dft import machine_epsilon
from fftgauge.harness.errors import UsageError

#: Calls per plan assumed when the user does not say.
DEFAULT_CALLS_PER_PLAN = 1000
#: The precision a workload that names none is in.
DEFAULT_DTYPES = ("float64",)
#: The precisions a workload may name: the floating-point ones, whose accuracy the battery
#: states in eps (fixed-point cases are judged by SQNR, which a pick does not weigh yet).
PICK_DTYPES = ("float32", "float64", "longdouble")

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
class Workload:
    """What the user will run; validated by :func:`build_workload`, trusted afterwards."""

    sizes: tuple[int, ...]
    kinds: tuple[str, ...]
    dtypes: tuple[str, ...]
    norm: str = "backward"
    threads: int = 1
    calls_per_plan: int = DEFAULT_CALLS_PER_PLAN
    accuracy: AccuracyNeed | None = None

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
        return f"{sizes} {'/'.join(self.dtypes)} {'/'.join(self.kinds)}{norm} with {threads}"

    def as_dict(self) -> dict:
        """Return the workload as JSON-able values."""
        return {"sizes": list(self.sizes), "kinds": list(self.kinds), "dtypes": list(self.dtypes),
                "norm": self.norm, "threads": self.threads, "calls_per_plan": self.calls_per_plan,
                "accuracy": None if self.accuracy is None else self.accuracy.text}


def short_list(values: Sequence[int], most: int = 4) -> str:
    """Return ``values`` as ``a, b, c`` (the first ``most`` and a count of the rest)."""
    head = ", ".join(str(v) for v in values[:most])
    return head if len(values) <= most else f"{head} and {len(values) - most} more"


def build_workload(sizes: str | None, kinds: str | None = None, dtypes: str | None = None,
                   norm: str | None = None, threads: int | None = None, calls_per_plan: int | None = None,
                   accuracy: str | None = None) -> Workload:
    """Return the validated :class:`Workload` for these option values.

    ``sizes`` is required (the ``--sizes`` grammar); kinds default to ``fft``, precisions to
    float64, the norm to ``backward``, threads to 1, calls per plan to
    :data:`DEFAULT_CALLS_PER_PLAN`.

    Raises
    ------
    UsageError
        For missing or malformed sizes, an unknown kind, precision or norm, a thread count or
        call count below 1, or a malformed accuracy (the message names the value).
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
    return Workload(
        sizes=tuple(parse_sizes(sizes)),
        kinds=parse_choice_list(kinds, KINDS, "kind") or ("fft",),
        dtypes=parse_choice_list(dtypes, PICK_DTYPES, "dtype") or DEFAULT_DTYPES,
        norm=norms[0], threads=threads or 1,
        calls_per_plan=calls_per_plan or DEFAULT_CALLS_PER_PLAN,
        accuracy=None if accuracy is None else parse_accuracy(accuracy),
    )
