"""ducc0.fft (the C++ successor of pocketfft): ``c2c``, ``r2c`` and ``c2r`` with ``nthreads``.

ducc0 plans inside each call (and caches its plans), so there is no planning step to time
apart. It computes in float32, float64 and long double (its templates cover every real
type numpy has), and scales by the ``inorm`` code: 0 none, 1 by 1/sqrt(N), 2 by 1/N, which
this adapter takes from the case's norm (:func:`fftgauge.harness.dft.norm_factor`'s rule).

In place: with ``in_place=true`` a complex transform writes its output over its input
(``out=`` the input array) and a complex-to-real one may use its input as scratch
(``allow_overwriting_input``); a real-to-complex transform cannot (its output is longer
than its input) and stays out of place. The capabilities then say ``in_place``, so the
battery accepts a changed input. Timed calls of an in-place plan transform the previous
call's output: the arithmetic per call is the same, but with ``norm=backward`` the values
grow (fft) or shrink (ifft) by sqrt(N) per call, and after many calls they overflow or
reach subnormal numbers, which slow some processors down; time in-place plans with
``norm=ortho`` to keep the values' magnitude.
"""

from __future__ import annotations

import ducc0
import ducc0.fft

from fftgauge.backends.base import Backend, Capabilities, FunctionPlan, OptionSpec, Plan, ShapedFunctionPlan
from fftgauge.harness.cases import Case, norm_factor
from fftgauge.harness.shapes.case import SHAPE_KINDS, ShapeCase


def inorm_code(case: Case) -> int:
    """Return ducc0's ``inorm`` for the case: 0 (factor 1), 1 (1/sqrt(N)) or 2 (1/N).

    The factor is the array API standard's ``norm`` rule (:func:`norm_factor`); n = 1 has
    factor 1 under every norm, and code 0 then gives it.
    """
    factor = norm_factor(case.n, case.norm, case.is_inverse)
    if factor == 1.0:
        return 0
    return 1 if case.norm == "ortho" else 2


class Ducc0Backend(Backend):
    """ducc0.fft.c2c / r2c / c2r for fft, ifft, rfft and irfft.

    Options
    -------
    nthreads : int, default 1
        Threads ducc0 uses for one transform (its own ``nthreads`` argument).
    in_place : bool, default false
        Complex transforms overwrite their input with the output; irfft may use its input
        as scratch; rfft stays out of place.
    """

    name = "ducc0"
    description = "ducc0.fft (C++, successor of pocketfft), nthreads and in-place options"
    options = {
        "nthreads": OptionSpec(int, 1, "threads ducc0 uses for one transform", minimum=1),
        "in_place": OptionSpec(bool, False, "complex transforms write over their input (rfft stays out of place)"),
    }
    thread_option = "nthreads"

    @property
    def version(self) -> str:
        """ducc0's version string."""
        return str(ducc0.__version__)

    def capabilities(self) -> Capabilities:
        """Every kind and norm, any size, float32/float64/longdouble; in place when asked."""
        return Capabilities(dtypes=("float32", "float64", "longdouble"), thread_option="nthreads",
                            in_place=bool(self.opts["in_place"]), shaped_kinds=SHAPE_KINDS)

    def plan(self, case: Case) -> Plan:
        """Return a plan calling ``ducc0.fft.c2c``, ``r2c`` or ``c2r``; nothing to plan."""
        inorm, nthreads, in_place = inorm_code(case), self.opts["nthreads"], self.opts["in_place"]
        forward = not case.is_inverse
        fft = ducc0.fft
        if case.kind == "rfft":
            return FunctionPlan(case, lambda x: fft.r2c(x, forward=True, inorm=inorm, nthreads=nthreads))
        if case.kind == "irfft":
            n = case.n
            return FunctionPlan(case, lambda x: fft.c2r(x, lastsize=n, forward=False, inorm=inorm,
                                                        nthreads=nthreads, allow_overwriting_input=in_place))
        if in_place:
            return FunctionPlan(case, lambda x: fft.c2c(x, forward=forward, inorm=inorm, out=x, nthreads=nthreads))
        return FunctionPlan(case, lambda x: fft.c2c(x, forward=forward, inorm=inorm, nthreads=nthreads))

    def plan_shaped(self, case: ShapeCase) -> Plan:
        """Return a plan calling ``ducc0.fft.c2c``, ``r2c`` or ``c2r`` over the case's axes (r2c/c2r
        halve the last one listed, as numpy); always out of place; nothing to plan.

        ``inorm`` is taken from the norm's factor over N, the product of the transformed
        lengths (ducc0 divides by the square root of that product, or by the product).
        """
        axes, nthreads = case.axes, self.opts["nthreads"]
        factor = norm_factor(case.points, case.norm, case.is_inverse)
        inorm = 0 if factor == 1.0 else (1 if case.norm == "ortho" else 2)
        fft = ducc0.fft
        if case.base_kind == "rfft":
            return ShapedFunctionPlan(case, lambda x: fft.r2c(x, axes=axes, forward=True, inorm=inorm,
                                                              nthreads=nthreads))
        if case.base_kind == "irfft":
            last = case.lengths[-1]
            return ShapedFunctionPlan(case, lambda x: fft.c2r(x, axes=axes, lastsize=last, forward=False,
                                                              inorm=inorm, nthreads=nthreads))
        forward = not case.is_inverse
        return ShapedFunctionPlan(case, lambda x: fft.c2c(x, axes=axes, forward=forward, inorm=inorm,
                                                          nthreads=nthreads))
