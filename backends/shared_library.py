"""A C function in a shared library (``.so``, ``.dylib``, ``.dll``), called through ctypes.

SPEC (the body after ``clib:`` is parsed here, the options by the registry;
docs/external-backends.md has the full reference)::

    clib:PATH:SYMBOL[key=value,...]

``PATH`` is the library file (relative paths start from the current folder; a bare name
such as ``libmyfft.so`` that is not a file in the current folder is left to the system
loader's search). ``SYMBOL`` is the function, or with ``shape=plan`` the prefix of the
three plan functions. Options:

- ``shape``   ``oneshot`` (default): ``int SYMBOL(size_t n, const T *in, T *out)``;
  ``plan``: ``void *PREFIX_plan(size_t n, int sign)``,
  ``int PREFIX_execute(void *plan, const T *in, T *out)``, ``void PREFIX_destroy(void *plan)``
  (``plan=``, ``execute=``, ``destroy=`` name any of the three explicitly);
  ``many``: ``int SYMBOL(int rank, const size_t *n, size_t howmany, const T *in, ptrdiff_t
  istride, ptrdiff_t idist, T *out, ptrdiff_t ostride, ptrdiff_t odist, int sign)``, batched
  and N-D transforms with strides (:mod:`fftgauge.backends.shared_library_many`; it also
  serves the 1-D cases as rank 1, one transform);
- ``kind``    the transform: ``fft`` (default), ``ifft``, ``rfft``, ``irfft``; with
  ``shape=plan`` also ``fft+ifft`` or ``rfft+irfft`` (``sign`` -1 for the forward kind,
  +1 for the inverse one);
- ``dtype``   ``float64`` (default, T = ``double``), ``float32`` (``float``), ``longdouble``
  (``long double``);
- ``norm``    the normalisation the function applies: ``backward`` (default, numpy's: 1/N on
  the inverse), ``ortho``, ``forward`` (use this for a library whose inverse is unscaled);
- ``sizes``   ``any`` (default) or ``pow2``; ``min_n`` smallest size it takes (default 1);
  ``max_n`` largest size worth trying (0: none);
- ``noop``    a function with the one-shot prototype that does nothing and returns 0, used by
  :meth:`SharedLibraryBackend.call_overhead_seconds` to measure the cost of the call itself.

Data layout: complex values are interleaved ``(re, im)`` pairs of T; real values are plain
arrays of T; ``rfft`` takes N reals and writes N/2 + 1 complex values, ``irfft`` the reverse
(numpy's layouts). A non-zero return code raises :class:`ForeignCallError` (an ``error`` row
with the code in its message); a NULL plan raises it too.
"""

from __future__ import annotations

import ctypes
import hashlib
import os
import re
import time
import weakref
from typing import Any

import numpy as np

from fftgauge.backends.base import Backend, Capabilities, OptionSpec, Plan
from fftgauge.harness.cases import FIXED_DTYPES, KINDS, NORMS, Case
from fftgauge.harness.errors import BackendFailure, UsageError
from fftgauge.harness.fixed.declared import FixedScaling
from fftgauge.harness.fixed.formats import ROUNDINGS
from fftgauge.harness.shapes.case import ShapeCase, family_kind
from fftgauge.backends.shared_library_many import MANY_ARGTYPES, ManyPlan

SCHEME = "clib"

#: The kind pairs one plan-based set of functions may serve (told apart by ``sign``).
PLAN_FAMILIES = (("fft", "ifft"), ("rfft", "irfft"))

#: Batches and calls per batch of the overhead measurement (median of the batch means).
OVERHEAD_BATCHES = 7
OVERHEAD_CALLS_PER_BATCH = 200

_CTYPE_OF = {"float32": ctypes.c_float, "float64": ctypes.c_double, "longdouble": ctypes.c_longdouble,
             "q15": ctypes.c_int16, "q31": ctypes.c_int32}  # fixed point: interleaved (re, im) integers


class ForeignCallError(BackendFailure):
    """A foreign FFT reported a failure: a non-zero return code, or a NULL plan."""


def kinds_from_option(spec: str, text: str, shape: str) -> tuple[str, ...]:
    """Return the kinds the ``kind`` option names, checked against the calling shape.

    Raises
    ------
    UsageError
        For an unknown kind, a repeated one, several kinds with ``shape=oneshot``, or a pair
        that is not one of :data:`PLAN_FAMILIES` with ``shape=plan``.
    """
    kinds = tuple(k.strip() for k in str(text).split("+"))
    bad = [k for k in kinds if k not in KINDS]
    if bad:
        raise UsageError(f"backend {spec!r}: kind={bad[0]!r} is not one of {', '.join(KINDS)}")
    if len(set(kinds)) != len(kinds):
        raise UsageError(f"backend {spec!r}: kind={text!r} repeats a kind")
    if shape == "oneshot" and len(kinds) > 1:
        raise UsageError(f"backend {spec!r}: a one-shot function computes one kind; write kind=fft (or "
                         f"ifft, rfft, irfft), or use shape=plan for kind=fft+ifft")
    if len(kinds) > 1 and not any(set(kinds) <= set(f) for f in PLAN_FAMILIES):
        raise UsageError(f"backend {spec!r}: kind={text!r} mixes complex and real kinds; one set of plan "
                         f"functions serves fft+ifft or rfft+irfft")
    return kinds


def sign_of(kind: str) -> int:
    """Return the exponent sign a kind is planned with: -1 for fft/rfft, +1 for ifft/irfft."""
    return 1 if kind in ("ifft", "irfft") else -1


def _one_line(text: Any) -> str:
    return " ".join(str(text).split())


def load_library(spec: str, path: str) -> tuple[ctypes.CDLL, str | None]:
    """Return the loaded library and its absolute file path (``None`` for a system search).

    Raises
    ------
    UsageError
        When the file does not exist or the loader refuses it (wrong architecture, missing
        dependency, not a shared library).
    """
    is_path = "/" in path or os.sep in path or os.path.exists(path)
    full = os.path.abspath(os.path.expanduser(path)) if is_path else None
    if full is not None and not os.path.isfile(full):
        raise UsageError(f"backend {spec!r}: no library file {path!r}; check the path (relative paths "
                         f"start from the current folder)")
    try:
        return ctypes.CDLL(full or path), full
    except OSError as exc:
        raise UsageError(f"backend {spec!r}: cannot load {path!r}: {_one_line(exc)}") from None


def find_symbol(spec: str, lib: ctypes.CDLL, path: str, symbol: str) -> Any:
    """Return the ctypes function ``symbol`` of ``lib``.

    Raises
    ------
    UsageError
        When the library does not export it (the message says how to check).
    """
    try:
        return getattr(lib, symbol)
    except AttributeError:
        raise UsageError(f"backend {spec!r}: {path!r} exports no function {symbol!r}; check the name "
                         f"with 'nm -D {path}' (C++ functions need extern \"C\")") from None


def _declare(fn: Any, restype: Any, *argtypes: Any) -> Any:
    """Set a ctypes function's prototype and return it."""
    fn.restype = restype
    fn.argtypes = list(argtypes)
    return fn


class _ForeignPlan(Plan):
    """What both calling shapes share: buffers, the input-address cache, the code check.

    ``execute`` passes the input's own memory when it already is a C-contiguous array of
    the right dtype (no copy), and writes into a fresh output buffer on every call, so
    plans may be used from several threads at once.
    """

    def __init__(self, case: Case, symbol: str):
        super().__init__(case)
        self.symbol = symbol
        self._n = case.n
        self._in_dtype = case.input_dtype
        # q15/q31: (n, 2) integer pairs, 2n values (harness/fixed/formats.py)
        self._in_length = case.input_length * (2 if case.dtype in FIXED_DTYPES else 1)
        self._out_dtype = case.output_dtype
        reals = case.output_length * (1 if case.kind == "irfft" else 2)
        self._out_type = _CTYPE_OF[case.dtype] * reals
        # (the caller's array, its address): held together so that a thread reads a
        # consistent pair; only arrays passed without conversion are remembered.
        self._last: tuple[Any, int] = (None, 0)

    def _input_address(self, x: np.ndarray) -> tuple[np.ndarray, int]:
        last, address = self._last
        if x is last:
            return x, address
        a = np.ascontiguousarray(x, dtype=self._in_dtype)
        if a.size != self._in_length:
            raise ValueError(f"{self.case.label()} takes {self._in_length} input values, got {a.size}")
        address = a.ctypes.data
        if a is x:
            self._last = (x, address)
        return a, address

    def _check(self, rc: int) -> None:
        if rc != 0:
            raise ForeignCallError(f"{self.symbol} returned error code {rc} for {self.case.label()}")


class OneShotPlan(_ForeignPlan):
    """Calls ``int fn(size_t n, const T *in, T *out)`` once per :meth:`execute`."""

    def __init__(self, case: Case, fn: Any, symbol: str):
        super().__init__(case, symbol)
        self._fn = fn

    def execute(self, x: np.ndarray) -> np.ndarray:
        """Run the function on ``x``; return its output. Raises ForeignCallError on a non-zero code."""
        keep, address = self._input_address(x)  # keep: a converted copy must live through the call
        out = self._out_type()
        rc = self._fn(self._n, address, out)
        if rc != 0:
            self._check(rc)
        return np.frombuffer(out, dtype=self._out_dtype)


class HandlePlan(_ForeignPlan):
    """Holds a foreign plan handle; :meth:`execute` calls ``int execute(void *plan, in, out)``.

    The handle is destroyed by :meth:`close`, or when the plan is garbage-collected.
    """

    def __init__(self, case: Case, execute_fn: Any, destroy_fn: Any, handle: int, symbol: str):
        super().__init__(case, symbol)
        self._execute = execute_fn
        self._handle = handle
        self._finalizer = weakref.finalize(self, destroy_fn, handle)

    def execute(self, x: np.ndarray) -> np.ndarray:
        """Run the foreign plan on ``x``; return its output. Raises ForeignCallError on a non-zero code."""
        if not self._finalizer.alive:
            raise BackendFailure(f"{self.symbol}: the plan for {self.case.label()} was closed")
        keep, address = self._input_address(x)  # keep: a converted copy must live through the call
        out = self._out_type()
        rc = self._execute(self._handle, address, out)
        if rc != 0:
            self._check(rc)
        return np.frombuffer(out, dtype=self._out_dtype)

    def close(self) -> None:
        """Destroy the foreign plan (once; later calls do nothing)."""
        self._finalizer()


def _library_version(full_path: str | None) -> str:
    """Return ``sha256:`` and the first 12 hex digits of the library file, or ``unknown``."""
    if full_path is None:
        return "unknown"
    digest = hashlib.sha256()
    with open(full_path, "rb") as f:
        for block in iter(lambda: f.read(1 << 20), b""):
            digest.update(block)
    return "sha256:" + digest.hexdigest()[:12]


class SharedLibraryBackend(Backend):
    """A C function (one-shot) or a set of plan functions in a shared library.

    Built by :func:`backend_from_spec`; holds the loaded library, so it is re-created from
    its SPEC in each worker process (pickling it pickles the SPEC).
    """

    name = "clib"
    description = "a C function in a shared library, called through ctypes"
    #: The program does not time itself: timings are the adapter's, foreign call included.
    reports_own_timing = False
    options = {
        "shape": OptionSpec(str, "oneshot", "calling shape: oneshot, plan or many (batched and N-D, with strides)",
                            choices=("oneshot", "plan", "many")),
        "kind": OptionSpec(str, "fft", "the transform: fft, ifft, rfft, irfft (plan: fft+ifft, rfft+irfft)"),
        "dtype": OptionSpec(str, "float64", "precision of T: float32 (float), float64 (double), "
                                            "longdouble (long double), q15 (int16_t), q31 (int32_t)",
                            choices=tuple(_CTYPE_OF)),
        "output_shift": OptionSpec(str, "", "q15/q31: bits the output is shifted right of the plain DFT "
                                            "(a number, log2n or block; docs/fixed-point.md)"),
        "rounding": OptionSpec(str, "round-half-up", "q15/q31: the rounding it promises", choices=ROUNDINGS),
        "norm": OptionSpec(str, "backward", "the normalisation the function applies", choices=NORMS),
        "sizes": OptionSpec(str, "any", "sizes it handles: any or pow2", choices=("any", "pow2")),
        "max_n": OptionSpec(int, 0, "largest size worth trying (0: no limit)", minimum=0),
        "min_n": OptionSpec(int, 1, "smallest size it takes", minimum=1),
        "plan": OptionSpec(str, "", "plan function name (default PREFIX_plan)"),
        "execute": OptionSpec(str, "", "execute function name (default PREFIX_execute)"),
        "destroy": OptionSpec(str, "", "destroy function name (default PREFIX_destroy)"),
        "noop": OptionSpec(str, "", "a do-nothing function with the one-shot prototype, to measure call overhead"),
    }

    def __init__(self, spec: str, path: str, symbol: str, **opts: Any):
        super().__init__(**opts)
        self._spec = spec
        self.path, self.symbol = path, symbol
        stem = os.path.basename(path).split(".", 1)[0] or path
        self.name = f"{SCHEME}:{stem}:{symbol}"
        o = self.opts
        self.shape = o["shape"]
        self.kinds = kinds_from_option(spec, o["kind"], self.shape)
        if o["max_n"] and o["max_n"] < o["min_n"]:
            raise UsageError(f"backend {spec!r}: max_n={o['max_n']} is below min_n={o['min_n']}")
        if ctypes.sizeof(_CTYPE_OF[o["dtype"]]) != np.dtype(Case("fft", o["dtype"], 1).real_dtype).itemsize:
            raise UsageError(f"backend {spec!r}: dtype={o['dtype']} has a different size in C and in numpy "
                             f"on this machine; use float32 or float64")
        self.fixed = None
        if o["output_shift"]:
            try:
                self.fixed = FixedScaling(o["output_shift"], rounding=o["rounding"])
            except ValueError as exc:
                raise UsageError(f"backend {spec!r}: {exc}") from None
        self._lib, self._full_path = load_library(spec, path)
        self._version: str | None = None
        self._overhead: tuple[float | None, str] | None = None
        if self.shape == "many":
            self._many = many_function(spec, self._lib, path, symbol, o)
        elif self.shape == "oneshot":
            unknown = [k for k in ("plan", "execute", "destroy") if o[k]]
            if unknown:
                raise UsageError(f"backend {spec!r}: option {unknown[0]}= needs shape=plan")
            self._oneshot = _declare(find_symbol(spec, self._lib, path, symbol), ctypes.c_int,
                                     ctypes.c_size_t, ctypes.c_void_p, ctypes.c_void_p)
        else:
            names = {k: o[k] or f"{symbol}_{k}" for k in ("plan", "execute", "destroy")}
            self.plan_symbols = names
            self._plan_fn = _declare(find_symbol(spec, self._lib, path, names["plan"]), ctypes.c_void_p,
                                     ctypes.c_size_t, ctypes.c_int)
            self._execute_fn = _declare(find_symbol(spec, self._lib, path, names["execute"]), ctypes.c_int,
                                        ctypes.c_void_p, ctypes.c_void_p, ctypes.c_void_p)
            self._destroy_fn = _declare(find_symbol(spec, self._lib, path, names["destroy"]), None,
                                        ctypes.c_void_p)
        self._noop = None
        if o["noop"]:
            self._noop = _declare(find_symbol(spec, self._lib, path, o["noop"]), ctypes.c_int,
                                  ctypes.c_size_t, ctypes.c_void_p, ctypes.c_void_p)

    @classmethod
    def from_spec(cls, spec: str, body: str, **opts: Any) -> "SharedLibraryBackend":
        """Return the backend a ``clib:`` SPEC names (``body``: ``PATH:SYMBOL`` after
        ``clib:``, options already split off and checked by the registry).

        Raises
        ------
        UsageError
            Malformed body, an option value it refuses (``kind=blah``), a library that is
            missing or does not load, a function it does not export.
        """
        path, symbol = parse_target(spec, body)
        return cls(spec, path, symbol, **opts)

    def __reduce__(self) -> tuple:
        from fftgauge.backends.registry import load_backend

        return (load_backend, (self._spec,))

    @property
    def version(self) -> str:
        """``sha256:`` and 12 hex digits of the library file: which build was measured."""
        if self._version is None:
            self._version = _library_version(self._full_path)
        return self._version

    def capabilities(self) -> Capabilities:
        o = self.opts
        shaped = tuple(dict.fromkeys(k for kind in self.kinds for k in (kind, family_kind(kind, 2))))
        return Capabilities(kinds=self.kinds, dtypes=(o["dtype"],), sizes=o["sizes"], norms=(o["norm"],),
                            min_n=o["min_n"], max_n=o["max_n"] or None, separate_planning=self.shape == "plan",
                            fixed=self.fixed, shaped_kinds=shaped if self.shape == "many" else ())

    def plan(self, case: Case) -> Plan:
        """Return a plan for ``case``; with ``shape=plan`` this calls the C plan function.

        Raises
        ------
        ForeignCallError
            When the C plan function returns NULL.
        """
        if self.shape == "many":
            return ManyPlan(case, self._many, self.symbol, sign_of(case.kind))
        if self.shape == "oneshot":
            return OneShotPlan(case, self._oneshot, self.symbol)
        sign = sign_of(case.kind)
        handle = self._plan_fn(case.n, sign)
        if not handle:
            raise ForeignCallError(f"{self.plan_symbols['plan']}({case.n}, {sign}) returned NULL for "
                                   f"{case.label()}")
        return HandlePlan(case, self._execute_fn, self._destroy_fn, handle, self.plan_symbols["execute"])

    def plan_shaped(self, case: ShapeCase) -> Plan:
        """Return the many shape's plan of a batched or N-D ``case`` (``shape=many`` only; the
        engine asks only for cases the capabilities claim)."""
        return ManyPlan(case, self._many, self.symbol, sign_of(case.base_kind))

    def call_overhead_seconds(self) -> float | None:
        """Return the median seconds one call through the adapter costs beyond the C work.

        Measured once (then cached) as :data:`OVERHEAD_BATCHES` batches of
        :data:`OVERHEAD_CALLS_PER_BATCH` calls of ``plan.execute`` on a one-point input:
        with the ``noop`` option that is a call of the do-nothing C function, which is the
        foreign-call overhead alone (argument conversion, the ctypes call, the output
        buffer, the return-code check); without it, it is a one-point transform of the
        function itself, an upper bound of that overhead. A timing of a small N is read as
        ``seconds - call_overhead_seconds()`` for the C routine alone.
        :attr:`call_overhead_method` says which was measured.

        Returns ``None`` when it cannot be measured (without ``noop``, a backend that does
        not take one-point cases of its first kind, or whose one-point call fails).
        """
        if self._overhead is None:
            self._overhead = self._measure_overhead()
        return self._overhead[0]

    @property
    def call_overhead_method(self) -> str:
        """How :meth:`call_overhead_seconds` was (or will be) measured, in words."""
        if self._noop is not None:
            return f"call of the no-op function {self.opts['noop']}"
        return f"one-point {self.kinds[0]} through {self.symbol}"

    def _measure_overhead(self) -> tuple[float | None, str]:
        case = Case(self.kinds[0], self.opts["dtype"], 1, self.opts["norm"])
        if self._noop is not None:
            plan: Plan = OneShotPlan(case, self._noop, self.opts["noop"])
        elif self.unsupported_reason(case) is not None:
            return None, self.call_overhead_method
        else:
            try:
                plan = self.plan(case)
            except ForeignCallError:
                return None, self.call_overhead_method
        try:
            x = plan.prepare(np.ones(case.input_length * (2 if case.dtype in FIXED_DTYPES else 1),
                                     dtype=case.input_dtype))
            try:
                plan.execute(x)
            except ForeignCallError:
                return None, self.call_overhead_method
            batches = []
            for _ in range(OVERHEAD_BATCHES):
                start = time.perf_counter_ns()
                for _ in range(OVERHEAD_CALLS_PER_BATCH):
                    plan.execute(x)
                batches.append((time.perf_counter_ns() - start) / OVERHEAD_CALLS_PER_BATCH)
        finally:
            plan.close()
        return float(np.median(batches)) * 1e-9, self.call_overhead_method

    def details(self) -> dict[str, Any]:
        """The library, the calling shape and the call overhead.

        ``call_overhead_seconds`` is measured only when the SPEC names a ``noop`` function
        (a call that cannot crash); otherwise it is ``None`` here and
        :meth:`call_overhead_seconds` measures a one-point transform on request.
        """
        return {
            "library": self._full_path or self.path,
            "shape": self.shape,
            "symbols": (dict(self.plan_symbols) if self.shape == "plan"
                        else {self.shape: self.symbol}),
            "reports_own_timing": False,
            "call_overhead_seconds": self.call_overhead_seconds() if self._noop is not None else None,
            "call_overhead_method": self.call_overhead_method,
        }


def many_function(spec: str, lib: ctypes.CDLL, path: str, symbol: str, opts: dict[str, Any]) -> Any:
    """Return the ctypes function of a ``shape=many`` SPEC with its prototype set.

    Raises
    ------
    UsageError
        For a fixed-point ``dtype``, a plan-shape option, or a missing symbol.
    """
    if opts["dtype"] in FIXED_DTYPES:
        raise UsageError(f"backend {spec!r}: shape=many takes float32, float64 or longdouble (dtype={opts['dtype']})")
    unknown = [k for k in ("plan", "execute", "destroy", "noop") if opts[k]]
    if unknown:
        raise UsageError(f"backend {spec!r}: option {unknown[0]}= does not go with shape=many")
    return _declare(find_symbol(spec, lib, path, symbol), ctypes.c_int, *MANY_ARGTYPES)


def parse_target(spec: str, body: str) -> tuple[str, str]:
    """Split ``PATH:SYMBOL`` at its last colon.

    Raises
    ------
    UsageError
        When there is no colon, a bracket is left over, or the symbol is not a C identifier.
    """
    path, sep, symbol = body.rpartition(":")
    path, symbol = path.strip(), symbol.strip()
    if "[" in symbol or "]" in symbol:
        raise UsageError(f"backend {spec!r} is malformed; options go in one trailing [key=value,...]")
    if not sep or not path or not symbol:
        raise UsageError(f"backend {spec!r}: write clib:path/to/lib.so:function[options]")
    if not re.fullmatch(r"[A-Za-z_][A-Za-z0-9_]*", symbol):
        raise UsageError(f"backend {spec!r}: {symbol!r} is not a C function name")
    return path, symbol
