"""Objects a SPEC may name, for the registry tests (loaded as a module and as a file)."""

from __future__ import annotations

import numpy as np

from fftgauge.backends.base import Backend, Capabilities, Conventions, FunctionPlan, OptionSpec, SizeRule
from fftgauge.harness.cases import Case

#: Not callable, not an adapter: naming it is a usage error.
ANSWER = 42


def numpy_forward(x):
    """A plain callable computing the forward complex DFT (numpy's convention)."""
    return np.fft.fft(x)


def doubled_forward(x):
    """A plain callable computing twice the forward DFT (so a test can tell it was called)."""
    return 2 * np.fft.fft(x)


class ScaledNumpyBackend(Backend):
    """numpy.fft.fft times ``gain``: an adapter class with a typed option and a thread option."""

    name = "scaled-numpy"
    description = "numpy.fft.fft times a gain"
    options = {
        "gain": OptionSpec(float, 1.0, "factor the output is multiplied by"),
        "threads": OptionSpec(int, 1, "recorded only"),
        "mode": OptionSpec(str, "plain", "a choice", choices=("plain", "fancy")),
        "check": OptionSpec(bool, False, "a flag"),
    }
    thread_option = "threads"

    @property
    def version(self) -> str:
        return "0.0-test"

    def capabilities(self) -> Capabilities:
        return Capabilities(kinds=("fft",), norms=("backward",), thread_option="threads")

    def plan(self, case: Case) -> FunctionPlan:
        gain = self.opts["gain"]
        return FunctionPlan(case, lambda x: gain * np.fft.fft(x))


#: A ready-made adapter instance: it takes no SPEC options.
READY = ScaledNumpyBackend(gain=3.0)


class IncompleteBackend(Backend):
    """An adapter class that forgot to implement ``capabilities`` and ``plan``."""

    name = "incomplete"


def numpy_inverse(x):
    """A plain callable computing numpy's inverse DFT (1/N on the inverse): a companion of numpy_forward."""
    return np.fft.ifft(x)


def unscaled_inverse(x):
    """An inverse DFT without the 1/N: a wrong companion under numpy's convention."""
    return np.fft.ifft(x) * len(x)


def pow2_only_forward(x):
    """numpy's forward DFT that refuses what the library it stands for refuses: n < 16, non-powers of two."""
    n = len(x)
    if n < 16 or n & (n - 1):
        raise ValueError(f"size {n} is not a power of two from 16")
    return np.fft.fft(x)


class RangedLibraryBackend(Backend):
    """numpy.fft behind the size claims of an embedded DSP library (stated in issue 12 for
    CMSIS-DSP): complex FFTs on powers of two 16..4096, real ones on powers of two 32..4096,
    and a float32 real FFT only at the listed sizes."""

    name = "ranged"
    description = "numpy.fft with an embedded library's size claims"

    @property
    def version(self) -> str:
        return "0.0-test"

    def capabilities(self) -> Capabilities:
        real = SizeRule("pow2", 32, 4096)
        return Capabilities(norms=("backward",), sizes=SizeRule("pow2", 16, 4096),
                            size_rules={"rfft": real, "irfft": real,
                                        ("rfft", "float32"): SizeRule("pow2", only=(32, 64, 128))})

    def plan(self, case: Case) -> FunctionPlan:
        fn = getattr(np.fft, case.kind)
        n = case.n
        return FunctionPlan(case, (lambda x: fn(x, n=n)) if case.kind == "irfft" else fn)


def numpy_rfft(x):
    """numpy's real forward DFT (N//2 + 1 outputs)."""
    return np.fft.rfft(x)


def numpy_irfft(X, n):
    """numpy's real inverse DFT, called as f(X, n): a companion of numpy_rfft."""
    return np.fft.irfft(X, n)


class PackedRealBackend(Backend):
    """An adapter that declares its own conventions in its capabilities (an embedded-style real
    FFT: DC and Nyquist share the first pair, the inverse is unscaled), for the tests of what
    is declared; it computes nothing (plan() raises)."""

    name = "packed-real"

    def capabilities(self) -> Capabilities:
        return Capabilities(kinds=("rfft", "irfft"), norms=("backward",),
                            conventions=Conventions(packing="dc-nyquist", inverse_scale="1"))

    def plan(self, case: Case) -> FunctionPlan:
        raise NotImplementedError("packed-real only declares conventions; it computes nothing")
