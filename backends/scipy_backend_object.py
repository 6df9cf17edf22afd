"""Any scipy.fft backend object: ``scipy-backend[object=module:attr]``.

A scipy.fft backend is an object (often a module, such as a library's scipy interface)
with ``__ua_domain__ = "numpy.scipy.fft"`` and ``__ua_function__(method, args, kwargs)``,
the uarray protocol scipy.fft dispatches through (``scipy.fft.set_backend``). The adapter
calls ``__ua_function__`` itself, with the scipy.fft function as ``method`` and the
arguments scipy.fft would pass on (``x``; ``n``, ``axis``, ``norm``, ``overwrite_x``,
``workers``): that is the call the backend receives under ``set_backend(obj, only=True)``,
without uarray's dispatch cost in the timed region. A backend answers ``NotImplemented``
for what it does not do; the adapter then raises, so such a case is an ``error`` row, and
the claims are probed (a kind counts when the backend answers an 8-point transform of that
precision with an array of the right length).

``object`` names a module (``mkl_fft.interfaces.scipy_fft``), ``module:attr`` an object in
one, ``path/to/file.py:attr`` an object in a file, or ``scipy`` (the default): scipy.fft's
own backend, the one ``scipy.fft.set_backend("scipy")`` names, so that ``scipy-backend``
alone measures scipy.fft through the protocol.
"""

from __future__ import annotations

import sys
from functools import cached_property
from typing import Any

import numpy as np
import scipy
import scipy.fft

from fftgauge.backends.base import Backend, Capabilities, FunctionPlan, OptionSpec, Plan
from fftgauge.backends.user_code import attribute_of, import_module, load_file
from fftgauge.harness.cases import KINDS, Case
from fftgauge.harness.errors import UsageError

#: The uarray domain of scipy.fft's backends.
SCIPY_FFT_DOMAIN = "numpy.scipy.fft"
#: The size every claim probe transforms.
PROBE_N = 8
#: The precisions probed: scipy.fft's floating-point ones (a fixed-point input would be
#: converted to floating point by most backends, which is no claim of a fixed-point FFT).
PROBED_DTYPES = ("float32", "float64", "longdouble")


def load_object(spec: str, target: str) -> Any:
    """Return the object ``target`` names: ``scipy`` (scipy.fft's own backend), ``module``,
    ``module:attr`` or ``file.py:attr``.

    Raises
    ------
    UsageError
        When the module, file or attribute does not exist or fails to import.
    """
    if target == "scipy":
        named = getattr(getattr(scipy.fft, "_backend", None), "_named_backends", {})
        if "scipy" not in named:
            raise UsageError(f"backend {spec!r}: this scipy ({scipy.__version__}) does not expose its own "
                             f"scipy.fft backend; name a backend object, e.g. object=mypackage.scipy_interface")
        return named["scipy"]
    where, _, attr = target.rpartition(":") if ":" in target else (target, "", "")
    if where.endswith(".py"):
        module = load_file(spec, where)
    else:
        module = import_module(spec, where)
    return attribute_of(spec, module, attr, repr(where)) if attr else module


class UaFunctionRefused(RuntimeError):
    """The backend object answered NotImplemented for a call."""


class ScipyBackendObject(Backend):
    """A scipy.fft backend object, called through its ``__ua_function__``.

    Options
    -------
    object : str, default "scipy"
        ``scipy`` (scipy.fft's own backend), ``module``, ``module:attr`` or
        ``path/to/file.py:attr`` naming the backend object.
    workers : int, default 1
        Passed as scipy.fft's ``workers`` argument.
    """

    name = "scipy-backend"
    description = "any scipy.fft backend object (the __ua_function__ protocol)"
    options = {
        "object": OptionSpec(str, "scipy", "the backend object: scipy (scipy.fft's own), module, module:attr "
                                           "or path/to/file.py:attr"),
        "workers": OptionSpec(int, 1, "scipy.fft's workers argument, passed to the backend", minimum=1),
    }
    thread_option = "workers"

    def __init__(self, **opts: Any):
        super().__init__(**opts)
        target = self.opts["object"]
        spec = f"scipy-backend[object={target}]"
        self.backend_object = load_object(spec, target)
        domain = getattr(self.backend_object, "__ua_domain__", None)
        domains = (domain,) if isinstance(domain, str) else tuple(domain or ())
        if SCIPY_FFT_DOMAIN not in domains or not callable(getattr(self.backend_object, "__ua_function__", None)):
            raise UsageError(f"backend {spec!r}: {target!r} is not a scipy.fft backend (it needs "
                             f"__ua_domain__ = {SCIPY_FFT_DOMAIN!r} and a __ua_function__)")
        if not self.claimed[0]:
            raise UsageError(f"backend {spec!r}: the object answers no scipy.fft fft/ifft/rfft/irfft call "
                             f"of {PROBE_N} points")

    @property
    def label(self) -> str:
        """``scipy-backend[object=...]`` with any other changed option, or the SPEC's label."""
        if self.chosen_label:
            return self.chosen_label
        extra = "" if self.opts["workers"] == 1 else f",workers={self.opts['workers']}"
        return f"scipy-backend[object={self.opts['object']}{extra}]"

    @property
    def version(self) -> str:
        """The version of the package the object comes from (its top-level module), or scipy's."""
        module = getattr(self.backend_object, "__module__", None) or getattr(self.backend_object, "__name__", "")
        top = sys.modules.get(str(module).split(".")[0])
        version = getattr(top, "__version__", None)
        if top is scipy or not version:
            return f"scipy {scipy.__version__}"
        return f"{version} (scipy {scipy.__version__})"

    def call(self, case: Case, x: np.ndarray) -> Any:
        """Return the backend's answer to scipy.fft.<kind>(x, n, axis=-1, norm, workers).

        Raises
        ------
        UaFunctionRefused
            When the backend answers NotImplemented.
        """
        method = getattr(scipy.fft, case.kind)
        kwargs = {"n": case.n, "axis": -1, "norm": case.norm, "overwrite_x": False, "workers": self.opts["workers"]}
        y = self.backend_object.__ua_function__(method, (x,), kwargs)
        if y is NotImplemented:
            raise UaFunctionRefused(f"{self.opts['object']} answered NotImplemented for scipy.fft.{case.kind} "
                                    f"in {case.dtype}")
        return y

    def probe(self, kind: str, dtype: str) -> bool:
        """Return True when the backend answers a PROBE_N-point ``kind`` in ``dtype`` with the right length."""
        case = Case(kind, dtype, PROBE_N)
        try:
            y = np.asarray(self.call(case, np.ones(case.input_length, dtype=case.input_dtype)))
        except Exception:  # noqa: BLE001 - a refusal or a failure means the kind is not claimed
            return False
        return y.shape == (case.output_length,)

    @cached_property
    def claimed(self) -> tuple[tuple[str, ...], tuple[str, ...]]:
        """Return (kinds, precisions) the probes found."""
        works = {(k, d) for k in KINDS for d in PROBED_DTYPES if self.probe(k, d)}
        return (tuple(k for k in KINDS if any((k, d) in works for d in PROBED_DTYPES)),
                tuple(d for d in PROBED_DTYPES if any((k, d) in works for k in KINDS)))

    def capabilities(self) -> Capabilities:
        """The kinds and precisions the probes found (at load time), every norm, any size,
        threads via ``workers``."""
        kinds, dtypes = self.claimed
        return Capabilities(kinds=kinds, dtypes=dtypes, thread_option="workers")

    def details(self) -> dict[str, Any]:
        """The backend object's name as the SPEC gave it."""
        return {"object": self.opts["object"]}

    def plan(self, case: Case) -> Plan:
        """Return a plan calling the backend's ``__ua_function__`` for the case; nothing to plan."""
        return FunctionPlan(case, lambda x: self.call(case, x))
