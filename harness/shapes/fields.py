"""A shaped case as it travels to worker jobs and into rows: plain fields, row fields, order.

Worker jobs take a case as a tuple of plain values. A 1-D :class:`~fftgauge.harness.cases.Case`
travels as ``(kind, dtype, n, norm)``; a :class:`~fftgauge.harness.shapes.case.ShapeCase` as
``(kind, dtype, shape, axes, layout, norm)`` with ``shape`` and ``axes`` tuples
(:func:`case_fields`, :func:`case_from_fields`), so one job serves both.

Rows of shaped cases keep the 1-D fields (``n`` is the points of one transform, N, the
product of the transformed lengths) and add :data:`ROW_FIELDS`: ``shape``, ``axes``,
``layout``, ``batch`` (transforms per call) and ``points`` (N again, by its own name).
"""

from __future__ import annotations

from typing import Any

from fftgauge.harness.cases import KINDS, Case
from fftgauge.harness.shapes.case import SHAPE_KINDS, ShapeCase

__all__ = ["ROW_FIELDS", "case_fields", "case_from_fields", "case_size", "is_shaped", "row_fields",
           "row_order_key", "shape_text"]

#: The fields a row of a shaped case adds (None in rows of 1-D cases).
ROW_FIELDS = ("shape", "axes", "layout", "batch", "points")


def is_shaped(case: Any) -> bool:
    """Return True for a :class:`ShapeCase` (or its fields tuple), False for a 1-D case."""
    if isinstance(case, ShapeCase):
        return True
    return isinstance(case, tuple) and len(case) == 6 and isinstance(case[2], (tuple, list))


def case_fields(case: Case | ShapeCase) -> tuple:
    """Return the plain tuple a worker job takes for ``case`` (see the module docstring)."""
    if isinstance(case, ShapeCase):
        return (case.kind, case.dtype, tuple(case.shape), tuple(case.axes), case.layout, case.norm)
    return (case.kind, case.dtype, case.n, case.norm)


def case_from_fields(fields: tuple | Case | ShapeCase) -> Case | ShapeCase:
    """Return the case a fields tuple stands for (a case is returned as it is).

    Raises
    ------
    ValueError
        For fields no case can be built from (unknown kind, bad shape, ...).
    """
    if isinstance(fields, (Case, ShapeCase)):
        return fields
    if is_shaped(fields):
        kind, dtype, shape, axes, layout, norm = fields
        return ShapeCase(kind, dtype, tuple(int(n) for n in shape), tuple(int(a) for a in axes), layout, norm)
    return Case(*fields)


def case_size(case: Case | ShapeCase) -> int:
    """Return the ``n`` a row records: the size of a 1-D case, N (points of one transform) of a shaped one."""
    return case.points if isinstance(case, ShapeCase) else case.n


def row_fields(case: Case | ShapeCase) -> dict[str, Any]:
    """Return the :data:`ROW_FIELDS` of a shaped case's row (lists for JSON); ``{}`` for a 1-D case."""
    if not isinstance(case, ShapeCase):
        return {}
    return {"shape": list(case.shape), "axes": list(case.axes), "layout": case.layout, "batch": case.batch,
            "points": case.points}


def shape_text(row: dict[str, Any]) -> str:
    """Return a row's shape in words, e.g. ``"256x256 axes=0,1 C"``; ``""`` for a 1-D row."""
    shape = row.get("shape")
    if not shape:
        return ""
    axes = ",".join(str(a) for a in row.get("axes") or ())
    return f"{'x'.join(str(n) for n in shape)} axes={axes} {row.get('layout') or 'C'}"


def row_order_key(row: dict[str, Any]) -> tuple:
    """Return the sort key of a row: kind (1-D kinds first, then the N-D ones), precision, norm, n,
    then shape, axes and layout (so rows of equal N but other shapes keep a fixed order)."""
    kind = row["kind"]
    rank = KINDS.index(kind) if kind in KINDS else len(KINDS) + SHAPE_KINDS.index(kind)
    return (rank, row["dtype"], row.get("norm") or "backward", row["n"], tuple(row.get("shape") or ()),
            tuple(row.get("axes") or ()), row.get("layout") or "")
