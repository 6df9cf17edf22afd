"""The error limit of a shaped case: the 1-D limit of each transformed axis, compounded.

The quantity is the one :func:`fftgauge.harness.battery.bounds.accuracy_limit` bounds for
1-D: the relative 2-norm error ``norm2(y - X) / norm2(X)`` (= relative rms error) over the
whole output array.

Why the per-axis limits add (Higham, Accuracy and Stability of Numerical Algorithms, 2nd ed.,
SIAM 2002, section 24.1, from memory: the FFT's error analysis there bounds a product of
sparse factors, each applied with a small relative 2-norm error, whose errors add to first
order; here it is applied with one factor per axis, the argument written out below and
measured in ``tests/test_shapes_bounds.py``): a separable transform of ``d`` axes computes
``y_j = F_j(y_{j-1})`` pass by pass, ``F_j`` the 1-D transform of every line along axis ``j``.

- One pass: each line's computed transform has relative 2-norm error at most ``b_j`` (the
  1-D limit of that axis's case, ``case.line_case(j)``), so, summing the squared line errors,
  the whole pass has ``norm2(err_j) <= b_j norm2(F_j(y_{j-1}))``. A batch (one axis) is this
  pass alone: its limit is the 1-D limit.
- Propagation: every complex pass is a multiple of a unitary map (``c_j`` times unitary on
  every line), so an error of relative size ``e`` in its input is still of relative size ``e``
  after it. ``rfftn`` runs its real pass first and complex passes on the half spectrum after
  it, so this holds exactly for it too.

Hence ``norm2(y_hat - X) / norm2(X) <= prod_j (1 + b_j) - 1 = sum_j b_j + O(b^2)``: to first
order the sum of the per-axis bounds, as the issue asks; the product form keeps it a bound.

One exception, said plainly: ``irfftn``'s last pass (the real inverse) is not a multiple of
an isometry of the half spectrum (its bins other than DC and Nyquist weigh twice in the real
output, and the imaginary parts of DC and Nyquist are ignored), so the relative error the
complex passes before it leave can grow by a bounded factor (at most about 2 for inputs
whose ignored parts are a small share; more at lengths 1 and 2 of the halved axis, where
they are half of the input). The limit does not charge that factor: the 1-D limits are
worst-case bounds that correct transforms stay one to two orders of magnitude below, and
``tests/test_shapes_bounds.py`` measures numpy, scipy and pyFFTW at 0.026 of this limit at
worst for ``irfftn``/``irfft`` float64 on ``@default`` (0.045 for any kind).
A library that scales once at the end instead of per axis rounds less, so the per-axis
scaling term each ``b_j`` carries (:func:`accuracy_limit`'s ``gamma_2``) only adds slack.
"""

from __future__ import annotations

import math

from fftgauge.harness.battery.bounds import accuracy_limit
from fftgauge.harness.shapes.case import ShapeCase

__all__ = ["axis_limits", "shaped_limit"]


def axis_limits(case: ShapeCase) -> tuple[float, ...]:
    """Return the 1-D limit of each transformed axis, in ``case.axes`` order.

    Each is :func:`~fftgauge.harness.battery.bounds.accuracy_limit` of
    ``case.line_case(i)``: the family's real kind along the halved (last listed) axis, the
    complex kind of the same direction along the others, the case's norm and precision.
    """
    return tuple(accuracy_limit(case.line_case(i)) for i in range(len(case.axes)))


def shaped_limit(case: ShapeCase) -> float:
    """Return the relative rms error above which a shaped case's ``accuracy`` check fails.

    ``prod_j (1 + b_j) - 1`` over the per-axis limits ``b_j`` of :func:`axis_limits` (their
    sum to first order; the derivation and its source are in this module's docstring).
    Returns ``inf`` when a per-axis limit is infinite.
    """
    limits = axis_limits(case)
    if any(math.isinf(b) for b in limits):
        return math.inf
    return math.expm1(sum(math.log1p(b) for b in limits))
