"""The gate's adaptive sampling loop: every case gets a first round of block pairs, then the
cases whose interval is still inconclusive get more, doubling, until each is conclusive,
reaches its most samples, or the budget is spent (:func:`collect`); then the final estimates
and verdicts (:func:`finalise`).

The loop talks to a *sampler* (:class:`fftgauge.harness.gate.sampling.WorkerSampler` in a run, any
object with its ``sample(item, pairs)`` method in the tests) and reads time from an injectable
``clock``, so it is tested without processes and without a real clock.
"""

from __future__ import annotations

import math
import random
import time
import zlib
from dataclasses import dataclass, field
from typing import Any, Callable, Sequence

from fftgauge.harness.cases import Case
from fftgauge.harness.errors import BackendFailure
from fftgauge.harness.gate.decision import decide, is_conclusive
from fftgauge.harness.gate.estimates import (Estimate, StoredBaseline, estimate_ab, estimate_paired,
                                             estimate_referenced, estimate_stored, record_estimate)
from fftgauge.harness.gate.request import GateSettings

#: Block pairs an item takes per turn while the items of a round take turns (:func:`collect`).
PAIRS_PER_VISIT = 2


@dataclass
class GateItem:
    """One case of one candidate as the gate works on it (mutable while the run goes on)."""

    backend: str
    case: Case
    new_key: str
    old_key: str | None = None
    baseline_backend: str | None = None
    baseline: StoredBaseline | None = None
    baseline_raw: StoredBaseline | None = None
    baseline_accuracy: dict[str, Any] | None = None
    old_samples: list[float] = field(default_factory=list)
    new_samples: list[float] = field(default_factory=list)
    status: str = "ok"
    message: str = ""
    pairs_taken: int = 0
    pair_seconds: float = 0.0
    estimate: Estimate | None = None
    conclusive: bool | None = None
    significant: bool | None = None
    p_holm: float | None = None
    timing_verdict: str | None = None
    accuracy: dict[str, Any] | None = None
    plan_seconds: float | None = None
    ab_estimate: Estimate | None = None
    counts: dict[str, Any] | None = None

    def fail(self, message: str) -> None:
        """Mark the item as failed (an ``error`` row) with ``message``."""
        self.status, self.message = "error", message

    @property
    def verdict(self) -> str | None:
        """The row's verdict: ``accuracy`` over the timing verdict; None when not compared."""
        if self.accuracy is not None and self.accuracy.get("regressed"):
            return "accuracy"
        return self.timing_verdict


def evaluate(item: GateItem, settings: GateSettings, yardstick_now: dict[str, Any] | None,
             resamples: int) -> Estimate:
    """Return the item's estimate from its samples so far (A/B, referenced, stored or record);
    with two sides the A/B estimate is also kept in ``item.ab_estimate``.

    Raises
    ------
    ValueError
        When the samples cannot form a ratio (a median at or below the overhead floor).
    """
    if item.old_key is not None:
        if settings.analysis == "paired":
            ab = estimate_paired(item.old_samples, item.new_samples, settings.samples_per_block, settings.confidence)
        else:
            seed = (settings.seed * 1_000_003 + zlib.crc32(item.case.label().encode())) % 2**32
            ab = estimate_ab(item.old_samples, item.new_samples, settings.confidence, resamples, seed)
        item.ab_estimate = ab
        return ab if item.baseline is None else estimate_referenced(ab, item.baseline, settings.confidence)
    if item.baseline is None:
        return record_estimate(item.new_samples, settings.confidence)
    baseline = item.baseline if (item.baseline.corrected and yardstick_now is not None) else item.baseline_raw
    return estimate_stored(baseline, item.new_samples, yardstick_now if baseline.corrected else None,
                           settings.confidence)


def collect(items: Sequence[GateItem], sampler: Any, settings: GateSettings, yardstick: list[float],
            clock: Callable[[], float] = time.monotonic, on_done: Callable[[GateItem], None] | None = None) -> float:
    """Sample the items until each is conclusive, full, or the budget is spent; return the seconds used.

    Round 1 gives every item :attr:`GateSettings.initial_pairs` block pairs, whatever the
    budget. Within a round the items take turns, :data:`PAIRS_PER_VISIT` pairs at a time, so
    each case's samples are spread over the whole round rather than taken in one burst: a
    slow stretch of the machine (one to several seconds, see :mod:`fftgauge.harness.timing.runner`) then
    lands on every case a little instead of on one case entirely, which matters most in
    stored mode, where nothing measured at the same moment divides it out. Each later round re-evaluates the items (with
    :attr:`GateSettings.quick_resamples`) and gives each inconclusive one as many pairs as it
    has had so far (doubling), at most what keeps it under
    :attr:`GateSettings.max_samples` and its share of the remaining budget (from its
    measured seconds per pair), at least one. A round stops early when the budget is spent.
    The items are visited in a seeded random order in every round.

    ``sampler.sample(item, pairs)`` returns a :class:`~fftgauge.harness.gate.sampling.Draw` and may
    raise :class:`BackendFailure` (the item becomes an error and the others go on);
    yardstick samples are appended to ``yardstick``.
    """
    rng = random.Random(settings.seed)
    start = clock()
    active = [it for it in items if it.status == "ok"]
    pairs = {id(it): settings.initial_pairs for it in active}
    first = True
    while active:
        rng.shuffle(active)
        owed = {id(it): pairs[id(it)] for it in active}
        while any(owed[id(it)] > 0 and it.status == "ok" for it in active):
            if not first and clock() - start >= settings.budget_seconds:
                break
            for it in active:
                if owed[id(it)] <= 0 or it.status != "ok":
                    continue
                if not first and clock() - start >= settings.budget_seconds:
                    break
                n = min(PAIRS_PER_VISIT, owed[id(it)])
                owed[id(it)] -= n
                take_pairs(it, sampler, n, yardstick, clock)
        first = False
        yard_now = yardstick_summary(yardstick, settings.confidence)
        still = []
        for it in active:
            if it.status != "ok":
                continue
            try:
                est = evaluate(it, settings, yard_now, settings.quick_resamples)
            except ValueError as exc:
                it.fail(str(exc))
                continue
            if not is_conclusive(est, settings.threshold) and len(it.new_samples) < settings.max_samples:
                still.append(it)
            elif on_done is not None:
                on_done(it)
        remaining = settings.budget_seconds - (clock() - start)
        if remaining <= 0 or not still:
            for it in still:
                if on_done is not None:
                    on_done(it)
            break
        share = remaining / len(still)
        for it in still:
            room = max(1, (settings.max_samples - len(it.new_samples)) // settings.samples_per_block)
            afford = int(share / it.pair_seconds) if it.pair_seconds > 0 else it.pairs_taken
            pairs[id(it)] = max(1, min(it.pairs_taken, room, afford))
        active = still
    return clock() - start


def take_pairs(it: GateItem, sampler: Any, n: int, yardstick: list[float], clock: Callable[[], float]) -> None:
    """Take ``n`` block pairs of ``it`` and keep its samples and seconds per pair (a failing
    backend makes the item an error)."""
    t0 = clock()
    try:
        draw = sampler.sample(it, n)
    except BackendFailure as exc:
        it.fail(f"failed while being timed: {exc}")
        return
    spent = clock() - t0
    it.pair_seconds = (it.pair_seconds * it.pairs_taken + spent) / (it.pairs_taken + n)
    it.pairs_taken += n
    it.old_samples.extend(draw.old)
    it.new_samples.extend(draw.new)
    yardstick.extend(draw.yardstick)


def yardstick_summary(samples: Sequence[float], confidence: float) -> dict[str, Any] | None:
    """Return the yardstick record of ``samples`` (:func:`fftgauge.harness.gate.yardstick.summarise`), None for none."""
    from fftgauge.harness.gate.yardstick import summarise

    return summarise(samples, confidence) if samples else None


def finalise(items: Sequence[GateItem], settings: GateSettings, yardstick_now: dict[str, Any] | None) -> None:
    """Compute every measured item's final estimate and verdict (Holm across the compared ones), in place."""
    compared = []
    for it in items:
        if it.status != "ok":
            continue
        try:
            it.estimate = evaluate(it, settings, yardstick_now, settings.resamples)
        except ValueError as exc:
            it.fail(str(exc))
            continue
        it.conclusive = is_conclusive(it.estimate, settings.threshold)
        if not math.isnan(it.estimate.ratio):
            compared.append(it)
    for it, (verdict, significant, p_holm) in zip(compared, decide([it.estimate for it in compared],
                                                                   settings.threshold, settings.alpha)):
        it.timing_verdict, it.significant, it.p_holm = verdict, significant, p_holm

