"""The shaped cases ``fftgauge time --shapes`` and ``fftgauge gate --shapes`` ask for, from their options.

One builder for both commands (and the Python API): the ``--shapes`` grammar
(:func:`~fftgauge.harness.shapes.grammar.parse_shapes`), ``--kinds`` of the array API
standard's names (1-D names and ``n`` names alike: each is taken in its family's form for an
item's axis count), ``--dtypes``, ``--layouts`` and the norms, checked against the memory the
machine has (:func:`~fftgauge.harness.shapes.memory.check_memory`).
"""

from __future__ import annotations

from typing import Sequence

from fftgauge.harness.cases import DTYPES, parse_choice_list
from fftgauge.harness.errors import UsageError
from fftgauge.harness.shapes.case import LAYOUTS, SHAPE_KINDS, ShapeCase

__all__ = ["LAYOUTS_HELP", "SHAPES_HELP", "shaped_cases_from_options", "shaped_gate_cases"]

SHAPES_HELP = ("shaped cases instead of --sizes: e.g. 256x256, 12^3, 1000x64 along -1, 16x12x10 over 1+2, "
               "@default, @deep (comma-separated; kinds fft..irfft and fftn..irfftn alike)")
LAYOUTS_HELP = "with --shapes: comma list of C, F, strided, reversed (default C): how the input lies in memory"


def shaped_cases_from_options(shapes: str, kinds: str | None, dtypes: str | None, layouts: str | None,
                              norms: Sequence[str] = ("backward",), sizes: str | None = None) -> list[ShapeCase]:
    """Return the validated shaped cases the options name (spec, kind, precision, layout, norm order).

    ``kinds`` None means every kind (each backend then times those it claims); ``dtypes`` None
    means float64; ``layouts`` None means C.

    Raises
    ------
    UsageError
        For ``--sizes`` given as well, a malformed shape item, kind, precision or layout, or a
        case too large for this machine's memory (the message names it).
    """
    from fftgauge.harness.shapes.grammar import parse_shapes, shape_cases
    from fftgauge.harness.shapes.memory import check_memory

    if sizes:
        raise UsageError("--shapes and --sizes both given: --shapes names whole arrays (a 1-D size is a "
                         "one-length shape such as 1024); give one of them")
    specs = parse_shapes(shapes)
    kind_list = parse_choice_list(kinds, SHAPE_KINDS, "kind") or SHAPE_KINDS
    dtype_list = parse_choice_list(dtypes, DTYPES, "dtype") or ("float64",)
    layout_list = parse_choice_list(layouts, LAYOUTS, "layout") or ("C",)
    cases = shape_cases(specs, kind_list, dtype_list, layout_list, tuple(norms))
    if not cases:
        raise UsageError(f"--shapes {shapes!r} names no case")
    check_memory(cases)
    return cases


def shaped_gate_cases(shapes: str | None, layouts: str | None, kinds: str | None, dtypes: str | None,
                      sizes: str | None, mode: str, metric: str, accuracy: bool,
                      save: str | None = None) -> list[ShapeCase]:
    """Return the shaped cases of ``fftgauge gate --shapes`` (empty without ``--shapes``) in the
    modes that measure the cases asked (A/B, referenced, record), by time or by instruction
    counts (``metric``), saved with ``--save`` or not, without ``--accuracy`` (the shaped battery
    is ``fftgauge check --shapes``). Stored mode selects stored cases instead
    (:func:`fftgauge.harness.gate.request.stored_shape_filter`).

    Raises
    ------
    UsageError
        For ``--layouts`` without ``--shapes``, ``mode`` ``stored``, ``--accuracy``, or any
        error of :func:`shaped_cases_from_options`.
    """
    if shapes is None:
        if layouts:
            raise UsageError("--layouts goes with --shapes (a 1-D size has one layout)")
        return []
    if mode == "stored":
        raise UsageError("stored mode re-measures the stored shaped cases --shapes selects "
                         "(fftgauge.harness.gate.request.stored_shape_filter)")
    if accuracy:
        raise UsageError("--shapes goes without --accuracy; check shaped accuracy with fftgauge check --shapes")
    return shaped_cases_from_options(shapes, kinds, dtypes, layouts, sizes=sizes)
