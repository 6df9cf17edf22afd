"""Memory a shaped case needs, estimated before anything is allocated, and the refusal above it.

A shaped case holds, at once: the input, the backend's output, the ground truth (a
double-double pair of ``complex128`` arrays of the output's shape, computed through one
``clongdouble`` array of the full shape), and the copies the checks keep (a second input,
a second output, the error array, ...). :func:`case_bytes` adds these up;
:func:`check_memory` refuses a request whose largest case exceeds the memory this machine
has, with the figure, before a worker tries (and is killed for) the allocation.
"""

from __future__ import annotations

import math

import numpy as np

from fftgauge.harness.errors import UsageError
from fftgauge.harness.execution.limits import physical_memory_bytes
from fftgauge.harness.shapes.case import ShapeCase

__all__ = ["DEFAULT_COPIES", "case_bytes", "check_memory", "format_bytes"]

#: Input- or output-sized arrays the checks keep beside the input, the output and the ground
#: truth (a perturbed input and its output for linearity, a second run for determinism, the
#: error array, a layout copy).
DEFAULT_COPIES = 4


def case_bytes(case: ShapeCase, copies: int = DEFAULT_COPIES) -> int:
    """Return the estimated peak bytes of checking ``case``.

    Input and output (their own dtypes), the ground truth (``hi`` and ``lo``: two
    ``complex128`` arrays of the output's shape, plus the ``clongdouble`` working array of
    the full shape it is computed through), and ``copies`` more arrays as large as the larger
    of input and output.
    """
    inp = case.input_bytes()
    out = case.output_bytes()
    full = math.prod(case.shape)
    reference = 2 * math.prod(case.output_shape) * 16 + full * np.dtype(np.clongdouble).itemsize
    return inp + out + reference + copies * max(inp, out)


def format_bytes(count: int) -> str:
    """Return ``count`` bytes in words, to the nearest unit: ``"96 GiB"``, ``"512 MiB"``, ``"12 KiB"``."""
    for unit, size in (("GiB", 2**30), ("MiB", 2**20), ("KiB", 2**10)):
        if count >= size:
            return f"{round(count / size)} {unit}"
    return f"{count} bytes"


def check_memory(cases, copies: int = DEFAULT_COPIES, available_bytes: int | None = None) -> None:
    """Refuse the request when its largest case needs more memory than the machine has.

    ``available_bytes`` defaults to the memory this process may use (the physical memory, or
    the container's limit when smaller: :func:`~fftgauge.harness.execution.limits.physical_memory_bytes`).

    Raises
    ------
    UsageError
        Naming the case and the figures, e.g. ``"shape 1024x1024x1024 (fftn complex128) needs
        about 96 GiB; this machine has 23 GiB: choose smaller shapes"``.
    """
    cases = list(cases)
    if not cases:
        return
    have = physical_memory_bytes() if available_bytes is None else int(available_bytes)
    need, first = max((case_bytes(c, copies), -i) for i, c in enumerate(cases))
    if need > have:
        case = cases[-first]
        shape = "x".join(str(n) for n in case.shape)
        raise UsageError(f"shape {shape} ({case.kind} {case.input_dtype}) needs about {format_bytes(need)}; "
                         f"this machine has {format_bytes(have)}: choose smaller shapes")
