"""The gate's ``instructions`` metric: every case's instructions per transform counted under
valgrind's cachegrind (:mod:`fftgauge.harness.counts`), the ratio new/old with its interval,
and the verdicts by the timing modes' rule (:func:`fftgauge.harness.gate.decision.decide`:
Holm across the cases, the threshold on the ratio).

A/B mode counts both sides of every case, record mode the candidates alone; stored mode counts
the candidates and compares them with the stored counts pooled over the last K usable runs
(:func:`fftgauge.harness.gate.counted_baseline.stored_counts`); referenced mode counts both
sides and compares this run's A/B count ratio with the stored A/B count ratios
(:func:`fftgauge.harness.gate.estimates.estimate_referenced`). Backends are loaded in this
process only to read their label and claims (:class:`CountSampler`); every count is made in
fresh processes under valgrind.

A shaped case (``--shapes``) is counted as a 1-D one: the driver plans it, lays its input out
(:func:`fftgauge.harness.shapes.case.lay_out`) and calls it K and 2K times; its count is per
call, one transform of the whole array (``batch`` transforms of N points), as a shaped row's
``seconds`` is per call.
"""

from __future__ import annotations

import math
from typing import Any, Sequence

from fftgauge.harness.cases import Case
from fftgauge.harness.errors import BackendFailure, UsageError
from fftgauge.harness.gate.adaptive import GateItem
from fftgauge.harness.gate.decision import decide, is_conclusive
from fftgauge.harness.gate.estimates import Estimate
from fftgauge.harness.gate.request import GateRequest
from fftgauge.harness.shapes.case import ShapeCase

#: The ``method`` of a count estimate (a row's ``method`` field).
COUNT_METHOD = "instructions: Welch t on log counts"


class CountSampler:
    """What :func:`fftgauge.harness.gate.run.build_items` needs of a sampler, for counting:
    the sides' SPECs by key and their claims, read in this process."""

    def __init__(self, req: GateRequest):
        self.specs = ({"old": req.old_spec, "new": req.new_spec} if req.mode in ("ab", "referenced")
                      else {s: s for s in req.specs})
        self.threads = req.threads

    def __enter__(self) -> "CountSampler":
        return self

    def __exit__(self, *exc: Any) -> None:
        return None

    def claims(self, key: str, cases: list[Case | ShapeCase]) -> Any:
        """Return the backend's :class:`~fftgauge.backends.claims.BackendClaims` for ``cases`` (1-D or shaped).

        Raises
        ------
        UsageError
            When the SPEC cannot be loaded or the backend fails while describing itself.
        """
        from fftgauge.backends.registry import load_backend
        from fftgauge.harness.execution import jobs
        from fftgauge.harness.shapes.fields import case_fields

        backend = load_backend(self.specs[key], self.threads)
        try:
            return jobs.backend_claims(backend, [case_fields(c) for c in cases], None)
        except Exception as exc:  # a backend's own failure while describing itself
            raise UsageError(f"backend {self.specs[key]!r} failed while describing itself: {exc}") from None

    def release(self, item: Any) -> None:
        """Nothing to release: every count is made in processes of its own."""


def count_estimate(new: Any, old: Any, confidence: float) -> Estimate:
    """Return the :class:`~fftgauge.harness.gate.estimates.Estimate` of two sides' counts
    (:func:`fftgauge.harness.counts.measure.count_ratio`); the seconds fields are None."""
    from fftgauge.harness.counts.measure import count_ratio

    r = count_ratio(new, old, confidence)
    return Estimate(ratio=r.ratio, ratio_low=r.ratio_low, ratio_high=r.ratio_high, p_value=r.p_value,
                    seconds=None, seconds_low=None, seconds_high=None, baseline_seconds=None, ratio_raw=r.ratio,
                    corrected=False, method=COUNT_METHOD)


def count_items(items: Sequence[GateItem], sampler: CountSampler, req: GateRequest, quiet: bool = True) -> None:
    """Count every ``ok`` item (both sides in A/B mode), then decide the compared ones, in place.

    A side that fails under valgrind, or a case too slow to count within ``--timeout``, makes
    the item an ``error`` row with the one line that says why.
    """
    from fftgauge.harness.counts.cachegrind import calls_for, require_valgrind
    from fftgauge.harness.counts.measure import count_sides
    from fftgauge.harness.execution.dispatch import Progress
    from fftgauge.harness.gate.counted_baseline import stored_counts
    from fftgauge.harness.gate.estimates import estimate_referenced

    s = req.settings
    valgrind = require_valgrind()
    progress = Progress(total=sum(it.status == "ok" for it in items), quiet=quiet, desc="gate (counting)")
    try:
        for it in items:
            if it.status != "ok":
                continue
            keys = [it.new_key] + ([it.old_key] if it.old_key else [])
            calls = s.count_transforms or calls_for(it.case)
            try:
                got = count_sides(valgrind, {k: sampler.specs[k] for k in keys}, it.case, seed=req.seed,
                                  calls=calls, repeats=s.count_repeats, threads=req.threads,
                                  cache_sim=s.cache_sim, timeout=req.timeout_seconds)
            except BackendFailure as exc:
                it.fail(f"failed while counting: {exc}")
                progress.advance(note=it.case.label())
                continue
            it.counts = {"new": got[it.new_key], "old": got.get(it.old_key) if it.old_key else None}
            if req.mode == "stored":
                it.counts["old"], it.counts["stored_runs"] = stored_counts(req.stored_runs, it.baseline_backend,
                                                                           it.case)
            wander = max(c.spread for c in got.values())
            if wander > s.threshold / 4:
                it.message = (f"the counts wandered by {wander * 100:.2g}% between repeats (more than a quarter "
                              f"of the threshold): something changed between runs (a source file edited, a "
                              f"backend that reads the clock or spawns threads)")
            if it.counts["old"] is not None:
                it.estimate = count_estimate(it.counts["new"], it.counts["old"], s.confidence)
                if req.mode == "referenced":
                    it.ab_estimate = it.estimate
                    it.estimate = estimate_referenced(it.ab_estimate, it.baseline, s.confidence)
                it.conclusive = is_conclusive(it.estimate, s.threshold)
            else:
                it.conclusive = True
            progress.advance(note=it.case.label())
    finally:
        progress.close()
    compared = [it for it in items if it.status == "ok" and it.estimate is not None
                and not math.isnan(it.estimate.ratio)]
    for it, (verdict, significant, p_holm) in zip(compared, decide([it.estimate for it in compared],
                                                                   s.threshold, s.alpha)):
        it.timing_verdict, it.significant, it.p_holm = verdict, significant, p_holm


def count_fields(it: GateItem) -> dict[str, Any]:
    """Return a counted item's row fields: ``instructions`` (the candidate's median per
    transform), ``instructions_spread`` (its repeats' (largest - smallest) / median),
    ``baseline_instructions`` and ``baseline_instructions_spread`` (the old side, A/B mode),
    ``ll_misses``/``baseline_ll_misses`` (simulated last-level misses per transform, with
    ``--cache-sim``), ``count_transforms`` (K), ``count_repeats``, ``instructions_repeats`` and
    ``baseline_instructions_repeats`` (per repeat); in stored mode the old side is the stored
    counts and ``baseline_runs`` the stored runs holding the case."""
    if not it.counts:
        return {}
    new, old = it.counts["new"], it.counts.get("old")
    out = {"instructions": new.median, "instructions_spread": new.spread, "ll_misses": new.ll_median,
           "count_transforms": new.calls, "count_repeats": len(new.instructions),
           "instructions_repeats": list(new.instructions),
           "sampling_seconds": new.seconds + (old.seconds if old else 0.0)}
    if old is not None:
        out.update(baseline_instructions=old.median, baseline_instructions_spread=old.spread,
                   baseline_ll_misses=old.ll_median, baseline_instructions_repeats=list(old.instructions))
    if it.counts.get("stored_runs") is not None:
        out["baseline_runs"] = it.counts["stored_runs"]
    return out


def record_fingerprint(doc: dict[str, Any]) -> None:
    """Add this run's count fingerprint (:func:`fftgauge.harness.counts.fingerprint.count_fingerprint`)
    to the document's ``counting`` record, and with ``--cache-sim`` the simulated caches
    (``simulated_caches``: level -> [bytes, ways, line bytes]), in place.

    Raises
    ------
    UsageError
        When valgrind is missing or the interpreter does not run under it.
    """
    from fftgauge.harness.counts.cachegrind import require_valgrind
    from fftgauge.harness.counts.fingerprint import count_fingerprint

    from fftgauge.harness.counts.cachegrind import SIMULATED_CACHES

    counting = doc.setdefault("counting", {})
    counting["fingerprint"] = count_fingerprint(require_valgrind())
    if counting.get("cache_sim"):
        counting["simulated_caches"] = {level: list(v) for level, v in SIMULATED_CACHES.items()}
