"""Seeded random inputs of shaped cases for the shapes tests (not ground truth: just data)."""

from __future__ import annotations

import numpy as np

from fftgauge.harness.shapes.case import SHAPE_KINDS, LAYOUTS, ShapeCase


def shaped_signal(case: ShapeCase, seed: int = 0) -> np.ndarray:
    """Return a seeded standard-normal input of the case's input shape and dtype, C order.

    Complex inputs have non-zero imaginary parts everywhere (for the real inverse kinds the
    DC and Nyquist ones must be ignored).
    """
    rng = np.random.default_rng([seed, SHAPE_KINDS.index(case.kind), *case.shape, len(case.axes),
                                 *(a % len(case.shape) for a in case.axes), LAYOUTS.index(case.layout)])
    re = rng.standard_normal(case.input_shape)
    if case.base_kind == "rfft":
        return re.astype(case.input_dtype)
    return (re + 1j * rng.standard_normal(case.input_shape)).astype(case.input_dtype)
