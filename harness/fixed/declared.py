"""What a fixed-point backend declares about its scaling (``Capabilities(fixed=...)``).

``output_shift`` is the number of bits the output must be shifted left by to be the plain
(unnormalised) DFT of the integer input, the way embedded libraries document an output
format ("a 1024-point Q15 FFT returns 11.5 format": shift 10): an integer, ``"log2n"`` (the
shift is log2 N, as with 1/2 per stage or 1/N at the input), or ``"block"`` (block floating
point: the plan returns ``(pairs, exponent)`` and the exponent is the shift of that call).
``scaling`` names the reference rule to compare with (default: ``none`` for shift 0,
``stage`` for ``log2n``, ``bfp`` for ``block``); ``rounding`` the rounding the backend
promises (default ``round-half-up``, the rule of most DSP libraries' rounding shifts).
"""

from __future__ import annotations

from dataclasses import asdict, dataclass

from fftgauge.harness.fixed.formats import ROUNDINGS
from fftgauge.harness.fixed.radix2 import SCALINGS

__all__ = ["FixedScaling", "SHIFT_WORDS"]

#: The words ``output_shift`` takes besides an integer.
SHIFT_WORDS = ("log2n", "block")

_DEFAULT_SCALING = {"log2n": "stage", "block": "bfp"}


@dataclass(frozen=True)
class FixedScaling:
    """A backend's declared output shift, the reference scaling to compare with, its rounding.

    Raises
    ------
    ValueError
        For an output shift that is neither a non-negative integer nor one of
        :data:`SHIFT_WORDS`, or an unknown scaling or rounding rule.
    """

    output_shift: int | str
    scaling: str | None = None
    rounding: str = "round-half-up"

    def __post_init__(self) -> None:
        shift = self.output_shift
        if isinstance(shift, str) and shift.lstrip("-").isdigit():
            shift = int(shift)
            object.__setattr__(self, "output_shift", shift)
        if isinstance(shift, bool) or not (isinstance(shift, int) and shift >= 0 or shift in SHIFT_WORDS):
            raise ValueError(f"output_shift must be a number of bits >= 0, log2n or block, got {shift!r}")
        if self.scaling is None:
            object.__setattr__(self, "scaling", _DEFAULT_SCALING.get(shift, "none") if isinstance(shift, str)
                               else "none")
        if self.scaling not in SCALINGS:
            raise ValueError(f"scaling must be one of {', '.join(SCALINGS)}, got {self.scaling!r}")
        if self.rounding not in ROUNDINGS:
            raise ValueError(f"rounding must be one of {', '.join(ROUNDINGS)}, got {self.rounding!r}")

    def shift_at(self, n: int) -> int | None:
        """Return the output shift in bits at size ``n`` (None for ``block``: per call)."""
        if self.output_shift == "log2n":
            return int(n).bit_length() - 1
        if self.output_shift == "block":
            return None
        return int(self.output_shift)

    def as_dict(self) -> dict:
        """Return the declaration as JSON-able values."""
        return asdict(self)
