"""The structural and behaviour checks of q15/q31 cases, with limits in output LSBs
(:func:`~fftgauge.harness.fixed.bounds.error_bound_lsb`, from the format, the declared
scaling and the size):

``linearity``   ``y(x1 + x2) - y(x1) - y(x2)`` (noise, each at half the headroom level, so the
                sum is exact in integers): at most three times the bound without the twiddle
                term (the twiddles' error is linear and cancels).
``impulse``     ``A`` at n = 0 (A full scale, the largest integer): every bin within the bound of
                ``A / 2**shift``. With 1/2 per stage at large N those bins (A/N) are within a few
                times the bound, so there the check says little; ``sqnr`` judges the precision.
``time-shift``  ``y(x[n - s])`` against ``y(x) exp(-2 pi i k s / N)`` (s = N/4 + 1 mod N): at most
                twice the bound (each output within it of its exact value).
``round-trip``  ``skip``: no q15/q31 inverse is checked (fixed-point inverses are not claimed).
``concurrent``  threads calling the shared plan and plans of their own at once: bit for bit
                the outputs of the same calls made alone (integer arithmetic has no excuse).
``shape``       the output is ``(n, 2)`` integer pairs or their interleaved ``(2n,)`` form.

``value`` is the largest deviation (LSB, magnitude of a complex value), ``limit`` the bound.
A failing ``impulse`` whose output is right under another output shift is diagnosed
``scaling-shift``; ``impulse``/``time-shift`` beyond the bound otherwise ``precision`` (worse
than any radix-2 of the format with full-width twiddles can be); ``linearity`` ``unknown``.
"""

from __future__ import annotations

import threading
from typing import Any, Callable

import numpy as np

from fftgauge.harness.battery.behaviour_checks import CONCURRENT_ROUNDS, CONCURRENT_THREADS, CONCURRENT_TIMEOUT_SECONDS
from fftgauge.harness.battery.thread_crew import thread_caps, thread_caps_applied, thread_crew
from fftgauge.harness.fixed.bounds import error_bound_lsb, headroom_level_dbfs
from fftgauge.harness.fixed.declared import FixedScaling
from fftgauge.harness.fixed.formats import QFormat, pairs_to_complex
from fftgauge.harness.fixed.measure import exact_output, read_output
from fftgauge.harness.fixed.signals import test_signal
from fftgauge.harness.rows import CheckRow

__all__ = ["STRUCTURE_CHECKS", "structure_rows"]

#: The checks of this module, in the order they run.
STRUCTURE_CHECKS = ("linearity", "impulse", "time-shift", "round-trip", "concurrent", "shape")


class Runner:
    """A plan's execute with what reading its output needs: ``call(x)`` returns the output
    as int64 pairs in LSBs of that call's shift, and the shift."""

    def __init__(self, run: Callable, fmt: QFormat, n: int, declared: FixedScaling):
        self.run, self.fmt, self.n, self.declared = run, fmt, n, declared

    def call(self, x: np.ndarray, run: Callable | None = None) -> tuple[np.ndarray, int]:
        """Return ``(pairs, shift)`` of one call on a copy of ``x``."""
        return read_output((run or self.run)(x.copy()), self.fmt, self.n, self.declared.shift_at(self.n))

    def value(self, x: np.ndarray, shift: int | None = None) -> np.ndarray:
        """Return one call's output as complex LSBs of ``shift`` (its own shift when None)."""
        y, own = self.call(x)
        z = pairs_to_complex(y)
        return z if shift is None else z * np.longdouble(2.0) ** (own - shift)


def structure_rows(make_row: Callable[..., CheckRow], run: Callable, fmt: QFormat, n: int,
                   declared: FixedScaling, seed: int, plan_again: Callable[[], Any]) -> list[CheckRow]:
    """Return the rows of :data:`STRUCTURE_CHECKS`.

    ``make_row(check, status, **fields)`` builds a row of the case; ``run`` is the plan's
    execute; ``plan_again()`` returns a fresh plan of the case (for ``concurrent``).

    Raises
    ------
    OutputProblem, BackendFailure
        As :func:`~fftgauge.harness.fixed.measure.read_output`; whatever ``run`` raises.
    """
    runner = Runner(run, fmt, n, declared)
    scaling = declared.scaling
    bound = error_bound_lsb(scaling, n, fmt)
    return [linearity_row(make_row, runner, scaling, seed), impulse_row(make_row, runner, bound),
            time_shift_row(make_row, runner, scaling, bound, seed),
            make_row("round-trip", "skip", message=f"no {fmt.name} inverse is checked: the fixed-point checks cover "
                                                   "the forward fft only"),
            concurrent_row(make_row, runner, seed, plan_again), shape_row(make_row, run, fmt, n)]


def bound_words(value: float, limit: float) -> str:
    """Return ``'3.2 LSB (limit 27.1 LSB)'``."""
    return f"{value:.3g} LSB (limit {limit:.3g} LSB)"


def linearity_row(make_row: Callable[..., CheckRow], runner: Runner, scaling: str, seed: int) -> CheckRow:
    """Return the ``linearity`` row (see the module docstring)."""
    level = headroom_level_dbfs(scaling, runner.n) - 6.02
    x1 = test_signal("noise", runner.n, level, runner.fmt, seed + 101)
    x2 = test_signal("noise", runner.n, level, runner.fmt, seed + 202)
    both = (x1.astype(np.int64) + x2).astype(runner.fmt.dtype)
    z, shift = runner.call(both)
    total = pairs_to_complex(z)
    parts = runner.value(x1, shift) + runner.value(x2, shift)
    worst = float(np.max(np.abs(total - parts), initial=0.0))
    limit = 3.0 * error_bound_lsb(scaling, runner.n, runner.fmt, twiddles=False)
    ok = worst <= limit
    return make_row("linearity", "pass" if ok else "fail", value=worst, limit=limit, diagnosis=None if ok else "unknown",
                    message=f"y(x1 + x2) - y(x1) - y(x2) at most {bound_words(worst, limit)}, noise at {level:.1f} dBFS"
                            + ("" if ok else ": beyond what rounding explains"))


def impulse_row(make_row: Callable[..., CheckRow], runner: Runner, bound: float) -> CheckRow:
    """Return the ``impulse`` row: A at n = 0 gives A / 2**shift in every bin."""
    x = test_signal("impulse", runner.n, 0.0, runner.fmt, 0)
    y, shift = runner.call(x)
    got, exact = pairs_to_complex(y), exact_output(x, shift)
    worst = float(np.max(np.abs(got - exact), initial=0.0))
    if worst <= bound:
        return make_row("impulse", "pass", value=worst, limit=bound,
                        message=f"a full-scale impulse gives {float(exact[0].real):.6g} LSB in every bin within "
                                f"{bound_words(worst, bound)}")
    k = other_shift(got, exact, bound)
    if k is not None:
        return make_row("impulse", "fail", value=worst, limit=bound, diagnosis="scaling-shift",
                        message=f"a full-scale impulse is off by {bound_words(worst, bound)}; it is right under an output "
                                f"shift of {shift + k} bits, not the declared {shift}")
    return make_row("impulse", "fail", value=worst, limit=bound, diagnosis="precision",
                    message=f"a full-scale impulse is off by {bound_words(worst, bound)}, more than any radix-2 of "
                            f"{runner.fmt.name} with this scaling errs")


def other_shift(got: np.ndarray, exact: np.ndarray, bound: float) -> int | None:
    """Return k != 0 when ``got * 2**k`` lies within ``bound`` (scaled by 2**k where k > 0)
    of ``exact`` and keeps at least half of its peak (a shift that rounds everything to
    nothing explains nothing), else None."""
    peak = np.max(np.abs(exact), initial=0.0)
    for k in range(-32, 33):
        scaled = got * np.longdouble(2.0) ** k
        if k and np.max(np.abs(scaled - exact)) <= bound * max(1.0, 2.0 ** k) and \
                np.max(np.abs(scaled), initial=0.0) >= peak / 2:
            return k
    return None


def time_shift_row(make_row: Callable[..., CheckRow], runner: Runner, scaling: str, bound: float,
                   seed: int) -> CheckRow:
    """Return the ``time-shift`` row (see the module docstring)."""
    n = runner.n
    s = (n // 4 + 1) % n
    level = headroom_level_dbfs(scaling, n)
    x = test_signal("noise", n, level, runner.fmt, seed + 303)
    y0, shift = runner.call(x)
    moved = runner.value(np.roll(x, s, axis=0), shift)
    k = np.arange(n, dtype=np.longdouble)
    turn = np.exp(np.clongdouble(-2j) * np.longdouble(np.pi) * k * s / n)
    worst = float(np.max(np.abs(moved - pairs_to_complex(y0) * turn), initial=0.0))
    limit = 2.0 * bound
    ok = worst <= limit
    return make_row("time-shift", "pass" if ok else "fail", value=worst, limit=limit,
                    diagnosis=None if ok else "precision",
                    message=f"y(x[n - {s}]) against y(x) exp(-2 pi i k {s}/N): at most {bound_words(worst, limit)}, "
                            f"noise at {level:.1f} dBFS")


def concurrent_row(make_row: Callable[..., CheckRow], runner: Runner, seed: int,
                   plan_again: Callable[[], Any]) -> CheckRow:
    """Return the ``concurrent`` row: every concurrent call equal bit for bit to the same call alone."""
    xs = [test_signal("noise", runner.n, -6.0, runner.fmt, seed + 400 + t) for t in range(CONCURRENT_THREADS)]
    alone = [runner.call(x)[0] for x in xs]
    own = [plan_again() for _ in range(CONCURRENT_THREADS)]
    try:
        finished, results = run_at_once(runner, own, xs)
    finally:
        for plan in own:
            try:
                plan.close()
            except Exception:  # noqa: BLE001
                pass
    calls = sum(len(r) for r in results)
    bad = []
    for t, outcome in enumerate(results):
        for how, out in outcome:
            if how == "raised":
                bad.append(f"a concurrent call raised {type(out).__name__}: {out}")
            elif not np.array_equal(out, alone[t]):
                bad.append(f"a concurrent call through the {how} differs in "
                           f"{int(np.count_nonzero(np.any(out != alone[t], axis=-1)))} of {runner.n} outputs")
    if not finished:
        bad.append(f"the threads did not finish within {CONCURRENT_TIMEOUT_SECONDS:g} s")
    if bad:
        return make_row("concurrent", "fail", value=float(len(bad)), limit=0.0, diagnosis="thread-unsafe",
                        message=f"{len(bad)} of {calls} calls from {CONCURRENT_THREADS} threads at once went wrong: "
                                + "; ".join(bad[:3]))
    return make_row("concurrent", "pass", value=0.0, limit=0.0,
                    message=f"{calls} calls from {CONCURRENT_THREADS} threads at once (the shared plan and plans of "
                            f"their own) equal the same calls alone bit for bit")


def run_at_once(runner: Runner, own: list, xs: list) -> tuple[bool, list[list[tuple[str, Any]]]]:
    """Return (every thread finished in time, per thread its ``(how, pairs or exception)``):
    thread t calls the shared plan and its own plan on ``xs[t]`` ``CONCURRENT_ROUNDS`` times."""
    barrier = threading.Barrier(CONCURRENT_THREADS, timeout=60)
    results: list[list[tuple[str, Any]]] = [[] for _ in range(CONCURRENT_THREADS)]
    caps = thread_caps()

    def work(t: int) -> None:
        try:
            with thread_caps_applied(caps):
                barrier.wait()
                for _ in range(CONCURRENT_ROUNDS):
                    results[t].append(("shared plan", runner.call(xs[t])[0]))
                    results[t].append(("own plan", runner.call(xs[t], own[t].execute)[0]))
        except Exception as exc:  # noqa: BLE001 - reported in the row
            results[t].append(("raised", exc))

    finished = thread_crew().run([lambda t=t: work(t) for t in range(CONCURRENT_THREADS)], CONCURRENT_TIMEOUT_SECONDS)
    return finished, results


def shape_row(make_row: Callable[..., CheckRow], run: Callable, fmt: QFormat, n: int) -> CheckRow:
    """Return the ``shape`` row: ``(n, 2)`` pairs or ``(2n,)`` interleaved integers."""
    out = run(test_signal("noise", n, -6.0, fmt, 7))
    y = np.asarray(out[0] if isinstance(out, tuple) else out)
    if y.shape == (n, 2):
        return make_row("shape", "pass", value=float(y.size), limit=float(2 * n), message=f"output shape ({n}, 2) pairs")
    if y.shape == (2 * n,):
        return make_row("shape", "pass", value=float(y.size), limit=float(2 * n),
                        message=f"output shape ({2 * n},): interleaved re, im")
    return make_row("shape", "fail", value=float(y.size), limit=float(2 * n), diagnosis="shape",
                    message=f"output shape {y.shape} where ({n}, 2) pairs or ({2 * n},) interleaved are due")
