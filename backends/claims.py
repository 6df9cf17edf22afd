"""What a backend claims, as typed values: the sizes it takes (:class:`SizeRule`), the
conventions its outputs follow (:class:`Conventions`), its :class:`Capabilities`, its
description (:class:`BackendDescription`) and, for one run, which cases it takes
(:class:`BackendClaims`).

These travel from the worker that loaded the backend to the parent as they are (they
pickle); ``as_dict()`` turns them into JSON-able values at the edge (results files, the
``fftgauge backends`` listing).
"""

from __future__ import annotations

from dataclasses import asdict, dataclass, field, replace
from typing import Any, Mapping

from fftgauge.harness.cases import DTYPES, KINDS, NORMS, is_power_of_two
# The declared conventions' vocabularies live with the conventions themselves (harness/dft.py:
# SIGNS, the exponent signs of the forward transform; SCALES, the factors on the plain sum;
# ORDERS, natural, bit-reversed and centred output; PACKINGS, the layouts of a half spectrum,
# with pack_half_spectrum/unpack_half_spectrum), which also converts a reference to them.
from fftgauge.harness.dft import ORDERS, PACKINGS, SCALES, SIGNS  # noqa: F401 - re-exported
from fftgauge.harness.fixed.declared import FixedScaling
from fftgauge.harness.shapes.case import SHAPE_KINDS

#: Size forms a rule states: every size, or powers of two only.
SIZE_FORMS = ("any", "pow2")


@dataclass(frozen=True)
class SizeRule:
    """Which sizes a transform takes: a form, a range, and optionally an explicit set.

    Attributes
    ----------
    form : ``"any"`` or ``"pow2"`` (powers of two only).
    min_n : smallest size (1: no lower limit).
    max_n : largest size, or ``None`` for no upper limit.
    only : an explicit set of sizes (the form and range still apply), or ``None``.

    Raises
    ------
    ValueError
        For an unknown form, a minimum below 1, a maximum below the minimum, or an empty or
        non-positive explicit set.

    Examples
    --------
    >>> SizeRule("pow2", 16, 4096).reason(8)
    'n >= 16 only'
    >>> SizeRule("pow2", 16, 4096).reason(1024) is None
    True
    """

    form: str = "any"
    min_n: int = 1
    max_n: int | None = None
    only: tuple[int, ...] | None = None

    def __post_init__(self) -> None:
        if self.form not in SIZE_FORMS:
            raise ValueError(f"size form must be one of {', '.join(SIZE_FORMS)}, got {self.form!r}")
        if int(self.min_n) < 1:
            raise ValueError(f"min_n must be at least 1, got {self.min_n}")
        if self.max_n is not None and int(self.max_n) < int(self.min_n):
            raise ValueError(f"max_n ({self.max_n}) is below min_n ({self.min_n})")
        if self.only is not None:
            only = tuple(sorted({int(n) for n in self.only}))
            if not only or only[0] < 1:
                raise ValueError(f"an explicit size set must hold positive sizes, got {self.only!r}")
            object.__setattr__(self, "only", only)

    def reason(self, n: int) -> str | None:
        """Return why size ``n`` is outside the rule (a phrase such as ``'powers of two only'``), or None."""
        if self.form == "pow2" and not is_power_of_two(n):
            return "powers of two only"
        if n < self.min_n:
            return f"n >= {self.min_n} only"
        if self.max_n is not None and n > self.max_n:
            return f"n <= {self.max_n} only"
        if self.only is not None and n not in self.only:
            return f"n in {{{', '.join(map(str, self.only))}}} only"
        return None

    def as_dict(self) -> dict[str, Any]:
        """Return the rule as JSON-able values (``only`` a list or None)."""
        return {"form": self.form, "min_n": self.min_n, "max_n": self.max_n,
                "only": list(self.only) if self.only is not None else None}


@dataclass(frozen=True)
class Conventions:
    """The conventions a backend's outputs follow, when they are not numpy's.

    ``None`` in a field means numpy's convention (the default everywhere): exponent sign -1
    on the forward transform; the scaling the case's ``norm`` asks for; natural output
    order; numpy's half spectrum for real transforms.

    Attributes
    ----------
    sign : exponent sign of the forward transform, -1 or +1 (the inverse has the other).
    forward_scale : factor the forward transform applies to the plain sum, whatever norm is
        asked (one of :data:`SCALES`).
    inverse_scale : the same for the inverse transform.
    order : order of a complex transform's spectrum, fft's output and ifft's input (one of
        :data:`ORDERS`).
    packing : layout of a real transform's half spectrum (one of :data:`PACKINGS`).

    Raises
    ------
    ValueError
        For a value outside its vocabulary.
    """

    sign: int | None = None
    forward_scale: str | None = None
    inverse_scale: str | None = None
    order: str | None = None
    packing: str | None = None

    def __post_init__(self) -> None:
        for name, allowed in (("sign", SIGNS), ("forward_scale", SCALES), ("inverse_scale", SCALES),
                              ("order", ORDERS), ("packing", PACKINGS)):
            value = getattr(self, name)
            if value is not None and value not in allowed:
                raise ValueError(f"{name} must be one of {', '.join(map(str, allowed))}, got {value!r}")

    @property
    def declared(self) -> dict[str, Any]:
        """Return the fields that differ from numpy's convention (those not None)."""
        return {k: v for k, v in asdict(self).items() if v is not None}

    def over(self, base: "Conventions") -> "Conventions":
        """Return these conventions with ``base``'s filling the fields left None here."""
        return replace(base, **self.declared)

    def as_dict(self) -> dict[str, Any]:
        """Return every field as JSON-able values (None: numpy's convention)."""
        return asdict(self)


#: Keys of :attr:`Capabilities.size_rules`: a kind, a precision, or a (kind, precision) pair.
SizeKey = str | tuple[str, str]


@dataclass(frozen=True)
class Capabilities:
    """What a backend claims to handle.

    Attributes
    ----------
    kinds : transform kinds it computes (subset of ``fft, ifft, rfft, irfft``).
    dtypes : real precisions it computes (``float32``, ``float64``, ``longdouble``).
    sizes : ``"any"`` or ``"pow2"`` (powers of two only), or a :class:`SizeRule` (then its
        range and set are used, and ``min_n``/``max_n`` must be left alone).
    norms : normalisations it takes (subset of ``backward, ortho, forward``).
    min_n : smallest size it takes (1: no limit).
    max_n : largest size it takes, or ``None``.
    size_set : an explicit set of sizes it takes, or ``None``.
    size_rules : rules that replace the one above for some cases, keyed by a kind
        (``"rfft"``), a precision (``"float32"``) or a pair (``("rfft", "float32")``); the
        most specific key wins. Stored as a tuple of ``(key, rule)`` pairs.
    pure_python : True for an implementation in pure Python (the references), whose large
        sizes a run may leave out to stay quick.
    conventions : the :class:`Conventions` its outputs follow.
    in_place : True when a plan may overwrite its input (the ``input-intact`` check then
        does not count a changed input as a failure).
    thread_option : name of the option that sets its thread count (``workers``,
        ``threads``), or ``None`` when it has none.
    separate_planning : True when :meth:`Backend.plan` does real work (FFTW plans).
    counts_operations : True when it can count the arithmetic it performs
        (:meth:`Backend.count_operations`).
    bitwise_reproducible : False when its results may differ bitwise between runs of the same
        input (a library whose summation order depends on its thread count or the data's
        alignment); the ``repeatable`` check then accepts differences within the accuracy limit.

    Raises
    ------
    ValueError
        For an unknown kind, precision or size form, an inconsistent range, or a
        ``size_rules`` key that names no kind or precision.

    Examples
    --------
    A library whose complex FFTs take powers of two from 16 to 4096 and whose real ones
    take 32 to 4096:

    >>> caps = Capabilities(sizes=SizeRule("pow2", 16, 4096),
    ...                     size_rules={"rfft": SizeRule("pow2", 32, 4096), "irfft": SizeRule("pow2", 32, 4096)})
    >>> caps.size_rule("rfft", "float32").min_n, caps.size_rule("fft", "float32").min_n
    (32, 16)
    """

    kinds: tuple[str, ...] = KINDS
    dtypes: tuple[str, ...] = ("float32", "float64")
    sizes: str | SizeRule = "any"
    norms: tuple[str, ...] = NORMS
    max_n: int | None = None
    in_place: bool = False
    thread_option: str | None = None
    separate_planning: bool = False
    counts_operations: bool = False
    min_n: int = 1
    size_set: tuple[int, ...] | None = None
    size_rules: Mapping[SizeKey, SizeRule] | tuple = ()
    pure_python: bool = False
    conventions: Conventions = field(default_factory=Conventions)
    bitwise_reproducible: bool = True
    #: Fixed-point (q15/q31) cases: the declared output shift, scaling and rounding
    #: (:class:`~fftgauge.harness.fixed.declared.FixedScaling`); None: none declared.
    fixed: FixedScaling | None = None
    #: Shaped cases (:mod:`fftgauge.harness.shapes.case`): the kinds it computes on whole
    #: arrays (batched 1-D along one axis: ``fft``...; over several axes: ``fftn``...); empty:
    #: it transforms one 1-D array only, and shaped cases are skipped with that reason.
    shaped_kinds: tuple[str, ...] = ()
    #: The largest shaped case it takes, as the total number of points of the array; None: no limit.
    max_shaped_points: int | None = None

    def __post_init__(self) -> None:
        set_ = object.__setattr__
        if isinstance(self.sizes, SizeRule):
            if self.min_n != 1 or self.max_n is not None or self.size_set is not None:
                raise ValueError("give the size range inside the SizeRule, not also as min_n/max_n/size_set")
            rule = self.sizes
            set_(self, "sizes", rule.form)
            set_(self, "min_n", rule.min_n)
            set_(self, "max_n", rule.max_n)
            set_(self, "size_set", rule.only)
        for name, allowed in (("kinds", KINDS), ("dtypes", DTYPES), ("norms", NORMS)):
            values = tuple(getattr(self, name))
            bad = [v for v in values if v not in allowed]
            if bad:
                raise ValueError(f"{name} must be from {', '.join(allowed)}, got {bad[0]!r}")
            set_(self, name, values)
        self.default_size_rule()  # validates sizes, min_n, max_n, size_set
        pairs = tuple(self.size_rules.items()) if isinstance(self.size_rules, Mapping) else tuple(self.size_rules)
        for key, rule in pairs:
            parts = key if isinstance(key, tuple) else (key,)
            if not isinstance(rule, SizeRule) or not all(p in KINDS or p in DTYPES for p in parts):
                raise ValueError(f"size_rules maps a kind, a precision or a (kind, precision) pair to a "
                                 f"SizeRule; got {key!r}: {rule!r}")
        set_(self, "size_rules", pairs)
        shaped = tuple(self.shaped_kinds)
        bad = [k for k in shaped if k not in SHAPE_KINDS]
        if bad:
            raise ValueError(f"shaped_kinds must be from {', '.join(SHAPE_KINDS)}, got {bad[0]!r}")
        set_(self, "shaped_kinds", shaped)

    def default_size_rule(self) -> SizeRule:
        """Return the rule for cases no entry of :attr:`size_rules` names."""
        return SizeRule(self.sizes, self.min_n, self.max_n, self.size_set)

    def size_rule(self, kind: str, dtype: str) -> SizeRule:
        """Return the size rule of cases of ``kind`` in ``dtype``: the most specific of
        :attr:`size_rules` (pair, then kind, then precision), else the default rule."""
        rules = dict(self.size_rules)
        for key in ((kind, dtype), kind, dtype):
            if key in rules:
                return rules[key]
        return self.default_size_rule()

    def claims_kind(self, kind: str) -> bool:
        """Return True when the backend computes ``kind`` at all (in some precision and size)."""
        return kind in self.kinds

    def as_dict(self) -> dict[str, Any]:
        """Return the capabilities as plain JSON-able values."""
        return {
            "kinds": list(self.kinds), "dtypes": list(self.dtypes), "sizes": self.sizes,
            "norms": list(self.norms), "max_n": self.max_n, "in_place": self.in_place,
            "thread_option": self.thread_option, "separate_planning": self.separate_planning,
            "counts_operations": self.counts_operations, "min_n": self.min_n,
            "shaped_kinds": list(self.shaped_kinds), "max_shaped_points": self.max_shaped_points,
            "size_set": list(self.size_set) if self.size_set is not None else None,
            "size_rules": [{"key": list(k) if isinstance(k, tuple) else k, **r.as_dict()}
                           for k, r in self.size_rules],
            "pure_python": self.pure_python, "conventions": self.conventions.as_dict(),
            "bitwise_reproducible": self.bitwise_reproducible,
            **({"fixed": self.fixed.as_dict()} if self.fixed is not None else {}),
        }


@dataclass(frozen=True)
class BackendDescription:
    """What a backend says about itself: label, version, description, options, capabilities,
    and the details a kind of backend adds (a program's command line, a library's path).

    ``as_dict()`` is the form results files and ``fftgauge backends --json`` hold.
    """

    name: str
    version: str
    description: str
    options: dict[str, dict[str, Any]]
    capabilities: Capabilities
    details: dict[str, Any] = field(default_factory=dict)

    def as_dict(self) -> dict[str, Any]:
        """Return the description as JSON-able values, the details as top-level keys."""
        return {"name": self.name, "version": self.version, "description": self.description,
                "options": self.options, "capabilities": self.capabilities.as_dict(), **self.details}


@dataclass(frozen=True)
class BackendClaims:
    """One backend's answer for one run: its label, its description, and for each case
    asked (in order) why it is not taken, or None when it is."""

    label: str
    description: BackendDescription
    reasons: tuple[str | None, ...]

    @property
    def capabilities(self) -> Capabilities:
        """The backend's capabilities (conventions declared in its SPEC included)."""
        return self.description.capabilities

    def claims_kind(self, kind: str) -> bool:
        """Return True when the backend computes ``kind`` at all: a case of a kind it never
        claimed is no finding of a run that did not name its kinds (no summary row)."""
        return self.capabilities.claims_kind(kind)

    def record(self, spec: str) -> dict[str, Any]:
        """Return the entry of a results file's ``backends`` map: the SPEC and the description."""
        return {"spec": spec, **self.description.as_dict()}
