"""The case: the unit everything in fftgauge iterates over.

A case is one transform a backend can be asked for: its kind (the array API standard's
``fft``, ``ifft``, ``rfft``, ``irfft``), its real precision, its length ``n`` and its
normalisation (``backward``, ``ortho``, ``forward``, as in the array API standard and
numpy). The helpers here say what arrays go in and come out of such a transform.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Sequence

import numpy as np

from fftgauge.harness.dft import NORMS, is_power_of_two, norm_factor  # noqa: F401 - re-exported
from fftgauge.harness.errors import UsageError

__all__ = ["DTYPES", "KINDS", "NORMS", "Case", "is_power_of_two", "norm_factor", "parse_choice_list"]

KINDS = ("fft", "ifft", "rfft", "irfft")
DTYPES = ("float32", "float64", "longdouble", "q15", "q31")

#: The fixed-point precisions (integer data; complex as (n, 2) pairs: harness/fixed/formats.py).
FIXED_DTYPES = ("q15", "q31")

_REAL = {"float32": np.float32, "float64": np.float64, "longdouble": np.longdouble, "q15": np.int16, "q31": np.int32}
_COMPLEX = {"float32": np.complex64, "float64": np.complex128, "longdouble": np.clongdouble,
            "q15": np.int16, "q31": np.int32}


@dataclass(frozen=True, order=True)
class Case:
    """One transform: ``kind`` of length ``n`` in real precision ``dtype`` with ``norm``.

    ``n`` is always the length of the (logical) signal, so for ``irfft`` it is the length of
    the real output and the input holds ``n // 2 + 1`` complex values.
    """

    kind: str
    dtype: str
    n: int
    norm: str = "backward"

    def __post_init__(self) -> None:
        if self.kind not in KINDS:
            raise ValueError(f"unknown transform kind {self.kind!r}; expected one of {', '.join(KINDS)}")
        if self.dtype not in DTYPES:
            raise ValueError(f"unknown precision {self.dtype!r}; expected one of {', '.join(DTYPES)}")
        if self.norm not in NORMS:
            raise ValueError(f"unknown normalisation {self.norm!r}; expected one of {', '.join(NORMS)}")
        if not isinstance(self.n, (int, np.integer)) or self.n < 1:
            raise ValueError(f"transform length must be a positive integer, got {self.n!r}")

    @property
    def is_real(self) -> bool:
        """True for the real-signal kinds ``rfft`` and ``irfft``."""
        return self.kind in ("rfft", "irfft")

    @property
    def is_inverse(self) -> bool:
        """True for ``ifft`` and ``irfft`` (positive exponent sign)."""
        return self.kind in ("ifft", "irfft")

    @property
    def real_dtype(self) -> np.dtype:
        """The numpy real dtype of this case's precision."""
        return np.dtype(_REAL[self.dtype])

    @property
    def complex_dtype(self) -> np.dtype:
        """The numpy complex dtype of this case's precision."""
        return np.dtype(_COMPLEX[self.dtype])

    @property
    def input_dtype(self) -> np.dtype:
        """Dtype of the input array: real for ``rfft``, complex otherwise."""
        return self.real_dtype if self.kind == "rfft" else self.complex_dtype

    @property
    def output_dtype(self) -> np.dtype:
        """Dtype the output should have: real for ``irfft``, complex otherwise."""
        return self.real_dtype if self.kind == "irfft" else self.complex_dtype

    @property
    def input_length(self) -> int:
        """Length of the input array (``n // 2 + 1`` for ``irfft``, else ``n``)."""
        return self.n // 2 + 1 if self.kind == "irfft" else self.n

    @property
    def output_length(self) -> int:
        """Length of the output array (``n // 2 + 1`` for ``rfft``, else ``n``)."""
        return self.n // 2 + 1 if self.kind == "rfft" else self.n

    def label(self) -> str:
        """Short human label, e.g. ``"rfft float32 n=1024"`` (norm shown when not backward)."""
        norm = "" if self.norm == "backward" else f" norm={self.norm}"
        return f"{self.kind} {self.dtype} n={self.n}{norm}"


def parse_choice_list(text: str | None, allowed: Sequence[str], what: str) -> tuple[str, ...] | None:
    """Return the comma list ``text`` as a tuple, each item checked against ``allowed``.

    ``None`` stays ``None`` (the caller's default applies); ``all`` means every allowed item.

    Raises
    ------
    fftgauge.harness.errors.UsageError
        Naming the first item that is not allowed, or an empty list.
    """
    if text is None:
        return None
    items = [t.strip() for t in text.split(",")]
    if items == ["all"]:
        return tuple(allowed)
    if not items or any(not t for t in items):
        raise UsageError(f"the {what} list {text!r} has an empty item; write e.g. {','.join(allowed[:2])}")
    for item in items:
        if item not in allowed:
            raise UsageError(f"unknown {what} {item!r}; expected a comma list of {', '.join(allowed)} (or all)")
    return tuple(dict.fromkeys(items))
