"""What ``--shapes`` and ``--layouts`` add to a battery request, validated once.

:func:`shaped_fields` is called by :func:`fftgauge.harness.battery.request.build_request`: it
parses the shape list (:func:`fftgauge.harness.shapes.grammar.parse_shapes`), builds the
shaped cases with the kinds, precisions, layouts and norms, refuses a run whose arrays would
not fit in memory (:func:`fftgauge.harness.shapes.memory.check_memory`), and checks the
kinds and check names against the shaped ones too.
"""

from __future__ import annotations

from typing import Any, Sequence

from fftgauge.harness.cases import KINDS, parse_choice_list
from fftgauge.harness.errors import UsageError
from fftgauge.harness.shapes.case import LAYOUTS, SHAPE_KINDS

__all__ = ["shaped_fields"]


def _names(value: str | Sequence[str] | None, allowed: Sequence[str], what: str) -> tuple[str, ...] | None:
    if value is not None and not isinstance(value, str):
        value = ",".join(str(v) for v in value)
    return parse_choice_list(value, allowed, what)


def shaped_fields(shapes: str | None, layouts: str | Sequence[str] | None, kinds: str | Sequence[str] | None,
                  dtypes: str | Sequence[str], norms: str | Sequence[str],
                  checks: str | Sequence[str] | None) -> dict[str, Any]:
    """Return the shaped fields of a request (``shapes``, ``layouts``, ``shape_cases``, and
    ``kinds`` and ``checks`` checked against the 1-D and the shaped names), or ``{}`` without
    ``--shapes``.

    Kinds may be 1-D (``fft``) or N-D (``fftn``) names: each gives its family's form for a
    shape's axis count; the default is every family. Checks may be 1-D or shaped names; each
    battery runs those it has.

    Raises
    ------
    UsageError
        For ``--layouts`` without ``--shapes``, a malformed shape item, an unknown layout,
        kind or check, or arrays that would not fit in memory (the message names the figure).
    """
    from fftgauge.harness.battery.checks import CHECKS
    from fftgauge.harness.cases import DTYPES, NORMS
    from fftgauge.harness.shapes.checks import SHAPED_CHECKS
    from fftgauge.harness.shapes.grammar import parse_shapes, shape_cases
    from fftgauge.harness.shapes.memory import check_memory

    if shapes is None:
        if layouts is not None:
            raise UsageError("--layouts applies to shaped cases only; give --shapes too (e.g. --shapes 64x64)")
        return {}
    specs = parse_shapes(shapes)
    chosen_layouts = _names(layouts, LAYOUTS, "layout") or ("C",)
    chosen_kinds = _names(kinds, SHAPE_KINDS, "kind")
    chosen_checks = _names(checks, tuple(dict.fromkeys(tuple(CHECKS) + tuple(SHAPED_CHECKS))), "check")
    families = chosen_kinds or KINDS
    cases = shape_cases(specs, families, _names(dtypes, DTYPES, "dtype"), chosen_layouts,
                        _names(norms, NORMS, "norm"))
    check_memory(cases)
    return {"shapes": tuple(specs), "layouts": chosen_layouts, "kinds": chosen_kinds, "checks": chosen_checks,
            "shape_cases": tuple(cases)}
