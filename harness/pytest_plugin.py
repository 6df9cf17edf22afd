"""fftgauge's pytest plugin (entry point ``pytest11``): time and check your own FFT inside
your own test suite.

Fixtures
--------
``fftgauge_timer``
    Needs pytest-benchmark. ``fftgauge_timer(spec, kind="fft", n=1024, dtype="float64")``
    plans the case once (outside the measurement) and times ``plan.execute`` through
    pytest-benchmark's ``benchmark`` fixture, so the figures land in pytest-benchmark's
    tables, comparisons and JSON. Returns the last output.
``fftgauge_check``
    ``fftgauge_check(spec, case, checks=None)`` runs the battery on one case in-process and
    fails the test with the diagnosis when any check fails or errors; returns the rows.

Parametrised battery
--------------------
:func:`battery_params` turns a backend and a size list into ``pytest.param`` cases, one
test per case, each named like ``fft-float64-1024``; the cases its claims leave out are not
parametrised, and sizes it raises one error on as a class (found by calling it once per
size at collection) are marked ``skip`` with the reason and the SPEC option that claims them::

    import pytest
    from fftgauge.harness.pytest_plugin import battery_params

    @pytest.mark.parametrize("case", battery_params("my_fft.py:fft", sizes="1..64,2^7..2^12"))
    def test_my_fft(fftgauge_check, case):
        fftgauge_check("my_fft.py:fft", case)
"""

from __future__ import annotations

from typing import Any, Callable, Sequence

import pytest

from fftgauge.harness.cases import Case


#: The collection-time probe calls the backend at the sizes up to this one...
PROBE_MAX_N = 1024
#: ... smallest first, for at most this many seconds per kind, precision and norm.
PROBE_SECONDS = 0.5


def battery_params(spec: str, sizes: str = "@default", kinds: Sequence[str] | None = None,
                   dtypes: Sequence[str] = ("float32", "float64"), norms: Sequence[str] = ("backward",)) -> list:
    """Return one ``pytest.param(Case)`` per case the backend claims (others, by its claims'
    ``unsupported_reason`` or a size its declared convention cannot be given at, are left out).

    A backend that raises without having declared it (a user's radix-2 on a non-power of
    two) is called once per size at collection time (sizes up to :data:`PROBE_MAX_N`, smallest
    first, :data:`PROBE_SECONDS` per kind, precision and norm): when one error, numbers aside,
    comes on every size of a class (not a power of two, odd, above some n) and on no other,
    the cases of that class, larger sizes included, are marked ``skip`` with the reason
    ``fftgauge check`` gives (:func:`~fftgauge.harness.battery.unclaimed.unclaimed_reason`,
    naming the SPEC option that claims it).

    Raises
    ------
    fftgauge.harness.errors.UsageError
        For a malformed size list or a SPEC that does not load (at collection time).
    """
    from fftgauge.backends.registry import load_backend
    from fftgauge.harness.battery.conventions import backend_convention
    from fftgauge.harness.sizes import parse_sizes

    backend = load_backend(spec)
    kinds = kinds or backend.capabilities().kinds
    cases = [Case(k, d, n, norm) for k in kinds for d in dtypes for norm in norms for n in parse_sizes(sizes)]
    convention = backend_convention(backend)
    cases = [c for c in cases if backend.unsupported_reason(c) is None and convention.unsupported_reason(c) is None]
    reasons = size_class_reasons(spec, backend, cases)
    return [pytest.param(c, id=f"{c.kind}-{c.dtype}-{c.n}" + ("" if c.norm == "backward" else f"-{c.norm}"),
                         marks=[pytest.mark.skip(reason=reasons[c])] if c in reasons else [])
            for c in cases]


def probe_error(backend: Any, case: Case) -> str | None:
    """Return the message of the error ``backend`` raises on one call of ``case`` (planning
    included) as a battery row words it (``"the backend raised ValueError: ..."``), or None."""
    from fftgauge.harness.battery.conventions import declared_input_plan
    from fftgauge.harness.battery.inputs import case_rng, random_input
    from fftgauge.harness.execution.crash import exception_text

    try:
        plan = declared_input_plan(backend, backend.plan(case))
        try:
            plan.execute(plan.prepare(random_input(case, case_rng(0, case, "probe"))))
        finally:
            plan.close()
    except Exception as exc:  # noqa: BLE001 - what the user's FFT raises is what is probed
        return f"the backend raised {exception_text(exc)}"
    return None


def size_class_reasons(spec: str, backend: Any, cases: Sequence[Case]) -> dict[Case, str]:
    """Return the skip reason of every case in a size class the backend raises one error on
    (see :func:`battery_params`), by probing it in this process; {} when none."""
    import time

    from fftgauge.harness.battery.unclaimed import in_size_class, size_class, unclaimed_reason
    from fftgauge.harness.rows import message_cause

    groups: dict[tuple, list[Case]] = {}
    for case in cases:
        groups.setdefault((case.kind, case.dtype, case.norm), []).append(case)
    options = backend.describe().options
    reasons: dict[Case, str] = {}
    for group in groups.values():
        errors: dict[int, str | None] = {}
        started = time.perf_counter()
        for case in sorted((c for c in group if c.n <= PROBE_MAX_N), key=lambda c: c.n):
            if time.perf_counter() - started > PROBE_SECONDS:
                break
            errors[case.n] = probe_error(backend, case)
        for cause in {message_cause(m) for m in errors.values() if m is not None}:
            raising = {n for n, m in errors.items() if m is not None and message_cause(m) == cause}
            found = size_class(raising, set(errors))
            if found is None:
                continue
            example = next(m for n, m in sorted(errors.items()) if n in raising)
            reason = unclaimed_reason(backend.label, found[0], example, spec, options, found[1])
            reasons.update({c: reason for c in group
                            if (c.n in raising if c.n in errors else in_size_class(found, c.n))})
    return reasons


def _failure_text(rows: list) -> str:
    bad = [r for r in rows if r.status in ("fail", "error")]
    return "\n".join(f"{r.check}: {r.status}" + (f" [{r.diagnosis}]" if r.diagnosis else "") + f": {r.message}"
                     for r in bad)


@pytest.fixture
def fftgauge_check() -> Callable[..., list]:
    """Return ``check(spec, case, checks=None, seed=1234)``: run the battery on one case and
    fail the test (with each failing check's diagnosis) unless every check passes or skips."""
    from fftgauge.backends.registry import load_backend
    from fftgauge.harness.battery.checks import check_case

    def check(spec: str, case: Case, checks: Sequence[str] | None = None, seed: int = 1234) -> list:
        rows = check_case(load_backend(spec), case, seed, list(checks) if checks else None)
        text = _failure_text(rows)
        if text:
            pytest.fail(f"{spec} {case.label()}:\n{text}", pytrace=False)
        return rows

    return check


@pytest.fixture
def fftgauge_timer(request: pytest.FixtureRequest) -> Callable[..., Any]:
    """Return ``timer(spec, kind="fft", n=1024, dtype="float64", seed=1234)``, which times one
    planned case through pytest-benchmark's ``benchmark`` fixture (planning not timed)."""
    from fftgauge.backends.registry import load_backend
    from fftgauge.harness.battery.conventions import declared_input_plan
    from fftgauge.harness.battery.inputs import case_rng, random_input

    benchmark = request.getfixturevalue("benchmark")

    def timer(spec: str, kind: str = "fft", n: int = 1024, dtype: str = "float64", seed: int = 1234) -> Any:
        case = Case(kind, dtype, n)
        backend = load_backend(spec)
        reason = backend.unsupported_reason(case)
        if reason:
            pytest.skip(reason)
        plan = declared_input_plan(backend, backend.plan(case))
        try:
            x = plan.prepare(random_input(case, case_rng(seed, case, "time")))
            benchmark.extra_info.update({"fftgauge_backend": backend.label, "case": case.label()})
            return benchmark(plan.execute, x)
        finally:
            plan.close()

    return timer
