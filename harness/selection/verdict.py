"""The answer of ``fftgauge pick`` in words, computed from the ranked candidates.

Three kinds of sentence:

- speed: the first-ranked backend against the second (the ratio of their amortised times
  per workload call, with the interval from the ends of both intervals), and whether their
  accuracy is equal (worst errors within a factor :data:`EQUAL_ACCURACY_FACTOR` of each
  other) or what it is;
- planning: for each recommended backend whose planning takes at least
  :data:`PLANNING_WORTH_SAYING_SECONDS` per workload call, the number of calls per plan
  above which its plans pay off against the best backend that plans for less:
  ``(plan_b - plan_a) / (seconds_a - seconds_b)`` (planning spent once, saved on every
  call), or that they never do when it is not faster per call;
- exclusions: each backend not recommended, with its reasons.
"""

from __future__ import annotations

import math

from fftgauge.harness.selection.ranking import Candidate
from fftgauge.harness.selection.workload import Workload

#: Worst errors within this factor of each other count as equal accuracy.
EQUAL_ACCURACY_FACTOR = 2.0
#: Planning per workload call below this is not worth a sentence (0.1 ms).
PLANNING_WORTH_SAYING_SECONDS = 1e-4


def seconds_text(seconds: float) -> str:
    """Return a duration with 3 significant digits and a unit: ``9.87 us``, ``0.4 s``, ``12.3 ms``."""
    for unit, scale in (("s", 1.0), ("ms", 1e-3), ("us", 1e-6), ("ns", 1e-9)):
        if abs(seconds) >= scale or unit == "ns":
            return f"{seconds / scale:.3g} {unit}"
    return f"{seconds:.3g} s"


def round_up_calls(calls: float) -> int:
    """Return ``calls`` rounded up to two significant figures (1234 -> 1300), at least 1
    (a quotient a rounding error above a whole number, 1000.0000000000001, counts as it)."""
    whole = max(1, math.ceil(calls * (1 - 1e-12)))
    step = 10 ** max(0, len(str(whole)) - 2)
    return int(math.ceil(whole / step) * step)


def accuracy_phrase(a: Candidate, b: Candidate) -> str:
    """Return ``at equal accuracy (worst 2.1 and 2.4 eps)`` or the two worst errors when they
    differ; for a fixed-point workload the two worst SQNRs (``, with worst SQNRs of 51.1 and 47.1 dB``)."""
    if a.worst_eps is None or b.worst_eps is None:
        if a.worst_sqnr_db is not None and b.worst_sqnr_db is not None:
            return f", with worst SQNRs of {a.worst_sqnr_db:.1f} and {b.worst_sqnr_db:.1f} dB"
        return ""
    low, high = sorted((max(a.worst_eps, 1e-300), max(b.worst_eps, 1e-300)))
    if high / low <= EQUAL_ACCURACY_FACTOR:
        return f" at equal accuracy (worst errors {a.worst_eps:.2g} and {b.worst_eps:.2g} eps)"
    return f", with a worst error of {a.worst_eps:.2g} eps against {b.worst_eps:.2g} eps"


def speed_sentence(workload: Workload, best: Candidate, second: Candidate | None) -> str:
    """Return the sentence comparing the first-ranked backend with the second (or alone)."""
    if second is None:
        return (f"for {workload.phrase()}, {best.backend} is the only backend recommended: "
                f"{seconds_text(best.amortised_seconds)} per call, planning included")
    ratio = second.amortised_seconds / best.amortised_seconds
    low = second.amortised_low / best.amortised_high
    high = second.amortised_high / best.amortised_low
    interval = f"interval {low:.2g}x to {high:.2g}x"
    if low > 1.0:
        return (f"for {workload.phrase()}, {best.backend} is {ratio:.2g}x faster than {second.backend} "
                f"({interval}; {seconds_text(best.amortised_seconds)} against "
                f"{seconds_text(second.amortised_seconds)} per call, planning included){accuracy_phrase(best, second)}")
    return (f"for {workload.phrase()}, {best.backend} and {second.backend} are equally fast within the "
            f"measurement (ratio {ratio:.2g}x, {interval}){accuracy_phrase(best, second)}; "
            f"{best.backend} ranks first on its median")


def planning_sentences(workload: Workload, recommended: list[Candidate]) -> list[str]:
    """Return a sentence per recommended backend whose planning is worth mentioning."""
    out = []
    for b in recommended:
        if b.plan_seconds is None or b.plan_seconds < PLANNING_WORTH_SAYING_SECONDS:
            continue
        cheaper = [a for a in recommended if a is not b and a.plan_seconds < b.plan_seconds]
        if not cheaper:
            continue
        a = min(cheaper, key=lambda c: c.amortised_seconds)
        head = f"{b.backend} plans take {seconds_text(b.plan_seconds)}"
        if b.seconds < a.seconds:
            calls = (b.plan_seconds - a.plan_seconds) / (a.seconds - b.seconds)
            verdict = "so they pay off at your" if calls <= workload.calls_per_plan else "more than your"
            out.append(f"{head}, worth it against {a.backend} above {round_up_calls(calls):,} calls per plan "
                       f"({verdict} {workload.calls_per_plan:,})")
        else:
            out.append(f"{head} and never pay off against {a.backend}, which is also faster per call")
    return out


def exclusion_sentences(excluded: list[Candidate], most_reasons: int = 3) -> list[str]:
    """Return a sentence per backend not recommended: its first reasons (a count of the rest),
    the first failing check in full and the other failing checks by name."""
    out = []
    for c in excluded:
        other = [r for r in c.reasons if not r.startswith("fails the battery")]
        shown = other[:most_reasons]
        if len(other) > most_reasons:
            shown.append(f"and {len(other) - most_reasons} more such case(s)")
        if c.failed_checks:
            also = [line.split(" at ")[0] for line in c.failed_checks[1:]]
            shown.append(f"fails the battery: {c.failed_checks[0]}" + (f"; also {', '.join(also)}" if also else ""))
        out.append(f"{c.backend} is not recommended: it {'; '.join(shown)}")
    return out


def summary_sentences(workload: Workload, ranked: list[Candidate]) -> list[str]:
    """Return the answer in words: speed, planning, exclusions (or why nothing is recommended)."""
    good = [c for c in ranked if c.recommended]
    bad = [c for c in ranked if not c.recommended]
    if not good:
        return [f"no backend can be recommended for {workload.phrase()}"] + exclusion_sentences(bad)
    lines = [speed_sentence(workload, good[0], good[1] if len(good) > 1 else None)]
    if len(good) > 2:
        last = good[-1]
        lines.append(f"the slowest recommended, {last.backend}, takes "
                     f"{last.amortised_seconds / good[0].amortised_seconds:.2g}x as long as {good[0].backend}")
    return lines + planning_sentences(workload, good) + exclusion_sentences(bad)
