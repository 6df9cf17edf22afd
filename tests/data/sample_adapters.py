"""Objects a SPEC may name, for the registry tests (loaded as a module and as a file)."""

from __future__ import annotations

import numpy as np

from fftgauge.backends.base import Backend, Capabilities, FunctionPlan, OptionSpec
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
