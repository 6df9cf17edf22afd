"""Every function that runs in a worker process, in one place.

A job is a function ``job(backend, *args)``: the worker calls it in its child process with
the adapter it loaded from the SPEC string. The parent names a job by the function object
(``worker.call(jobs.plan_and_execute, case, x, timeout_seconds=30)``); only the functions
of this module are jobs (:func:`is_job`), and the child resolves the name here, so no job
is ever named by a ``"module:function"`` string. Jobs import what they need when they run,
so a child imports only what its jobs use.
"""

from __future__ import annotations

import sys
from typing import Any

import numpy as np

from fftgauge.harness.cases import Case
from fftgauge.harness.errors import BackendFailure


def plan_and_execute(backend: Any, case: Case | tuple, x: np.ndarray) -> np.ndarray:
    """Plan ``case`` on ``backend``, run the plan once on ``x`` and return the output.

    The job the engine runs in a worker for one correctness probe: ``backend.plan(case)``,
    ``plan.prepare(x)``, ``plan.execute(...)``, ``plan.close()``. The output is returned as
    a fresh numpy array (a plan may reuse its output buffer), whatever its shape or dtype:
    judging those is the checks' job. Note that the caller's ``x`` travels to the child as a
    copy, so a check that the input was left intact must run inside the child.

    Parameters
    ----------
    backend : the adapter the worker loaded (passed by the worker).
    case : a :class:`~fftgauge.harness.cases.Case`, or a tuple ``(kind, dtype, n[, norm])``.
    x : the input array.

    Returns
    -------
    numpy.ndarray
        A copy of what the plan returned.

    Raises
    ------
    UnsupportedCase
        When the backend's plan refuses the case (the worker passes it on as such).
    BackendFailure
        When the backend returned None or something that is not an array of numbers
        (Python objects, strings); the reason says which.
    Exception
        Whatever the backend raised; the worker turns it into a :class:`BackendFailure`.
    """
    if not isinstance(case, Case):
        case = Case(*case)
    plan = backend.plan(case)
    try:
        out = plan.execute(plan.prepare(x))
        y = np.array(out, copy=True)
    finally:
        plan.close()
    if out is None or (y.dtype == object and y.shape == () and y.item() is None):  # None, or as np.asarray(None)
        raise BackendFailure("the backend returned None, not an array")
    if y.dtype.kind not in "biufc":
        what = "an array" if isinstance(out, np.ndarray) else f"a {type(out).__name__}"
        raise BackendFailure(f"the backend returned {what} of dtype {y.dtype}, not an array of numbers")
    return y


def describe_backend(backend: Any) -> dict[str, Any]:
    """Return ``backend.describe().as_dict()``: name, version, description, options, capabilities.

    Lets the parent learn what a backend claims without importing its code.
    """
    return backend.describe().as_dict()


def unsupported_reason(backend: Any, case: Case | tuple) -> str | None:
    """Return ``backend.unsupported_reason(case)``: why the case is outside its claims, or None."""
    if not isinstance(case, Case):
        case = Case(*case)
    return backend.unsupported_reason(case)


def backend_claims(backend: Any, case_fields: list[tuple], max_n_pure_python: int | None) -> Any:
    """Return the backend's :class:`~fftgauge.backends.claims.BackendClaims`: its label, its
    description and, per case, why it is skipped (or None).

    ``max_n_pure_python`` caps the sizes given to backends whose capabilities say
    ``pure_python`` (the references), so a default run stays quick.
    """
    from fftgauge.backends.claims import BackendClaims

    from fftgauge.harness.shapes.fields import case_from_fields, is_shaped

    caps = backend.capabilities()
    reasons = []
    for fields in case_fields:
        case = case_from_fields(fields)
        if is_shaped(case):  # a shaped case: its own claims; the pure-Python cap applies to the whole array
            reason = backend.shaped_unsupported_reason(case)
            points = int(np.prod(case.shape))
            if reason is None and max_n_pure_python and caps.pure_python and points > max_n_pure_python:
                reason = (f"{backend.label} is a pure-Python reference: this run limits it to arrays of at most "
                          f"{max_n_pure_python} points ({points} here)")
            reasons.append(reason)
            continue
        reason = backend.unsupported_reason(case)
        if reason is None and max_n_pure_python and caps.pure_python and case.n > max_n_pure_python:
            reason = (f"{backend.label} is a pure-Python reference: this run limits it to n <= "
                      f"{max_n_pure_python} (n = {case.n}); ask for it by its sizes to go further")
        reasons.append(reason)
    return BackendClaims(backend.label, backend.describe(), tuple(reasons))


def call_seconds(backend: Any, case_fields: list[tuple], seed: int,
                 blas_threads: int | None = 1) -> list[tuple[int, float | None]]:
    """Return the seconds of one call per case, smallest sizes first, until the calls get long,
    with the BLAS pools capped as the battery's cases run them (:func:`run_case_job`); see
    :func:`fftgauge.harness.battery.budget.measure_call_seconds`."""
    from fftgauge.harness.battery.budget import measure_call_seconds

    _cap_blas(blas_threads)
    return measure_call_seconds(backend, case_fields, seed)


#: (cap, len(sys.modules)) when this process last capped its BLAS pools (worker side).
_BLAS_CAP: list[tuple[int, int]] = []


def run_case_job(backend: Any, case_fields: tuple, seed: int, check_names: list[str],
                 blas_threads: int | None = 1) -> list[dict]:
    """The battery's job: :func:`fftgauge.harness.battery.checks.run_case_checks` in a worker whose BLAS
    thread pools are capped at ``blas_threads`` (None leaves them alone).

    The cap (threadpoolctl) holds for the rest of the worker's life. It is applied before
    the first case and again after any case that imported new modules, since a BLAS library
    arrives with an import (numpy's at start-up, scipy's when the reference first imports
    scipy.fft); asking threadpoolctl costs milliseconds, so it is not asked on every case.

    Returns the rows as dicts; raises what :func:`~fftgauge.harness.battery.checks.run_case_checks` raises.
    """
    from fftgauge.harness.battery.checks import run_case_checks

    _cap_blas(blas_threads)
    rows = run_case_checks(backend, case_fields, seed, check_names)
    _cap_blas(blas_threads)
    return rows


def run_shaped_case_job(backend: Any, case_fields: tuple, seed: int, check_names: list[str],
                        blas_threads: int | None = 1) -> list[dict]:
    """The shaped battery's job: the checks of one shaped case
    (:func:`fftgauge.harness.shapes.battery.check_shaped_fields`; ``case_fields`` as
    :func:`fftgauge.harness.shapes.fields.case_fields` makes them), BLAS pools capped as in
    :func:`run_case_job`. Returns the rows as dicts."""
    from fftgauge.harness.shapes.battery import check_shaped_fields

    _cap_blas(blas_threads)
    rows = check_shaped_fields(backend, case_fields, seed, check_names)
    _cap_blas(blas_threads)
    return rows


def _cap_blas(threads: int | None) -> None:
    """Cap this process's BLAS pools at ``threads`` unless done already since the last import."""
    if threads is None or _BLAS_CAP == [(threads, len(sys.modules))]:
        return
    from threadpoolctl import threadpool_limits

    threadpool_limits(limits=threads, user_api="blas")
    _BLAS_CAP[:] = [(threads, len(sys.modules))]


def run_case_checks(backend: Any, case_fields: tuple, seed: int, check_names: list[str] | None) -> list[dict]:
    """The battery's checks of one case, without the BLAS cap (the gate's accuracy probe).

    Returns the rows as dicts; raises what
    :func:`fftgauge.harness.battery.checks.run_case_checks` raises.
    """
    from fftgauge.harness.battery.checks import run_case_checks as run

    return run(backend, case_fields, seed, check_names)


def time_case(backend: Any, case_fields: tuple, options: dict) -> dict | None:
    """One case, or one round of it, of the timing runner; see
    :func:`fftgauge.harness.timing.case_job.time_case` (returns its row dict, or None between rounds)."""
    from fftgauge.harness.timing.case_job import time_case as run

    return run(backend, case_fields, options)


def prepare_case(backend: Any, case_fields: tuple, seed: int, threads: int | None = 1) -> dict[str, Any]:
    """The gate's preparation of one case; see :func:`fftgauge.harness.gate.sampling.prepare_case`."""
    from fftgauge.harness.gate.sampling import prepare_case as run

    return run(backend, case_fields, seed, threads)


def sample_block(backend: Any, case_fields: tuple, loops: int | None, count: int, seed: int,
                 threads: int | None = 1) -> list[float]:
    """One block of the gate's samples; see :func:`fftgauge.harness.gate.sampling.sample_block`."""
    from fftgauge.harness.gate.sampling import sample_block as run

    return run(backend, case_fields, loops, count, seed, threads)


def release_case(backend: Any, case_fields: tuple, seed: int) -> None:
    """Forget the gate's cached plan of a case; see :func:`fftgauge.harness.gate.sampling.release_case`."""
    from fftgauge.harness.gate.sampling import release_case as run

    run(backend, case_fields, seed)


def yardstick_block(backend: Any, count: int) -> list[float]:
    """One block of the machine-speed yardstick; see :func:`fftgauge.harness.gate.yardstick.yardstick_block`."""
    from fftgauge.harness.gate.yardstick import yardstick_block as run

    return run(backend, count)


def blas_thread_caps(backend: Any) -> list[int]:
    """Return the thread count of every BLAS pool loaded in this worker (threadpoolctl)."""
    from threadpoolctl import threadpool_info

    return [int(pool["num_threads"]) for pool in threadpool_info() if pool.get("user_api") == "blas"]


#: The job functions, by name (what the child looks up).
JOBS: dict[str, Any] = {f.__name__: f for f in (
    plan_and_execute, describe_backend, unsupported_reason, backend_claims, call_seconds, run_case_job,
    run_shaped_case_job, run_case_checks, time_case, prepare_case, sample_block, release_case, yardstick_block,
    blas_thread_caps)}


def is_job(func: Any) -> bool:
    """Return True when ``func`` is one of this module's job functions."""
    return callable(func) and JOBS.get(getattr(func, "__name__", "")) is func


def resolve(name: str) -> Any:
    """Return the job function called ``name``.

    Raises
    ------
    LookupError
        When this module has no job of that name.
    """
    try:
        return JOBS[name]
    except (KeyError, TypeError):
        raise LookupError(f"there is no worker job called {name!r}") from None
