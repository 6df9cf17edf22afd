"""PyTorch: ``torch.fft`` on CPU tensors, with torch's intra-op thread count as an option.

``torch.fft.fft``/``ifft``/``rfft``/``irfft`` take numpy's ``n`` and the array API's
``norm``. An input becomes a CPU tensor in :meth:`TorchPlan.prepare` (``torch.from_numpy``,
sharing the numpy buffer, outside the timed region); the timed call runs the transform and
hands the engine the output tensor's numpy view (no copy). torch computes on the CPU
synchronously, so nothing needs waiting for.

Threads: ``torch.set_num_threads`` sets torch's intra-op thread pool for the whole process
(not per thread); the plan sets it when it is built. Which FFT library torch calls on the CPU
depends on its build (MKL where ``torch.backends.mkl.is_available()``, else pocketfft): the
version string says which, and the capabilities say ``bitwise_reproducible=False`` when it is
MKL, for the reason given in :mod:`fftgauge.backends.mkl_fft_dfti`. torch has no long double.
"""

from __future__ import annotations

from typing import Any

import numpy as np
import torch
import torch.fft

from fftgauge.backends.base import Backend, Capabilities, OptionSpec, Plan
from fftgauge.harness.cases import Case


def uses_mkl() -> bool:
    """Return True when this torch build computes CPU FFTs with MKL."""
    return bool(torch.backends.mkl.is_available())


class TorchPlan(Plan):
    """A call of ``torch.fft.<kind>`` on a CPU tensor."""

    def __init__(self, case: Case, fn: Any):
        super().__init__(case)
        self._fn = fn
        self._kwargs = {"n": case.n, "dim": -1, "norm": case.norm}

    def prepare(self, x: np.ndarray) -> torch.Tensor:
        """Return ``x`` as a contiguous CPU tensor of the case's input dtype (a copy of the caller's array)."""
        return torch.from_numpy(np.array(x, dtype=self.case.input_dtype, copy=True))

    def execute(self, x: Any) -> np.ndarray:
        """Return the transform of ``x`` (a prepared tensor or any numpy array) as a numpy array."""
        if not isinstance(x, torch.Tensor):
            x = self.prepare(x)
        return self._fn(x, **self._kwargs).numpy()


class TorchBackend(Backend):
    """torch.fft.fft / ifft / rfft / irfft on the CPU.

    Options
    -------
    threads : int, default 1
        torch's intra-op thread count (``torch.set_num_threads``, process-wide).
    """

    name = "torch"
    description = "torch.fft on CPU tensors, threads via torch.set_num_threads"
    options = {"threads": OptionSpec(int, 1, "torch's intra-op threads (process-wide)", minimum=1)}
    thread_option = "threads"

    @property
    def version(self) -> str:
        """torch's version and the CPU FFT library of its build, e.g. ``2.14.1 (CPU FFT: MKL)``."""
        return f"{torch.__version__} (CPU FFT: {'MKL' if uses_mkl() else 'pocketfft'})"

    def capabilities(self) -> Capabilities:
        """Every kind and norm, any size, float32 and float64; not bitwise reproducible on MKL builds."""
        return Capabilities(dtypes=("float32", "float64"), thread_option="threads",
                            bitwise_reproducible=not uses_mkl())

    def plan(self, case: Case) -> TorchPlan:
        """Set torch's thread count and return a plan calling ``torch.fft.<kind>``; nothing to plan."""
        if torch.get_num_threads() != self.opts["threads"]:
            torch.set_num_threads(self.opts["threads"])
        return TorchPlan(case, getattr(torch.fft, case.kind))
