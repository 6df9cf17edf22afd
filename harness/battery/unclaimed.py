"""Sizes a backend does not handle, found by running it, and the lines that say which sizes a
run did not check.

A user's own FFT often handles only some sizes (powers of two, even sizes, up to some n) and
raises on the others without declaring it. When a backend raises the same error (numbers
aside) on *every* size of one class among the sizes it ran, and on no other size, that is a
claim it did not write down, not a bug: :func:`unclaim_size_classes` turns those cases into
one ``skip`` row each whose message says so once and names the SPEC option that would claim
it (``[sizes=pow2]``, ``[max_n=N]``). The classes: every size that is not a power of two;
every odd size (n = 1 aside); every size above some n. Two sizes at least must raise, and
some size must run, or the errors stay errors.

:func:`not_run_lines` groups the case-level ``skip`` rows by reason (numbers aside), one line
per distinct reason with every size it covers, so a summary says which sizes were not
claimed and which were skipped for time.
"""

from __future__ import annotations

from typing import Any, Iterable, Mapping

from fftgauge.harness.cases import Case
from fftgauge.harness.dft import is_power_of_two
from fftgauge.harness.rows import message_cause, skip_rows

#: Prefix of the message of a case found outside the backend's claims by this module.
UNCLAIMED_PREFIX = "not claimed:"


def size_class(raising: set[int], ran: set[int]) -> tuple[str, str | None] | None:
    """Return ``(words, SPEC option)`` for the class of sizes ``raising`` is exactly, among
    the sizes that ``ran``, or None when it is no class (or too small to tell).

    ``words`` completes "on every ..."; the option claims the rest (None where no SPEC
    option of the user-function backend says it).
    """
    rest = ran - raising
    if len(raising) < 2 or not rest:
        return None
    if raising == {n for n in ran if not is_power_of_two(n)}:
        return "size that is not a power of two", "sizes=pow2"
    if raising == {n for n in ran if n % 2 == 1 and n > 1} or raising == {n for n in ran if n % 2 == 1}:
        return "odd size", None
    if max(rest) < min(raising):
        return f"size above {max(rest)}", f"max_n={max(rest)}"
    return None


def in_size_class(found_class: tuple[str, str | None], n: int) -> bool:
    """Return True when size ``n`` belongs to the class :func:`size_class` found (for sizes
    beyond those it was found among): not a power of two, odd (n = 1 aside), above n."""
    words, option = found_class
    if option == "sizes=pow2":
        return not is_power_of_two(n)
    if option and option.startswith("max_n="):
        return n > int(option.split("=", 1)[1])
    return n % 2 == 1 and n > 1


def unclaimed_reason(backend: str, words: str, example: str, spec: str, options: Mapping[str, Any] | None,
                     option: str | None) -> str:
    """Return the message of a size class found raising: which class, one example of the error
    (``example``, a row's message) and, where the backend's ``options`` take ``option``, the
    ``--backend`` SPEC that claims it."""
    hint = ""
    if option and option.split("=")[0] in (options or {}):
        hint = f"; claim it with --backend '{spec_with_option(spec, option)}'"
    return (f"{UNCLAIMED_PREFIX} {backend} raised the same error on every {words} "
            f"({example}); these sizes are treated as outside its claims{hint}")


def spec_with_option(spec: str, option: str) -> str:
    """Return ``spec`` with ``option`` (``key=value``) added to its options."""
    if spec.endswith("]") and "[" in spec:
        return spec[:-1] + ("," if not spec.endswith("[]") else "") + option + "]"
    return f"{spec}[{option}]"


def _case_causes(rows: Iterable[Mapping[str, Any]]) -> dict[str, dict[tuple, str | None]]:
    """Return, per backend, per case (kind, dtype, norm, n) it ran, the one cause its error
    rows share (None when it has pass or fail rows, no error row, or errors of several causes)."""
    out: dict[str, dict[tuple, str | None]] = {}
    causes: dict[tuple, set[str]] = {}
    answered: set[tuple] = set()
    for r in rows:
        if r["status"] == "skip" and r["check"] == "all":
            continue
        backend, case = r["backend"], (r["kind"], r["dtype"], r.get("norm") or "backward", int(r["n"]))
        out.setdefault(backend, {})[case] = None
        if r["status"] == "error":
            causes.setdefault((backend, case), set()).add(message_cause(r.get("message")))
        elif r["status"] in ("pass", "fail"):
            answered.add((backend, case))
    for (backend, case), found in causes.items():
        if (backend, case) not in answered and len(found) == 1:
            out[backend][case] = next(iter(found))
    return out


def unclaim_size_classes(rows: list[dict], backends: Mapping[str, Mapping[str, Any]]) -> list[dict]:
    """Return the rows with every case of a size class that raised one error replaced by one
    ``skip`` row (check ``all``) whose message says so (the same message for the whole class).

    ``backends`` is the results file's map (label -> ``{"spec": ..., "options": ...}``).
    """
    replace: dict[tuple, str] = {}
    for backend, cases in _case_causes(rows).items():
        ran = {case[3] for case in cases}
        by_size: dict[int, set[str | None]] = {}
        for case, cause in cases.items():
            by_size.setdefault(case[3], set()).add(cause)
        for cause in {c for c in cases.values() if c is not None}:
            raising = {n for n, found in by_size.items() if found == {cause}}
            found_class = size_class(raising, ran)
            if found_class is None:
                continue
            words, option = found_class
            info = backends.get(backend, {})
            example = next(r["message"] for r in rows if r["backend"] == backend and r["status"] == "error"
                           and int(r["n"]) in raising and message_cause(r.get("message")) == cause)
            reason = unclaimed_reason(backend, words, example, info.get("spec", backend), info.get("options"), option)
            for case in cases:
                if case[3] in raising:
                    replace[(backend,) + case] = reason
    if not replace:
        return rows
    kept, added = [], set()
    for r in rows:
        key = (r["backend"], r["kind"], r["dtype"], r.get("norm") or "backward", int(r["n"]))
        if key not in replace:
            kept.append(r)
        elif key not in added:
            added.add(key)
            case = Case(r["kind"], r["dtype"], int(r["n"]), r.get("norm") or "backward")
            kept += [row.as_dict() for row in skip_rows(r["backend"], case, ["all"], replace[key])]
    return kept


def not_run_lines(rows: Iterable[Mapping[str, Any]]) -> list[str]:
    """Return one line per backend and distinct reason (numbers aside) among the case-level
    ``skip`` rows: ``backend: N case(s) at n = sizes: reason`` (the first message quoted)."""
    from fftgauge.harness.report.check_tables import compress_sizes

    groups: dict[tuple[str, str], list[Mapping[str, Any]]] = {}
    for r in rows:
        if r["status"] == "skip" and r["check"] == "all":
            groups.setdefault((r["backend"], message_cause(r.get("message"))), []).append(r)
    lines = []
    for (backend, _), members in groups.items():
        sizes = sorted({int(r["n"]) for r in members})
        plural = "s" if len(members) != 1 else ""
        # a class of sizes is named by its reason; other reasons list every size they cover
        shown = compress_sizes(sizes, limit=8 if members[0].get("message", "").startswith(UNCLAIMED_PREFIX) else 10**6)
        lines.append(f"  {backend}: {len(members)} case{plural} at n = {shown}: "
                     f"{members[0].get('message')}")
    return lines
