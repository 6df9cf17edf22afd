"""Size patterns: which rule over n separates the sizes where a backend fails from those where
it passes, and which code path that rule points at.

After a battery run, :func:`size_patterns` looks at every backend x kind x precision x norm
with at least one failing and one passing size and tries a small vocabulary of rules that
mean something in FFT code (:data:`RULES`): divisible by a small prime p (that radix's
pass), a factor p appearing at least twice (the twiddles between two radix-p passes),
prime (the Rader or Bluestein path), prime above a bound (Bluestein used from some size
on), n above or below a bound (a large-size or small-size path), odd or even, power of two
or not, 7-smooth or not. A rule *fits* when it holds at every failing size and at no passing
size. The simplest fitting rule (fewest free choices: a bound counts as one) is named with
the code path it suggests; other fitting rules of the same or one more choice are listed as
also consistent. When none fits, the pattern says so rather than invent one.

The result is a list of plain dicts (JSON-able), the ``size_patterns`` field of the
``fftgauge-check/1`` document (an optional top-level field; readers that do not know it
ignore it).
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any, Callable, Iterable, Mapping

from fftgauge.harness.sizes import is_prime

#: The small primes whose radix passes the rules name.
SMALL_PRIMES = (3, 5, 7, 11, 13)
#: The largest prime factor of a "smooth" size (the radices common FFT libraries have codelets for).
SMOOTH_BOUND = 7
#: Fitting rules with at most this many more choices than the simplest are listed as also consistent.
ALSO_SLACK = 0.5
#: At most this many also-consistent rules are listed.
ALSO_LISTED = 3
#: Sizes below this are trivial transforms (n = 1: X = x; n = 2: x0 +- x1, no twiddle): a bound
#: that only sets them apart is no size path of its own.
TRIVIAL_BELOW = 3


def prime_factors(n: int) -> list[int]:
    """Return the prime factors of ``n >= 1`` with multiplicity, smallest first (trial division)."""
    out, p = [], 2
    while p * p <= n:
        while n % p == 0:
            out.append(p)
            n //= p
        p += 1
    if n > 1:
        out.append(n)
    return out


def is_smooth(n: int, bound: int = SMOOTH_BOUND) -> bool:
    """Return True when every prime factor of ``n`` is at most ``bound`` (n = 1 is smooth)."""
    return all(p <= bound for p in prime_factors(n))


def _pow2(n: int) -> bool:
    return n >= 1 and n & (n - 1) == 0


@dataclass(frozen=True)
class Rule:
    """One rule over n: a ``code`` (stable, for the JSON), the ``words`` (``"n divisible by 3"``),
    the code path it ``suggests``, its ``cost`` (simplicity: lower is simpler) and the predicate."""

    code: str
    words: str
    suggests: str
    cost: float
    holds: Callable[[int], bool]


def fixed_rules() -> list[Rule]:
    """Return the rules without a bound, simplest first."""
    rules = [
        Rule("odd", "n odd", "the odd-length handling (for a real transform: packing the half spectrum of odd n)",
             1.0, lambda n: n % 2 == 1),
        Rule("even", "n even", "the radix-2 pass or the even-length packing of a real transform", 1.0,
             lambda n: n % 2 == 0),
        Rule("pow2", "n a power of two", "the power-of-two (radix-2/4) path", 1.0, _pow2),
        Rule("not-pow2", "n not a power of two", "the mixed-radix or generic path taken when n is not a power of two",
             1.0, lambda n: not _pow2(n)),
        Rule("prime", "n prime", "the prime-size path (Rader's or Bluestein's algorithm)", 1.0,
             lambda n: n >= 2 and is_prime(n)),
    ]
    for p in SMALL_PRIMES:
        rules.append(Rule(f"divisible-by-{p}", f"n divisible by {p}",
                          f"the radix-{p} pass (its butterfly or its twiddle factors)", 1.0,
                          lambda n, p=p: n % p == 0))
    rules += [
        Rule("smooth", f"n {SMOOTH_BOUND}-smooth (no prime factor above {SMOOTH_BOUND})",
             "the codelet path for small radices", 1.5, lambda n: is_smooth(n)),
        Rule("not-smooth", f"n with a prime factor above {SMOOTH_BOUND}",
             "the generic-radix or chirp (Bluestein) path for large prime factors", 1.5, lambda n: not is_smooth(n)),
        Rule("factor-2-twice", "n divisible by 4 (the factor 2 at least twice)",
             "the twiddles between two radix-2 passes, or a radix-4 pass", 2.0, lambda n: n % 4 == 0),
    ]
    for p in SMALL_PRIMES:
        rules.append(Rule(f"factor-{p}-twice", f"n divisible by {p * p} (the factor {p} at least twice)",
                          f"the twiddles between two radix-{p} passes (the second radix-{p} stage)", 2.0,
                          lambda n, p=p: n % (p * p) == 0))
    return rules


def bound_rules(failing: list[int], passing: list[int]) -> list[Rule]:
    """Return the rules with a bound taken from the data (each fits by construction when it is
    returned, but is re-tested like the others): n above the largest passing size, n below
    the smallest passing size, prime above the largest passing prime."""
    out = []
    if max(passing) < min(failing) and max(passing) < TRIVIAL_BELOW:
        b = max(passing)
        out.append(Rule("nontrivial", f"n > {b} (every size from {min(failing)} up; n <= {b} needs no twiddle)",
                        f"code every transform of more than {b} point{'s' if b > 1 else ''} runs (the twiddles, a "
                        f"butterfly constant, or a step every path shares)", 1.0, lambda n, b=b: n > b))
    elif max(passing) < min(failing):
        b = max(passing)
        out.append(Rule("above", f"n > {b} (every size from {min(failing)} up)",
                        f"the large-size path (a different algorithm, blocking or table used above {b} points)", 2.0,
                        lambda n, b=b: n > b))
    out += compound_rules(failing, passing)
    if min(passing) > max(failing):
        b = min(passing)
        out.append(Rule("below", f"n < {b} (every size up to {max(failing)})",
                        f"the small-size path (the base-case codelets below {b} points)", 2.0,
                        lambda n, b=b: n < b))
    passing_primes = [n for n in passing if n >= 2 and is_prime(n)]
    if passing_primes and all(n >= 2 and is_prime(n) for n in failing) and max(passing_primes) < min(failing):
        b = max(passing_primes)
        out.append(Rule("prime-above", f"n prime and n > {b} (every prime from {min(failing)} up)",
                        f"the path for large primes (Bluestein's chirp-z: its padded length or its chirp filter), "
                        f"used above {b}", 2.5, lambda n, b=b: n > b and is_prime(n)))
    return out


def compound_rules(failing: list[int], passing: list[int]) -> list[Rule]:
    """Return the rules "R and n > b" for each rule R of :func:`fixed_rules` (prime aside:
    ``prime-above`` is that one) that holds at every failing size, with b the largest passing
    size where R holds (a path for such sizes taken from some size on). When b is below
    :data:`TRIVIAL_BELOW` the bound only sets the trivial sizes apart and the rule is R at
    every nontrivial size (a little dearer than R)."""
    out = []
    for rule in fixed_rules():
        if rule.code == "prime" or not all(rule.holds(n) for n in failing):
            continue
        under = [n for n in passing if rule.holds(n)]
        if not under or max(under) >= min(failing):
            continue
        b = max(under)
        if b < TRIVIAL_BELOW:
            out.append(Rule(rule.code, f"{rule.words}, n > {b} (n <= {b} needs no twiddle)", rule.suggests,
                            rule.cost + 0.25, lambda n, r=rule, b=b: r.holds(n) and n > b))
        else:
            out.append(Rule(f"{rule.code}-above", f"{rule.words} and n > {b} (every such size from {min(failing)} up)",
                            f"the large-size path for {rule.words} (a different algorithm, blocking or table used "
                            f"above {b} points)", rule.cost + 2.0, lambda n, r=rule, b=b: r.holds(n) and n > b))
    return out


def infer_rule(failing: Iterable[int], passing: Iterable[int]) -> dict[str, Any]:
    """Return the size pattern of one group: the simplest rule that holds at every failing
    size and at no passing size.

    Returns
    -------
    dict
        ``rule`` (a code of :func:`fixed_rules` or ``above``/``below``/``prime-above``; None
        when no rule fits or there is nothing to separate), ``words``, ``suggests`` (the code
        path), ``also`` (other fitting rules' words), ``sentence`` (the finding in one line),
        ``failing_sizes`` and ``passing_sizes`` (sorted).
    """
    failing, passing = sorted(set(failing)), sorted(set(passing))
    base: dict[str, Any] = {"failing_sizes": failing, "passing_sizes": passing, "rule": None, "words": None,
                            "suggests": None, "also": []}
    if not failing:
        return {**base, "sentence": "no failing size"}
    if not passing:
        return {**base, "sentence": f"fails at every size tried ({len(failing)}): no size rule to tell apart"}
    fits = [r for r in fixed_rules() + bound_rules(failing, passing)
            if all(r.holds(n) for n in failing) and not any(r.holds(n) for n in passing)]
    if not fits:
        return {**base, "sentence": (f"no size rule fits: the {len(failing)} failing sizes share none of the rules "
                                     f"tried (divisibility by 2, 3, 5, 7, 11, 13 once or twice, prime, n above a "
                                     f"bound, odd/even, power of two, {SMOOTH_BOUND}-smooth, and each of these from a "
                                     f"bound on)")}
    fits.sort(key=lambda r: r.cost)
    best = fits[0]
    also = [r.words for r in fits[1:] if r.cost <= best.cost + ALSO_SLACK][:ALSO_LISTED]
    count = f"the {len(failing)} failing sizes are" if len(failing) > 1 else "the one failing size is"
    sentence = (f"{count} exactly those with {best.words} among the {len(failing) + len(passing)} that ran: "
                f"look at {best.suggests}")
    if also:
        sentence += f" (also consistent: {'; '.join(also)})"
    return {**base, "rule": best.code, "words": best.words, "suggests": best.suggests, "also": also,
            "sentence": sentence}


def _case_outcomes(rows: Iterable[Mapping[str, Any]]) -> dict[tuple, dict[int, str]]:
    """Return per (backend, kind, dtype, norm) the outcome of each size: ``fail`` (some check
    failed), ``pass`` (every check that ran passed) or ``other`` (errors or skips only)."""
    seen: dict[tuple, dict[int, set[str]]] = {}
    for r in rows:
        key = (r["backend"], r["kind"], r["dtype"], r.get("norm") or "backward")
        seen.setdefault(key, {}).setdefault(int(r["n"]), set()).add(str(r["status"]))
    out: dict[tuple, dict[int, str]] = {}
    for key, sizes in seen.items():
        out[key] = {n: "fail" if "fail" in st else ("pass" if st <= {"pass", "skip"} and "pass" in st else "other")
                    for n, st in sizes.items()}
    return out


def size_patterns(rows: Iterable[Mapping[str, Any]]) -> list[dict[str, Any]]:
    """Return the size pattern of every backend x kind x dtype x norm with a failing size.

    A size counts as failing when some check failed there (a wrong answer), as passing when
    every check that ran passed; sizes that only errored or were skipped count as neither.
    Each entry is :func:`infer_rule`'s dict with ``backend``, ``kind``, ``dtype`` and ``norm``.
    """
    out = []
    for (backend, kind, dtype, norm), outcome in _case_outcomes(rows).items():
        failing = [n for n, o in outcome.items() if o == "fail"]
        if not failing:
            continue
        passing = [n for n, o in outcome.items() if o == "pass"]
        out.append({"backend": backend, "kind": kind, "dtype": dtype, "norm": norm,
                    **infer_rule(failing, passing)})
    return out


def pattern_lines(rows: Iterable[Mapping[str, Any]]) -> list[str]:
    """Return one terminal line per group with a failing size: ``backend kind dtype: sentence``
    (the norm too when it is not ``backward``)."""
    lines = []
    for p in size_patterns(rows):
        norm = "" if p["norm"] == "backward" else f" norm={p['norm']}"
        lines.append(f"  {p['backend']} · {p['kind']} {p['dtype']}{norm}: {p['sentence']}")
    return lines
