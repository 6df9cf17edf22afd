"""The ``--shapes`` grammar, the named shape sets, and the shaped cases a request names.

Grammar: items separated by commas; each item is a shape, optionally followed by the axes
it transforms.

- ``64x64``, ``12x12x12``, ``100x64``: a shape (lengths joined by ``x``); every axis is
  transformed (``fftn``... over all axes; a one-length shape ``1024`` is one 1-D transform).
- ``64^3``: a cube, the same as ``64x64x64``.
- ``1000x256 along -1``: a batch of 1-D transforms along one axis (here 1000 transforms of
  length 256); ``256x1000 along 0`` transforms the columns.
- ``32x32x32 over 1+2``: a transform over the listed axes, joined by ``+`` (commas separate
  items); the order is kept (``over 2+0`` is a case of its own: a real kind halves the last
  axis listed). One axis (``over 1``) is the same as ``along 1``.
- ``@default``, ``@deep``: named sets (:data:`NAMED_SHAPE_SETS`).

A bare number right after an item with ``along``/``over`` is refused (``4x4 over 0,1`` is
axes joined by a comma, a common slip); write such a 1-D shape as ``1024 along 0``.

Axes may be negative (``-1`` is the last axis) and are kept as written. A bad item (an empty
item, a zero or negative length, an axis out of range, a repeated axis, anything else)
raises :class:`~fftgauge.harness.errors.UsageError` naming it.
"""

from __future__ import annotations

import re
from dataclasses import dataclass

from fftgauge.harness.cases import DTYPES, NORMS
from fftgauge.harness.errors import UsageError
from fftgauge.harness.shapes.case import LAYOUTS, SHAPE_KINDS, ShapeCase, family_kind

__all__ = ["MAX_LENGTH", "MAX_RANK", "NAMED_SHAPE_SETS", "ShapeSpec", "parse_shapes", "shape_cases"]

#: Longest length along one axis (the same cap as ``--sizes``).
MAX_LENGTH = 2**30
#: Most axes a shape may have.
MAX_RANK = 8


@dataclass(frozen=True)
class ShapeSpec:
    """One item of a shape list: the array's ``shape`` and the ``axes`` transformed (as written)."""

    shape: tuple[int, ...]
    axes: tuple[int, ...]

    def label(self) -> str:
        """Return the item as the grammar writes it, e.g. ``"1000x256 along -1"``."""
        text = "x".join(str(n) for n in self.shape)
        if self.axes == tuple(range(len(self.shape))):
            return text
        if len(self.axes) == 1:
            return f"{text} along {self.axes[0]}"
        return f"{text} over {'+'.join(str(a) for a in self.axes)}"


def _spec(text: str) -> ShapeSpec:
    """Parse one item of the grammar (no named sets); the result is validated."""
    return _parse_item(text)[0]


_DEFAULT_ITEMS = (
    # 2-D over both axes: square powers of two, non-square, odd, prime, mixed, edge lengths.
    "8x8", "16x16", "64x64", "256x256", "128x32", "32x128", "15x15", "17x17", "31x61", "100x64",
    "12x20", "1x16", "2x3",
    # 3-D: small cubes, mixed and prime lengths.
    "12^3", "8x16x32", "5x6x7", "17x9x4", "32^3",
    # Two of three axes, in order and permuted (a real kind halves the last one listed).
    "16x12x10 over 1+2", "16x12x10 over 0+2", "12x10x8 over 2+0",
    # Batches of 1-D transforms along the last, the first and a middle axis.
    "1000x64 along -1", "64x1000 along 0", "100x128 along 1", "128x100 along 0", "17x31 along -1",
    "8x30x16 along 1", "6x5x40 along -1",
)

_DEEP_ITEMS = (
    "1024x1024", "2048x2048", "4096x4096", "1000x1000", "4099x4099", "128^3", "256^3", "100x200x300",
    "65536x256 along -1", "256x65536 along 0", "4096x4096 along -1", "4096x4096 along 0",
    "64x64x4096 along -1",
)

#: The named shape sets: name -> (what it holds, items of the grammar).
NAMED_SHAPE_SETS: dict[str, tuple[str, tuple[str, ...]]] = {
    "default": ("2-D: 8x8 .. 256x256 squares, 128x32 and 32x128, odd 15x15, prime 17x17 and 31x61, "
                "mixed 100x64 and 12x20, edges 1x16 and 2x3; 3-D: 12^3, 8x16x32, 5x6x7, 17x9x4, 32^3; "
                "two of three axes in order and permuted; batches of 1-D transforms along the last, "
                "first and a middle axis (1000x64 along -1, 64x1000 along 0, ...); at most 65536 points "
                "an array", _DEFAULT_ITEMS),
    "deep": ("@default plus 1024x1024 .. 4096x4096, 1000x1000, prime 4099x4099, 128^3, 256^3, "
             "100x200x300 and big batches (65536x256 along -1, 256x65536 along 0, 4096x4096 along "
             "either axis, 64x64x4096 along -1)", _DEFAULT_ITEMS + _DEEP_ITEMS),
}

_LENGTH = r"-?[0-9]+"
_AXIS = r"[+-]?[0-9]+"
_SHAPE = re.compile(rf"^{_LENGTH}(?:x{_LENGTH})*$")
_CUBE = re.compile(rf"^({_LENGTH})\^([0-9]+)$")
_AXES = re.compile(rf"^{_AXIS}(?:\+{_AXIS})*$")
_HINT = "use e.g. 64x64, 12^3, 1000x256 along -1, 32x32x32 over 1+2 or @default"


def _parse_shape(word: str, item: str) -> tuple[int, ...]:
    cube = _CUBE.match(word)
    if cube:
        rank = int(cube.group(2))
        if not 1 <= rank <= MAX_RANK:
            raise UsageError(f"shape item {item!r}: a cube needs 1 to {MAX_RANK} axes")
        shape = (int(cube.group(1)),) * rank
    elif _SHAPE.match(word):
        shape = tuple(int(v) for v in word.split("x"))
    else:
        raise UsageError(f"shape item {item!r} is not understood; {_HINT}")
    if len(shape) > MAX_RANK:
        raise UsageError(f"shape item {item!r}: at most {MAX_RANK} axes")
    for n in shape:
        if n < 1:
            raise UsageError(f"shape item {item!r}: every length must be a positive integer (got {n})")
        if n > MAX_LENGTH:
            raise UsageError(f"shape item {item!r}: lengths above 2^30 are not supported")
    return shape


def _parse_axes(word: str, shape: tuple[int, ...], item: str) -> tuple[int, ...]:
    if not _AXES.match(word):
        raise UsageError(f"shape item {item!r}: axes {word!r} are not understood; list them joined by + "
                         f"(e.g. over 0+1)")
    axes = tuple(int(v) for v in word.split("+"))
    rank = len(shape)
    for a in axes:
        if not -rank <= a < rank:
            raise UsageError(f"shape item {item!r}: axis {a} is out of range for a {rank}-D shape "
                             f"(axes {-rank} .. {rank - 1})")
    if len({a % rank for a in axes}) != len(axes):
        raise UsageError(f"shape item {item!r}: an axis is listed twice")
    return axes


def _parse_item(item: str) -> list[ShapeSpec]:
    """Return the specs one item names (several for a named set)."""
    if item.startswith("@"):
        name = item[1:]
        if name not in NAMED_SHAPE_SETS:
            known = ", ".join("@" + k for k in NAMED_SHAPE_SETS)
            raise UsageError(f"unknown shape set {item!r}; known sets: {known}")
        return [_spec(text) for text in NAMED_SHAPE_SETS[name][1]]
    words = item.split()
    shape = _parse_shape(words[0], item)
    if len(words) == 1:
        return [ShapeSpec(shape, tuple(range(len(shape))))]
    if len(words) != 3 or words[1] not in ("along", "over"):
        raise UsageError(f"shape item {item!r} is not understood; {_HINT}")
    axes = _parse_axes(words[2], shape, item)
    if words[1] == "along" and len(axes) != 1:
        raise UsageError(f"shape item {item!r}: 'along' takes one axis; use 'over' for several "
                         f"(e.g. over {words[2]})")
    return [ShapeSpec(shape, axes)]


def parse_shapes(text: str) -> list[ShapeSpec]:
    """Return the shape specs that ``text`` names, in the order given, without repeats.

    Raises
    ------
    UsageError
        For an empty list or item, a malformed item, a zero, negative or too large length,
        an axis out of range, a repeated axis or an unknown named set; the message names the
        offending item.

    Examples
    --------
    >>> [s.label() for s in parse_shapes("64x64, 1000x256 along -1, 32x32x32 over 1+2, 4^2")]
    ['64x64', '1000x256 along -1', '32x32x32 over 1+2', '4x4']
    """
    if text is None or not text.strip():
        raise UsageError(f"the shape list is empty; {_HINT}")
    out: dict[ShapeSpec, None] = {}
    previous = ""
    for raw in text.split(","):
        item = " ".join(raw.split())
        if not item:
            raise UsageError(f"the shape list {text!r} has an empty item; remove the extra comma")
        if re.fullmatch(_AXIS, item) and len(previous.split()) == 3:
            raise UsageError(f"shape item {item!r} follows {previous!r}: join axes with + (over 0+1), not "
                             f"commas; write a 1-D shape after an axis list as {item} along 0")
        for spec in _parse_item(item):
            out.setdefault(spec, None)
        previous = item
    return list(out)


def _check_names(values, known, what: str) -> None:
    for v in values:
        if v not in known:
            raise UsageError(f"unknown {what} {v!r}; expected one of {', '.join(known)}")


def shape_cases(specs, kinds, dtypes, layouts=("C",), norms=("backward",)) -> list[ShapeCase]:
    """Return the shaped cases of every spec, kind, precision, layout and norm, without repeats.

    Each kind is taken in its family's form for the spec's axis count
    (:func:`~fftgauge.harness.shapes.case.family_kind`): ``fft`` and ``fftn`` both give a
    batched ``fft`` for a one-axis spec and ``fftn`` for a several-axis one, so one kinds list
    serves both. Order: spec, then kind, precision, layout, norm as given.

    Raises
    ------
    UsageError
        For an unknown kind, precision, layout or norm, or a case the spec cannot carry
        (the message names the spec).
    """
    _check_names(kinds, SHAPE_KINDS, "transform kind")
    _check_names(dtypes, DTYPES, "precision")
    _check_names(layouts, LAYOUTS, "layout")
    _check_names(norms, NORMS, "normalisation")
    out: dict[ShapeCase, None] = {}
    for spec in specs:
        for kind in kinds:
            family = family_kind(kind, len(spec.axes))
            for dtype in dtypes:
                for layout in layouts:
                    for norm in norms:
                        try:
                            case = ShapeCase(family, dtype, tuple(spec.shape), tuple(spec.axes), layout, norm)
                        except ValueError as exc:
                            raise UsageError(f"shape item {spec.label()!r}: {exc}") from None
                        out.setdefault(case, None)
    return list(out)
