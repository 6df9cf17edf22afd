"""A backend's declared conventions, as the battery applies them to one case.

A backend may declare (in its SPEC or its ``Capabilities.conventions``) an exponent sign, a
scale on either transform, an output order and a half-spectrum packing other than numpy's
(:class:`~fftgauge.backends.claims.Conventions`). :class:`DeclaredConvention` turns the
battery's inputs, which are in numpy's convention, into the backend's, and the backend's
outputs back into numpy's, so every check and the diagnosis apply unchanged: what was
declared is undone, and only a convention *other* than the declared one stays visible.

The spectrum side of a transform carries the convention: the forward kinds (``fft``,
``rfft``) give a spectrum in the declared order, packing, sign and scale; the inverse kinds
(``ifft``, ``irfft``) take a spectrum in the declared order and packing and give a signal in
natural order. A declared sign on an inverse reverses its output in time (``x[-j mod n]``,
the same as reversing its input spectrum; the conjugate half spectrum for ``irfft``), and a
declared scale replaces the factor the case's ``norm`` asks for
(:func:`fftgauge.harness.dft.to_convention`). Which field applies to which kind:

========= ==================================================================
kind      fields
========= ==================================================================
fft       sign, forward_scale, order (of the output)
ifft      sign, inverse_scale, order (of the input)
rfft      sign, forward_scale, packing (of the output)
irfft     sign, inverse_scale, packing (of the input)
========= ==================================================================
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import numpy as np

from fftgauge.backends.claims import Conventions
from fftgauge.harness.cases import FIXED_DTYPES, Case
from fftgauge.harness.dft import from_convention, is_power_of_two, pack_half_spectrum, to_convention, \
    unpack_half_spectrum

#: Fields of :class:`~fftgauge.backends.claims.Conventions` that apply to each kind, in the
#: order a row names them.
FIELDS = {
    "fft": ("sign", "forward_scale", "order"),
    "ifft": ("sign", "inverse_scale", "order"),
    "rfft": ("sign", "forward_scale", "packing"),
    "irfft": ("sign", "inverse_scale", "packing"),
}


def backend_convention(backend: Any) -> "DeclaredConvention":
    """Return the :class:`DeclaredConvention` of ``backend``: its ``conventions`` (SPEC over
    adapter), else those of its capabilities, else numpy's (a backend that declares none)."""
    declared = getattr(backend, "conventions", None)
    if not isinstance(declared, Conventions):  # a backend not built on Backend
        capabilities = getattr(backend, "capabilities", None)
        declared = getattr(capabilities() if callable(capabilities) else capabilities, "conventions", None)
    return DeclaredConvention(declared if isinstance(declared, Conventions) else Conventions())


class DeclaredInputPlan:
    """A plan whose :meth:`prepare` takes numpy's convention: the wrapped plan's own
    ``prepare`` (dtype, layout), then the input turned into the declared convention
    (:meth:`DeclaredConvention.to_backend`), all outside any timed region. ``execute`` is the
    wrapped plan's own bound method (no call added to what is timed); every other attribute
    is the wrapped plan's."""

    def __init__(self, plan: Any, convention: "DeclaredConvention"):
        self._plan, self._convention = plan, convention
        self.case = plan.case
        self.execute = plan.execute

    def prepare(self, x: np.ndarray) -> np.ndarray:
        """Return the wrapped plan's prepared ``x`` (numpy's convention) in the declared convention."""
        return self._convention.to_backend(self._plan.prepare(x), self.case)

    def __getattr__(self, name: str) -> Any:
        return getattr(self._plan, name)


def declared_input_plan(backend: Any, plan: Any) -> Any:
    """Return ``plan`` as a :class:`DeclaredInputPlan` when ``backend`` declared a convention
    that changes the input of ``plan.case`` (an ``ifft`` order, an ``irfft`` packing), else
    ``plan`` itself (always for q15/q31: fixed-point data has its own layouts, docs/fixed-point.md)."""
    if plan.case.dtype in FIXED_DTYPES:
        return plan
    convention = backend_convention(backend)
    changes = set(convention.declared(plan.case)) & {"order", "packing"}
    return DeclaredInputPlan(plan, convention) if changes and plan.case.kind in ("ifft", "irfft") else plan


class ConventionMismatch(ValueError):
    """A backend's output does not have the length its declared packing gives."""


@dataclass(frozen=True)
class DeclaredConvention:
    """The conventions a backend declared, applied to the cases of the battery.

    Attributes
    ----------
    conventions : the backend's :class:`~fftgauge.backends.claims.Conventions` (None fields: numpy's).
    """

    conventions: Conventions = Conventions()

    # -- what applies --------------------------------------------------------------------------
    def declared(self, case: Case) -> dict[str, Any]:
        """Return the declared fields that apply to ``case.kind`` and differ from numpy's
        (``sign=-1``, a ``natural`` order and the ``complex`` packing are numpy's), in
        :data:`FIELDS` order."""
        return self._differing(FIELDS[case.kind])

    def _differing(self, names: Any) -> dict[str, Any]:
        """Return the fields among ``names`` declared and not numpy's, in the order of ``names``."""
        found = {}
        for name in names:
            value = getattr(self.conventions, name)
            if value is None or (name, value) in (("sign", -1), ("order", "natural"), ("packing", "complex")):
                continue
            found[name] = value
        return found

    @staticmethod
    def _text(found: dict[str, Any]) -> str:
        return ", ".join(f"{k}={'+1' if v == 1 and k == 'sign' else v}" for k, v in found.items())

    def describe(self, case: Case) -> str:
        """Return the declared fields of ``case`` as a row shows them (``"sign=+1, order=centred"``),
        or ``""`` when the backend follows numpy's convention for this kind."""
        return self._text(self.declared(case))

    def describe_all(self) -> str:
        """Return every declared field that is not numpy's, whatever the kind, as
        :meth:`describe` writes them (``"sign=+1, forward_scale=1/n"``), or ``""``."""
        return self._text(self._differing(dict.fromkeys(n for names in FIELDS.values() for n in names)))

    def scale(self, case: Case) -> str | None:
        """Return the declared scale of ``case``'s kind (``"1/n"``), or None when none is declared."""
        return self.declared(case).get("inverse_scale" if case.is_inverse else "forward_scale")

    def unsupported_reason(self, case: Case) -> str | None:
        """Return why the declared convention cannot be undone at ``case``, or None.

        ``bit-reversed`` needs a power of two; ``dc-nyquist`` an even n.
        """
        found = self.declared(case)
        if found.get("order") == "bit-reversed" and not is_power_of_two(case.n):
            return f"the declared order=bit-reversed needs a power-of-two size (n = {case.n})"
        if found.get("packing") == "dc-nyquist" and case.n % 2:
            return f"the declared packing=dc-nyquist needs an even size (n = {case.n})"
        return None

    # -- the backend's side of a case ----------------------------------------------------------
    def packed(self, case: Case) -> bool:
        """Return True when ``case``'s half spectrum is n reals (a declared packing other than numpy's)."""
        return "packing" in self.declared(case)

    def output_length(self, case: Case) -> int:
        """Return the length of the backend's output for ``case`` (n for a packed rfft)."""
        return case.n if case.kind == "rfft" and self.packed(case) else case.output_length

    def output_dtype(self, case: Case) -> np.dtype:
        """Return the dtype due of the backend's output for ``case`` (real for a packed rfft)."""
        due = case.output_dtype
        if case.kind == "rfft" and self.packed(case):
            return np.dtype(np.finfo(due).dtype)
        return due

    def to_backend(self, x: np.ndarray, case: Case) -> np.ndarray:
        """Return the input ``x`` of ``case`` (numpy's convention) as the backend takes it: an
        ``ifft`` spectrum in the declared order, an ``irfft`` half spectrum in the declared
        packing; ``x`` itself when nothing changes."""
        found = self.declared(case)
        if case.kind == "ifft" and "order" in found:
            return np.ascontiguousarray(to_convention(x, "fft", case.n, order=found["order"]))
        if case.kind == "irfft" and "packing" in found:
            return np.ascontiguousarray(pack_half_spectrum(x, case.n, found["packing"]))
        return x

    def from_backend(self, y: np.ndarray, case: Case) -> np.ndarray:
        """Return the backend's output ``y`` of ``case`` in numpy's convention with the case's
        norm, natural order and numpy's half spectrum (the inverse of what the backend declared).

        An output that is not a 1-D floating-point array of the backend's length comes back
        unchanged (the checks report it), except a packed rfft output of another length.
        A declared scale is undone in at least double precision (no rounding added in a
        lower one).

        Raises
        ------
        ConventionMismatch
            For a packed rfft output of a length other than n.
        """
        found = self.declared(case)
        if not found or y.dtype.kind not in "fc" or y.ndim != 1:
            return y
        if y.shape[0] != self.output_length(case):
            if self.output_length(case) != case.output_length:
                raise ConventionMismatch(f"output has shape {y.shape} where ({self.output_length(case)},) is due "
                                         f"(packing={found['packing']}: n reals)")
            return y
        out = y
        if case.kind == "rfft" and "packing" in found:
            out = unpack_half_spectrum(out, case.n, found["packing"])
        scale = self.scale(case)
        if scale is not None:
            out = out.astype(np.result_type(out.dtype, np.float64))
        order = found.get("order") if case.kind == "fft" else None
        return from_convention(out, case.kind, case.n, case.norm, found.get("sign"), scale, order)
