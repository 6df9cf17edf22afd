"""Shaped cases of ``exec:`` backends: one version-2 request per call, the whole array on the wire.

A program that declares protocol version 2 in its hello (:class:`~fftgauge.backends.pipe_protocol.Hello`)
takes batched and N-D transforms: the request carries the array's shape and the axes to
transform (:func:`~fftgauge.backends.pipe_protocol.encode_shaped_transform`) and the array
itself in C order; the answer is the output array in C order. The input's layout cannot reach
another process: :meth:`ProgramShapedPlan.execute` writes it in C order onto the pipe (the
copy a non-C layout needs is part of the timed call, as the pipe transfer is).
"""

from __future__ import annotations

import math
import time
from typing import Any

import numpy as np

from fftgauge.backends.base import Plan
from fftgauge.backends.pipe_protocol import (PRECISION_BYTES, SHAPED_VERSION, ProgramTimeout,
                                             encode_shaped_transform)
from fftgauge.harness.shapes.case import ShapeCase, family_kind

__all__ = ["ProgramShapedPlan", "shaped_kinds_of", "shaped_reason"]


def shaped_kinds_of(hello: Any) -> tuple[str, ...]:
    """Return the shaped kinds a hello declares: each family's batched kind, and its ``n`` kind
    when the program takes transforms over two axes or more."""
    kinds = []
    for kind in hello.shaped_kinds:
        kinds.append(kind)
        if hello.max_rank >= 2:
            kinds.append(family_kind(kind, 2))
    return tuple(kinds)


def shaped_reason(hello: Any, case: ShapeCase) -> str | None:
    """Return why the program cannot take ``case`` beyond its claimed kinds (too many axes), or None."""
    if len(case.axes) > hello.max_rank:
        return (f"the program transforms at most {hello.max_rank} axes at once (its hello says so); "
                f"this case has {len(case.axes)}")
    return None


class ProgramShapedPlan(Plan):
    """Sends one shaped (version 2) request per :meth:`execute`; :attr:`last_self_seconds` and
    :attr:`last_round_trip_seconds` as :class:`~fftgauge.backends.external_program.ProgramPlan`'s."""

    def __init__(self, case: ShapeCase, connection: Any):
        super().__init__(case)  # type: ignore[arg-type]
        self._connection = connection
        self._wire_in = case.input_dtype.newbyteorder("<")
        self._wire_out = case.output_dtype.newbyteorder("<")
        out_values = math.prod(case.output_shape) * (1 if case.base_kind == "irfft" else 2)
        self._expected = out_values * PRECISION_BYTES[case.dtype]
        self.last_self_seconds: float | None = None
        self.last_round_trip_seconds: float | None = None
        self.timed_out: ProgramTimeout | None = None

    def prepare(self, x: np.ndarray) -> np.ndarray:
        """Return ``x`` with the wire dtype, keeping its layout (the C-order copy is part of the call)."""
        x = np.asarray(x)
        return x if x.dtype == self._wire_in else x.astype(self._wire_in, order="K")

    def execute(self, x: np.ndarray) -> np.ndarray:
        """Transform the whole array ``x`` in the program; return the output (native byte order).

        Raises
        ------
        ProgramFailure
            When the program fails the request in any way.
        ValueError
            When ``x`` does not have the case's input shape.
        """
        case = self.case
        if self.timed_out is not None:
            raise ProgramTimeout(f"not sent: this plan's program already timed out ({self.timed_out})")
        data = np.ascontiguousarray(x, dtype=self._wire_in)
        if data.shape != case.input_shape:
            raise ValueError(f"{case.label()} takes an array of shape {case.input_shape}, got {data.shape}")
        header = encode_shaped_transform(case, data.nbytes)
        start = time.perf_counter_ns()
        try:
            response = self._connection.request(header, memoryview(data.view(np.uint8).reshape(-1)), self._expected,
                                                f"the request for {case.label()}", SHAPED_VERSION)
        except ProgramTimeout as exc:
            self.timed_out = exc
            raise
        self.last_round_trip_seconds = (time.perf_counter_ns() - start) * 1e-9
        self.last_self_seconds = None if response.elapsed_ns is None else response.elapsed_ns * 1e-9
        out = np.frombuffer(response.payload, dtype=self._wire_out).reshape(case.output_shape)
        return out if self._wire_out.isnative else out.astype(case.output_dtype)
