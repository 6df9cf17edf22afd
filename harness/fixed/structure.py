"""The structural and behaviour checks of q15/q31 cases, with limits in output LSBs
(:func:`~fftgauge.harness.fixed.bounds.error_bound_lsb`, from the format, the declared
scaling and the size):

``linearity``   ``y(x1 + x2) - y(x1) - y(x2)`` (noise, each at half the headroom level, so the
                sum is exact in integers): at most three times the bound without the twiddle
                term (the twiddles' error is linear and cancels).
``impulse``     ``A`` at n = 0 (A full scale, the largest integer): every bin within the bound of
                ``A / 2**shift``. With 1/2 per stage at large N those bins (A/N) are within a few
                times the bound, so there the check says little; ``sqnr`` judges the precision.
``time-shift``  ``y(x[n - s])`` against ``y(x) exp(-+2 pi i k s / N)`` (s = N/4 + 1 mod N; the sign
                of the kind: - for fft and rfft, + for ifft): at most twice the bound (each
                output within it of its exact value). An irfft's input cannot be rotated in
                integers, so there the input is modulated by (-1)^k (exact) and the output
                must be ``y(X)`` shifted by N/2.
``round-trip``  the kind, then the backend's transform that undoes it (fft and ifft, rfft and
                irfft, either order), on noise at the headroom level lowered by as much again
                for the second transform: the result must be ``N x / 2**(s1 + s2)`` (s1, s2 the
                two output shifts) within ``N B1 / 2**s2 + B2`` LSB, where B1, B2 are the two
                transforms' bounds. Derivation: the first output is ``T1(x) / 2**s1 + e1``
                with every ``|e1| <= B1``; the second is ``T2(y) / 2**s2 + e2``, ``|e2| <= B2``;
                ``T2(T1(x)) = N x`` (unnormalised transforms) and each output of ``T2(e1)`` is a
                sum of N terms of magnitude at most B1 (the Hermitian extension of a half
                spectrum counts its mirrored errors once each), so ``|T2(e1)| <= N B1``.
                ``skip`` where the backend takes no partner kind, or where the input level
                leaves less than 4 LSB of signal (no scaling at large N). A failure that is
                right under another shift is ``scaling-shift``; one that gives ``x[-n]`` (the
                second transform has the first's sign) ``sign``; else ``precision``.
``concurrent``  threads calling the shared plan and plans of their own at once: bit for bit
                the outputs of the same calls made alone (integer arithmetic has no excuse).
``shape``       the output is ``(m, 2)`` integer pairs or their interleaved ``(2m,)`` form (m = n,
                n/2 + 1 for rfft), or ``n`` integers for irfft.

Every check runs on the inputs of the case's kind (:func:`~fftgauge.harness.fixed.signals.test_signal`).

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
from fftgauge.harness.fixed.bounds import SAFE_LEVEL_DBFS, error_bound_lsb, headroom_level_dbfs
from fftgauge.harness.fixed.declared import FixedScaling
from fftgauge.harness.fixed.formats import QFormat, pairs_to_complex
from fftgauge.harness.fixed.measure import exact_output, output_length, read_output
from fftgauge.harness.fixed.signals import test_signal
from fftgauge.harness.rows import CheckRow

__all__ = ["PARTNER", "STRUCTURE_CHECKS", "structure_rows"]

#: The transform that undoes each kind (the ``round-trip`` check's partner).
PARTNER = {"fft": "ifft", "ifft": "fft", "rfft": "irfft", "irfft": "rfft"}

#: The checks of this module, in the order they run.
STRUCTURE_CHECKS = ("linearity", "impulse", "time-shift", "round-trip", "concurrent", "shape")


class Runner:
    """A plan's execute with what reading its output needs: ``call(x)`` returns the output
    as int64 pairs in LSBs of that call's shift, and the shift."""

    def __init__(self, run: Callable, fmt: QFormat, n: int, declared: FixedScaling, kind: str = "fft"):
        self.run, self.fmt, self.n, self.declared, self.kind = run, fmt, n, declared, kind

    def call(self, x: np.ndarray, run: Callable | None = None) -> tuple[np.ndarray, int]:
        """Return ``(pairs, shift)`` of one call on a copy of ``x``."""
        return read_output((run or self.run)(x.copy()), self.fmt, self.n, self.declared.shift_at(self.n), self.kind)

    def signal(self, name: str, level_dbfs: float, seed: int) -> np.ndarray:
        """Return test signal ``name`` in the input layout of the runner's kind."""
        return test_signal(name, self.n, level_dbfs, self.fmt, seed, self.kind)

    def value(self, x: np.ndarray, shift: int | None = None) -> np.ndarray:
        """Return one call's output as complex LSBs of ``shift`` (its own shift when None)."""
        y, own = self.call(x)
        z = pairs_to_complex(y)
        return z if shift is None else z * np.longdouble(2.0) ** (own - shift)


def structure_rows(make_row: Callable[..., CheckRow], run: Callable, fmt: QFormat, n: int,
                   declared: FixedScaling, seed: int, plan_again: Callable[[], Any], kind: str = "fft",
                   partner: Callable[[], Any] | str | None = None) -> list[CheckRow]:
    """Return the rows of :data:`STRUCTURE_CHECKS` of transform ``kind``.

    ``make_row(check, status, **fields)`` builds a row of the case; ``run`` is the plan's
    execute; ``plan_again()`` returns a fresh plan of the case (for ``concurrent``);
    ``partner()`` a plan of the kind that undoes it (for ``round-trip``), or a string saying
    why there is none.

    Raises
    ------
    OutputProblem, BackendFailure
        As :func:`~fftgauge.harness.fixed.measure.read_output`; whatever ``run`` raises.
    """
    runner = Runner(run, fmt, n, declared, kind)
    scaling = declared.scaling
    bound = error_bound_lsb(scaling, n, fmt)
    return [linearity_row(make_row, runner, scaling, seed), impulse_row(make_row, runner, bound),
            time_shift_row(make_row, runner, scaling, bound, seed),
            round_trip_row(make_row, runner, scaling, seed, partner),
            concurrent_row(make_row, runner, seed, plan_again), shape_row(make_row, run, fmt, n, kind)]


def bound_words(value: float, limit: float) -> str:
    """Return ``'3.2 LSB (limit 27.1 LSB)'``."""
    return f"{value:.3g} LSB (limit {limit:.3g} LSB)"


def linearity_row(make_row: Callable[..., CheckRow], runner: Runner, scaling: str, seed: int) -> CheckRow:
    """Return the ``linearity`` row (see the module docstring)."""
    level = headroom_level_dbfs(scaling, runner.n) - 6.02
    x1 = runner.signal("noise", level, seed + 101)
    x2 = runner.signal("noise", level, seed + 202)
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
    x = runner.signal("impulse", 0.0, 0)
    y, shift = runner.call(x)
    got, exact = pairs_to_complex(y), exact_output(x, shift, runner.kind, runner.n)
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
    level = headroom_level_dbfs(scaling, n)
    x = runner.signal("noise", level, seed + 303)
    y0, shift = runner.call(x)
    limit = 2.0 * bound
    if runner.kind == "irfft":
        s = n // 2
        odd = np.arange(x.shape[0]) % 2 == 1
        flipped = x.astype(np.int64)
        flipped[odd] = -flipped[odd]
        moved = runner.value(np.clip(flipped, runner.fmt.min_int, runner.fmt.max_int).astype(x.dtype), shift)
        worst = float(np.max(np.abs(moved - np.roll(pairs_to_complex(y0), s)), initial=0.0))
        ok = worst <= limit
        return make_row("time-shift", "pass" if ok else "fail", value=worst, limit=limit,
                        diagnosis=None if ok else "precision",
                        message=f"y(X[k] (-1)^k) against y(X)[n - {s}]: at most {bound_words(worst, limit)}, noise at "
                                f"{level:.1f} dBFS")
    s = (n // 4 + 1) % n
    sign = 1 if runner.kind == "ifft" else -1
    moved = runner.value(np.roll(x, s, axis=0), shift)
    k = np.arange(y0.shape[0], dtype=np.longdouble)
    turn = np.exp(np.clongdouble(2j * sign) * np.longdouble(np.pi) * k * s / n)
    worst = float(np.max(np.abs(moved - pairs_to_complex(y0) * turn), initial=0.0))
    ok = worst <= limit
    diagnosis = None
    if not ok:
        flipped = float(np.max(np.abs(moved - pairs_to_complex(y0) * np.conj(turn)), initial=0.0))
        diagnosis = "sign" if flipped <= limit else "precision"
    word = "+" if sign > 0 else "-"
    return make_row("time-shift", "pass" if ok else "fail", value=worst, limit=limit, diagnosis=diagnosis,
                    message=f"y(x[n - {s}]) against y(x) exp({word}2 pi i k {s}/N): at most {bound_words(worst, limit)}, "
                            f"noise at {level:.1f} dBFS" + ("; it holds with the opposite sign" if diagnosis == "sign"
                                                            else ""))


#: Peak input (LSB) below which ``round-trip`` is skipped: too little signal to say anything.
ROUND_TRIP_MIN_LSB = 4.0


def round_trip_row(make_row: Callable[..., CheckRow], runner: Runner, scaling: str, seed: int,
                   partner: Callable[[], Any] | str | None) -> CheckRow:
    """Return the ``round-trip`` row (the derivation of its limit is in the module docstring)."""
    n, fmt = runner.n, runner.fmt
    other = PARTNER[runner.kind]
    if partner is None or isinstance(partner, str):
        return make_row("round-trip", "skip", message=partner or f"no {other} plan to undo the {runner.kind} with")
    level = 2.0 * headroom_level_dbfs(scaling, n) - SAFE_LEVEL_DBFS
    x = runner.signal("noise", level, seed + 505)
    peak = float(np.max(np.abs(x.astype(np.float64)), initial=0.0))
    if peak < ROUND_TRIP_MIN_LSB:
        return make_row("round-trip", "skip", message=f"an input that keeps both transforms in range ({level:.1f} dBFS) "
                                                      f"has {peak:g} LSB of signal in {fmt.name} at n = {n}")
    y, s1 = runner.call(x)
    plan = partner()
    try:
        second = Runner(plan.execute, fmt, n, runner.declared, other)
        z, s2 = second.call(y[:, 0].astype(fmt.dtype) if runner.kind == "irfft" else y.astype(fmt.dtype))
    finally:
        try:
            plan.close()
        except Exception:  # noqa: BLE001
            pass
    got = pairs_to_complex(z)
    start = x.astype(np.longdouble) if x.ndim == 1 else pairs_to_complex(x)
    want = start * np.longdouble(n) / np.longdouble(2.0) ** (s1 + s2)
    b1, b2 = error_bound_lsb(scaling, n, fmt), error_bound_lsb(scaling, n, fmt)
    limit = n * b1 / 2.0 ** s2 + b2
    worst = float(np.max(np.abs(got - want), initial=0.0))
    words = (f"{runner.kind} then {other} of noise at {level:.1f} dBFS gives N x / 2^{s1 + s2} within "
             f"{bound_words(worst, limit)}")
    if worst <= limit:
        return make_row("round-trip", "pass", value=worst, limit=limit, message=words)
    k = other_shift(got, want, limit)
    if k is not None:
        return make_row("round-trip", "fail", value=worst, limit=limit, diagnosis="scaling-shift",
                        message=f"{words}: it is right under shifts adding up to {s1 + s2 + k} bits, not the declared "
                                f"{s1 + s2}")
    reversed_want = want[(-np.arange(want.shape[0])) % want.shape[0]]
    if runner.kind != "irfft" and float(np.max(np.abs(got - reversed_want))) <= limit:
        return make_row("round-trip", "fail", value=worst, limit=limit, diagnosis="sign",
                        message=f"{words}: it gives x[-n], so both transforms have the same exponent sign")
    if runner.kind == "irfft" and float(np.max(np.abs(got - np.conj(want)))) <= limit:
        return make_row("round-trip", "fail", value=worst, limit=limit, diagnosis="sign",
                        message=f"{words}: it gives conj X, so both transforms have the same exponent sign")
    return make_row("round-trip", "fail", value=worst, limit=limit, diagnosis="precision",
                    message=f"{words}: beyond what the two transforms' rounding explains")


def concurrent_row(make_row: Callable[..., CheckRow], runner: Runner, seed: int,
                   plan_again: Callable[[], Any]) -> CheckRow:
    """Return the ``concurrent`` row: every concurrent call equal bit for bit to the same call alone."""
    xs = [runner.signal("noise", -6.0, seed + 400 + t) for t in range(CONCURRENT_THREADS)]
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


def shape_row(make_row: Callable[..., CheckRow], run: Callable, fmt: QFormat, n: int, kind: str = "fft") -> CheckRow:
    """Return the ``shape`` row: ``(m, 2)`` pairs or ``(2m,)`` interleaved integers (``n``
    integers for irfft)."""
    out = run(test_signal("noise", n, -6.0, fmt, 7, kind))
    y = np.asarray(out[0] if isinstance(out, tuple) else out)
    if kind == "irfft":
        ok = y.shape == (n,)
        return make_row("shape", "pass" if ok else "fail", value=float(y.size), limit=float(n),
                        diagnosis=None if ok else "shape",
                        message=f"output shape ({n},) integers" if ok else
                        f"output shape {y.shape} where ({n},) real integers are due")
    m = output_length(kind, n)
    if y.shape == (m, 2):
        return make_row("shape", "pass", value=float(y.size), limit=float(2 * m), message=f"output shape ({m}, 2) pairs")
    if y.shape == (2 * m,):
        return make_row("shape", "pass", value=float(y.size), limit=float(2 * m),
                        message=f"output shape ({2 * m},): interleaved re, im")
    return make_row("shape", "fail", value=float(y.size), limit=float(2 * m), diagnosis="shape",
                    message=f"output shape {y.shape} where ({m}, 2) pairs or ({2 * m},) interleaved are due")
