"""What a battery run found, in words: one finding per distinct cause (backend, check and
diagnosis, or the way a case could not run), with every size it covers and the worst case's
own message, and the verdict of a run.

Nothing is hidden behind "and N more": two causes are two findings, and a finding names
all its sizes (compressed as ``A..B`` runs). The diagnosis codes' meanings are the
contract's vocabulary.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any, Iterable, Mapping

from fftgauge.harness.dft import machine_epsilon  # accuracy_plot imports it from here too

#: What each diagnosis code means (the contract's vocabulary, "diagnosis" table, and the codes
#: this project added, docs/reference.md); a code missing here is shown by its name alone.
DIAGNOSIS_MEANINGS = {
    "sign": "the transform uses the opposite exponent sign (or conjugates)",
    "scale": "right shape of answer, wrong normalisation (by N, 1/N, 1/sqrt(N), ...)",
    "bit-reversed": "outputs are right but in bit-reversed order",
    "shifted": "outputs are right but circularly shifted (for example a centred spectrum)",
    "precision": "errors at the level of a lower precision than the one asked for",
    "truncated-size": "the size was changed internally (zero-padding or truncation)",
    "input-modified": "the caller's input array was changed",
    "nondeterministic": "the same input gives different outputs",
    "dtype": "output dtype of lower precision than the input's",
    "shape": "output length or shape is wrong",
    "nonfinite": "NaN/Inf inputs do not propagate as the DFT requires, or finite inputs give NaN/Inf",
    "real-only": "the imaginary part of the input is ignored",
    "thread-unsafe": "results differ when the backend is called from several threads at once",
    "overflow": "only the largest outputs are wrong, some with their sign flipped: a fixed-point sum wrapped around",
    "user-limit": "within the built-in bound but above the user's own limit (--limit, --limits)",
    "localised": "wrong in a few output bins (or one half of the spectrum) only, the rest right: one wrong twiddle, "
                 "butterfly or symmetry step, not rounding",
    "time-shifted": "every bin off by a phase growing linearly with k: the input delayed by d samples (d may be fractional)",
    "output-aliased": "the array returned is the function's own buffer: the caller's previous result changes on the next call",
    "scaling-shift": "a fixed-point output is right but shifted by other bits than its declared output shift",
    "rounding": "a fixed-point SQNR matching a radix-2 that truncates where rounding was declared (or the reverse)",
    "twiddle-bits": "a fixed-point SQNR matching a radix-2 whose twiddle factors have too few bits",
    "wrong-axis": "the transform runs along other axes than the ones asked for",
    "transposed": "the right answer with its axes transposed",
    "batch-leak": "the rows of a batch leak into each other's outputs",
    "layout": "right for a C-ordered input, wrong for the same values in another memory layout",
    "hermitian-half": "an N-D inverse real transform that treats every line along the halved axis as a Hermitian half "
                      "by itself",
    "unknown": "wrong, and none of the known bugs explains it",
}


def is_shaped_row(row: Mapping[str, Any]) -> bool:
    """Return True for a row of a shaped case (its ``shape`` a list), False for a 1-D one
    (``shape`` absent, None, or NaN in a row read back from a table)."""
    return isinstance(row.get("shape"), (list, tuple)) and len(row["shape"]) > 0


def shape_words(row: Mapping[str, Any]) -> str:
    """Return the shape, axes and layout of a shaped case's row in words, ``"12x12x12 axes
    (0,1,2) C"`` (axes as the case lists them); ``""`` for a row of a 1-D case."""
    if not is_shaped_row(row):
        return ""
    shape = row["shape"]
    axes = ",".join(str(a) for a in row.get("axes") or ())
    return f"{'x'.join(str(n) for n in shape)} axes ({axes}) {row.get('layout') or 'C'}"


def case_words(row: Mapping[str, Any]) -> str:
    """Return the case of a row in words: ``"fft float64 n = 1024"`` for a 1-D case, ``"fftn
    float64 12x12x12 axes (0,1,2) C"`` for a shaped one (:func:`shape_words`)."""
    where = shape_words(row) or f"n = {row.get('n')}"
    return f"{row.get('kind')} {row.get('dtype')} {where}"


def case_key(row: Mapping[str, Any]) -> tuple:
    """Return the key of the case a row belongs to: backend, kind, dtype, norm, n, and for a
    shaped case its shape, axes and layout (two shaped cases of one N are two cases)."""
    shaped = (tuple(row["shape"]), tuple(row.get("axes") or ()), row.get("layout") or "C") \
        if is_shaped_row(row) else ()
    return (row["backend"], row["kind"], row["dtype"], row.get("norm") or "backward", row["n"], *shaped)


def bound_eps_units(row: Mapping[str, Any]) -> float | None:
    """Return the row's limit in eps units: ``limit * eps_units / value`` (the row's own scale),
    else ``limit / eps`` of its precision; None without a positive limit."""
    limit = row.get("limit")
    if limit is None or limit <= 0:
        return None
    value, eps_units = row.get("value"), row.get("eps_units")
    if value and eps_units and value > 0 and eps_units > 0:
        return limit * eps_units / value
    return limit / machine_epsilon(row["dtype"])


@dataclass(frozen=True)
class Finding:
    """One cause of failing rows of one backend: ``cause`` (a diagnosis code; ``fail`` when a
    failing row has none; ``error`` for a case that could not run), the ``checks`` that saw
    it, the (kind, dtype) ``panels`` and ``sizes`` it covers, ``cases`` (distinct kind x
    dtype x norm x n), and the row quoted: the accuracy row with the largest error where the
    accuracy check saw it, else the row with the largest error in eps units, else the first."""

    backend: str
    cause: str
    checks: tuple[str, ...]
    panels: tuple[str, ...]
    sizes: tuple[int, ...]
    cases: int
    worst: Mapping[str, Any]
    #: The size patterns of the panels it covers (harness/battery/size_patterns.py), one sentence each.
    size_rules: tuple[str, ...] = ()
    #: The same patterns as dicts (``rule`` None where no rule fits), for the terminal lines.
    patterns: tuple[Mapping[str, Any], ...] = ()
    #: For a finding of shaped cases, each case's shape, axes and layout (:func:`shape_words`),
    #: named instead of its sizes; empty for 1-D cases.
    shapes: tuple[str, ...] = ()

    def where(self) -> str:
        """Return where the finding was seen: ``"n = 8..16, 32"``, or the shaped cases' shapes,
        axes and layouts joined by ``"; "``."""
        from fftgauge.harness.report.check_tables import compress_sizes

        return "; ".join(self.shapes) if self.shapes else f"n = {compress_sizes(self.sizes, limit=10**6)}"

    @property
    def could_not_run(self) -> bool:
        """Whether the backend raised, crashed, hung or returned something unusable (an ``error``)."""
        return self.cause == "error"

    def sentence(self) -> str:
        """Return the finding as one sentence: who, what it means, which checks saw it, where,
        and the quoted case's own message (with its bound, for an accuracy row)."""
        worst = self.worst
        message = str(worst.get("message") or "").strip()
        meaning = DIAGNOSIS_MEANINGS.get(self.cause)
        if self.could_not_run:
            what = "could not run (it raised, crashed, hung or returned something unusable)"
        elif meaning:
            what = self.cause + ("" if meaning in message else f" ({meaning})")
        elif self.cause != "fail":
            what = self.cause
        else:
            what = "wrong answer"
        if worst.get("check") == "accuracy" and not self.could_not_run:
            bound = bound_eps_units(worst)
            if bound is not None:
                against = "the user's limit" if worst.get("limit_source") == "user" else "a bound"
                message += f", against {against} of {bound:.3g} eps"
        checks = (f"the {self.checks[0]} check" if len(self.checks) == 1 else
                  f"{len(self.checks)} checks ({', '.join(self.checks)})")
        plural = "s" if self.cases != 1 else ""
        return (f"{self.backend} ({', '.join(self.panels)}): {what}, seen by {checks} at "
                f"{self.where()} ({self.cases} case{plural}). {worst.get('check')}, {case_words(worst)}: "
                f"{message or 'no message'}." + "".join(f" Sizes: {rule}." for rule in self.size_rules))


    def summary_lines(self, width: int | None = None) -> list[str]:
        """Return the finding as terminal lines of at most ``width`` columns (:func:`summary_width`
        when None), in two parts: who, what and where over n (the size rule, or that none fits),
        then where in the output and the likely line of code (the row's
        :func:`~fftgauge.harness.battery.localise.located` part), or the size rule's code path
        and the worst case's message. Each part is wrapped (:func:`wrap_line`), never cut: its
        words are the same at every width; every further detail is in the results file."""
        from fftgauge.harness.battery.localise import where_of

        width = summary_width() if width is None else width
        worst = self.worst
        first = _first_line(self, self._rule_words())
        found = None if self.could_not_run else where_of(str(worst.get("message") or ""))
        if found is not None:
            second = f"{found[0]}; likely: {found[1]}"
        else:
            suggests = [p["suggests"] for p in self.patterns if p.get("rule")]
            head = f"look at {suggests[0]}; " if suggests else ""
            case = case_words(worst).replace(" n = ", " n=")
            second = f"{head}worst {case}: {_first_part(worst.get('message'))}"
        return wrap_line(first, width) + wrap_line("    " + second, width)

    def _rule_words(self) -> str:
        """Return the size rule part of the first line ("" when the finding has no pattern)."""
        if self.could_not_run or not self.patterns:
            return ""
        ruled = [p for p in self.patterns if p.get("rule")]
        if ruled:
            return "sizes: " + "; ".join(dict.fromkeys(str(p["words"]).split(" (")[0] for p in ruled))
        if all(not p.get("passing_sizes") for p in self.patterns):
            return "fails at every size tried"
        return "no size rule fits"


#: The terminal width the summary uses when standard output is no terminal (and its least,
#: below which a hanging indent leaves too little room for words).
SUMMARY_WIDTH_DEFAULT = 120
SUMMARY_WIDTH_LEAST = 40
#: The indent of a wrapped line's continuation lines (deeper than any line's own indent).
SUMMARY_HANGING_INDENT = "      "


def summary_width() -> int:
    """Return the columns the terminal summary's findings fill: the terminal's (``COLUMNS``
    first), :data:`SUMMARY_WIDTH_DEFAULT` when there is none, at least :data:`SUMMARY_WIDTH_LEAST`."""
    import shutil

    return max(SUMMARY_WIDTH_LEAST, shutil.get_terminal_size((SUMMARY_WIDTH_DEFAULT, 24)).columns)


def wrap_line(line: str, width: int | None = None, hanging: str = SUMMARY_HANGING_INDENT) -> list[str]:
    """Return ``line`` wrapped at ``width`` columns (:func:`summary_width` when None): its own
    leading spaces kept on the first line, the continuation lines indented by ``hanging``.
    Words are never cut or dropped (a word longer than the room left stands on a line of its
    own, past the width); a line that fits is returned as it is."""
    import textwrap

    width = summary_width() if width is None else width
    if len(line) <= width:
        return [line]
    lead = line[: len(line) - len(line.lstrip(" "))]
    return textwrap.wrap(line.lstrip(" "), width=width, initial_indent=lead, subsequent_indent=hanging,
                         break_long_words=False, break_on_hyphens=False) or [line]


def _first_part(message: Any) -> str:
    """Return a message without the accuracy check's lead-in (its error figures), which the
    results file keeps: the part that says what was seen."""
    text = str(message or "no message").strip()
    marker = "worst on the "
    at = text.find(marker)
    if at >= 0:
        rest = text[at:].split("; ", 1)
        if len(rest) == 2:
            return rest[1]
    return text


#: How much of its lists a finding's first line names: checks, runs of sizes, panels (the
#: rest as "+N" and "... (N sizes)"; every one is in the results file).
CHECKS_SHOWN, SIZE_RUNS_SHOWN, PANELS_SHOWN = 8, 12, 4


def _first_line(found: "Finding", rule: str) -> str:
    """Return the first part of a finding (backend, cause, checks, cases, panels, sizes, size
    rule), whatever the terminal's width."""
    from fftgauge.harness.report.check_tables import compress_sizes

    plural = "s" if found.cases != 1 else ""
    checks = ", ".join(found.checks[:CHECKS_SHOWN]) + (
        f" +{len(found.checks) - CHECKS_SHOWN}" if len(found.checks) > CHECKS_SHOWN else "")
    panels = ", ".join(found.panels[:PANELS_SHOWN]) + (
        f" +{len(found.panels) - PANELS_SHOWN}" if len(found.panels) > PANELS_SHOWN else "")
    sizes = f" at {'; '.join(found.shapes)}" if found.shapes else \
        f" at n = {compress_sizes(found.sizes, limit=SIZE_RUNS_SHOWN)}"
    return (f"  {found.backend} · {found.cause} ({checks}): {found.cases} case{plural} ({panels}){sizes}"
            + (f"; {rule}" if rule else ""))


def _error_kind(message: Any) -> str:
    """Return an error message with its numbers blanked, so that one cause at many sizes is one key."""
    from fftgauge.harness.rows import message_cause

    return message_cause(message)[:200]


def findings(rows: Iterable[Mapping[str, Any]]) -> list[Finding]:
    """Return one :class:`Finding` per distinct cause of each backend among the ``fail`` and
    ``error`` rows: wrong answers by diagnosis code, could-not-run by message (numbers aside);
    wrong answers first, then could-not-run, each by backend."""
    rows = list(rows)
    groups: dict[tuple[bool, str, bool, str, str], list[Mapping[str, Any]]] = {}
    for row in rows:
        shaped = is_shaped_row(row)
        if row.get("status") == "fail":
            key = (False, row["backend"], shaped, row.get("diagnosis") or "fail", "")
        elif row.get("status") == "error":
            key = (True, row["backend"], shaped, "error", _error_kind(row.get("message")))
        else:
            continue
        groups.setdefault(key, []).append(row)
    from fftgauge.harness.battery.size_patterns import size_patterns

    line_rows = [r for r in rows if not is_shaped_row(r)]  # size patterns are rules over the n of 1-D cases
    patterns = {(p["backend"], p["kind"], p["dtype"], p["norm"]): p for p in size_patterns(line_rows)}
    out = []
    for (_, backend, shaped, cause, _), members in sorted(groups.items(), key=lambda kv: kv[0]):
        accuracy = [r for r in members if r.get("check") == "accuracy"]
        worst = max(accuracy or members, key=lambda r: r.get("eps_units") or 0.0)
        ruled = cause != "error" and not shaped
        out.append(Finding(
            backend=backend, cause=cause, checks=tuple(dict.fromkeys(str(r.get("check")) for r in members)),
            panels=tuple(dict.fromkeys(f"{r['kind']} {r['dtype']}" for r in members)),
            sizes=tuple(sorted({int(r["n"]) for r in members})),
            cases=len({case_key(r) for r in members}), worst=worst,
            size_rules=_size_rules(patterns, backend, members) if ruled else (),
            patterns=_patterns_of(patterns, backend, members) if ruled else (),
            shapes=tuple(dict.fromkeys(shape_words(r) for r in members)) if shaped else ()))
    return out


def _patterns_of(patterns: Mapping[tuple, Mapping[str, Any]], backend: str,
                 members: list[Mapping[str, Any]]) -> tuple[Mapping[str, Any], ...]:
    """Return the size patterns (dicts) of the panels ``members`` cover."""
    panels = dict.fromkeys((r["kind"], r["dtype"], r.get("norm") or "backward") for r in members)
    return tuple(p for p in (patterns.get((backend, *panel)) for panel in panels) if p is not None)


def _size_rules(patterns: Mapping[tuple, Mapping[str, Any]], backend: str,
                members: list[Mapping[str, Any]]) -> tuple[str, ...]:
    """Return the size-pattern sentences (with their panel) of the panels ``members`` cover."""
    panels = dict.fromkeys((r["kind"], r["dtype"], r.get("norm") or "backward") for r in members)
    found = [patterns.get((backend, *panel)) for panel in panels]
    return tuple(f"{p['kind']} {p['dtype']}: {p['sentence']}" for p in found if p is not None and p["rule"])


def case_counts(rows: Iterable[Mapping[str, Any]]) -> dict[str, int]:
    """Return how many cases (:func:`case_key`: backend x kind x dtype x norm x n, x shape x axes x
    layout for a shaped case) passed, gave a wrong answer
    (``wrong``: some check failed), could not run (``error``: some check errored) or were
    skipped (every check skipped)."""
    cases: dict[tuple, set[str]] = {}
    for r in rows:
        cases.setdefault(case_key(r), set()).add(r["status"])
    counts = {"passed": 0, "wrong": 0, "error": 0, "skipped": 0}
    for statuses in cases.values():
        if "error" in statuses:
            counts["error"] += 1
        elif "fail" in statuses:
            counts["wrong"] += 1
        elif statuses == {"skip"}:
            counts["skipped"] += 1
        else:
            counts["passed"] += 1
    return counts
