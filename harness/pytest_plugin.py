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
test per case, each named like ``fft-float64-1024``::

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


def battery_params(spec: str, sizes: str = "@default", kinds: Sequence[str] | None = None,
                   dtypes: Sequence[str] = ("float32", "float64"), norms: Sequence[str] = ("backward",)) -> list:
    """Return one ``pytest.param(Case)`` per case the backend claims (others are left out).

    Raises
    ------
    fftgauge.harness.errors.UsageError
        For a malformed size list or a SPEC that does not load (at collection time).
    """
    from fftgauge.backends.registry import load_backend
    from fftgauge.harness.sizes import parse_sizes

    backend = load_backend(spec)
    kinds = kinds or backend.capabilities().kinds
    cases = [Case(k, d, n, norm) for k in kinds for d in dtypes for norm in norms for n in parse_sizes(sizes)]
    return [pytest.param(c, id=f"{c.kind}-{c.dtype}-{c.n}" + ("" if c.norm == "backward" else f"-{c.norm}"))
            for c in cases if backend.unsupported_reason(c) is None]


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
    from fftgauge.harness.battery.inputs import case_rng, random_input

    benchmark = request.getfixturevalue("benchmark")

    def timer(spec: str, kind: str = "fft", n: int = 1024, dtype: str = "float64", seed: int = 1234) -> Any:
        case = Case(kind, dtype, n)
        backend = load_backend(spec)
        reason = backend.unsupported_reason(case)
        if reason:
            pytest.skip(reason)
        plan = backend.plan(case)
        try:
            x = plan.prepare(random_input(case, case_rng(seed, case, "time")))
            benchmark.extra_info.update({"fftgauge_backend": backend.label, "case": case.label()})
            return benchmark(plan.execute, x)
        finally:
            plan.close()

    return timer
