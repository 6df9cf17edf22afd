"""Output aliasing: a result the caller kept must not change on the next call.

A plain callable ``f(x) -> X`` (the contract's user function) and a
:class:`~fftgauge.backends.base.FunctionPlan` are functions of their input: each call's result
is the caller's to keep. One that returns its own internal output buffer changes the
caller's previous result on the next call; the battery names that ``output-aliased``
(a code of its own, not ``thread-unsafe``: the damage shows with one thread, and threads at
once only make it visible). A :class:`~fftgauge.backends.base.Plan` subclass may reuse an
output buffer (the adapter interface allows it: the engine copies what it keeps), unless it
says otherwise with a ``reuses_output = False`` attribute; a FunctionPlan may declare
``reuses_output = True``.

``repeatable`` runs :func:`kept_output_change` first; ``concurrent`` asks :func:`reuse_allowed`
before calling a shared-buffer failure thread-unsafety.
"""

from __future__ import annotations

from typing import Any

import numpy as np

from fftgauge.backends.base import FunctionPlan, Plan
from fftgauge.harness.errors import BackendFailure
from fftgauge.harness.battery.localise import located
from fftgauge.harness.execution.crash import exception_text


def reuse_allowed(plan: Plan) -> bool:
    """Return whether ``plan`` may return a buffer it reuses on the next call: its
    ``reuses_output`` attribute when it has one, else True for a Plan subclass and False for
    a :class:`~fftgauge.backends.base.FunctionPlan` (a plain function's result is the caller's)."""
    declared = getattr(plan, "reuses_output", None)
    if isinstance(declared, bool):
        return declared
    return not isinstance(plan, FunctionPlan)


def _changed(kept: np.ndarray, now: Any) -> int:
    """Return how many values of ``now`` (the array the first call returned, as it is now)
    differ from ``kept`` (its copy taken right after that call); NaN equals NaN."""
    now = np.asarray(now)
    if now.shape != kept.shape:
        return max(now.size, kept.size, 1)
    return int(np.count_nonzero(~((now == kept) | (np.isnan(now) & np.isnan(kept)))))


def kept_output_change(plan: Plan, x: np.ndarray, other: np.ndarray) -> str | None:
    """Return the account of an aliased output, or None when the result of ``plan.execute(x)``
    is unchanged by a following ``plan.execute(other)`` (or the plan may reuse its buffer,
    :func:`reuse_allowed`). Both calls get fresh copies of the inputs.

    Raises
    ------
    BackendFailure
        When the backend raises.
    """
    if reuse_allowed(plan):
        return None
    try:
        with np.errstate(all="ignore"):
            first = plan.execute(np.array(x, copy=True))
            if not isinstance(first, np.ndarray):
                return None
            kept = first.copy()
            second = plan.execute(np.array(other, copy=True))
    except Exception as exc:  # noqa: BLE001 - the row says what the backend raised
        raise BackendFailure(f"the backend raised {exception_text(exc)}") from None
    changed = _changed(kept, first)
    if not changed:
        return None
    same = isinstance(second, np.ndarray) and np.shares_memory(first, second)
    how = "the second call returned the same array" if same else "the array it returned was written to later"
    detail = (f"the result of one call changed when the function was called again with another input: {changed} of "
              f"{kept.size} values of the caller's kept result differ ({how}): the function returns its internal "
              f"output buffer; return a new array (or a copy) from each call")
    return located(f"a kept result ({changed} of {kept.size} values changed by the next call)",
                   "the function returns its internal output buffer (return a copy)", detail)
