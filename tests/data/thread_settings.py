"""Test backends whose results depend on where and how often they are called, for the
``concurrent`` and ``repeatable`` checks.

``ThreadSettingBackend`` behaves as a library does whose summation order follows a thread-local
setting (a thread count that holds only in the thread that set it): the thread that loads
the backend sets "one block", every other thread runs with the default of four blocks. Both
are accurate; they differ bitwise. ``NotBitwiseBackend`` adds one unit roundoff of fresh noise
to every output and declares ``bitwise_reproducible=False``.
"""

from __future__ import annotations

import threading

import numpy as np

from fftgauge.backends.base import Backend, Capabilities, FunctionPlan, Plan
from fftgauge.harness.cases import Case

#: Blocks a thread sums over when it has not set its own count.
DEFAULT_BLOCKS = 4

_SETTING = threading.local()


def blocks_here() -> int:
    """Return the calling thread's block count (its own setting, else ``DEFAULT_BLOCKS``)."""
    return getattr(_SETTING, "blocks", DEFAULT_BLOCKS)


def blocked_fft(x: np.ndarray, blocks: int) -> np.ndarray:
    """Return the DFT of ``x`` as the sum of the DFTs of ``blocks`` contiguous pieces of it
    (zero elsewhere): the same value in exact arithmetic, another rounding for each count."""
    x = np.asarray(x)
    edges = np.linspace(0, x.shape[0], blocks + 1).astype(int)
    total = np.zeros(x.shape[0], dtype=np.result_type(x.dtype, np.complex64))
    for a, b in zip(edges[:-1], edges[1:]):
        part = np.zeros_like(x)
        part[a:b] = x[a:b]
        total += np.fft.fft(part)
    return total


class ThreadSettingBackend(Backend):
    """numpy.fft summed over a thread-local number of blocks; the loading thread uses one."""

    name = "thread-setting"
    description = "an FFT whose summation order follows a thread-local setting"

    def __init__(self, **options):
        super().__init__(**options)
        _SETTING.blocks = 1

    def capabilities(self) -> Capabilities:
        return Capabilities(kinds=("fft",), norms=("backward",))

    def plan(self, case: Case) -> Plan:
        return FunctionPlan(case, lambda x: blocked_fft(x, blocks_here()))


_NOISE = np.random.default_rng()


class NotBitwiseBackend(Backend):
    """numpy.fft with one unit roundoff of fresh noise per call, declared not bitwise reproducible."""

    name = "not-bitwise"
    description = "an accurate FFT whose results differ at rounding level from call to call"

    def capabilities(self) -> Capabilities:
        return Capabilities(kinds=("fft",), norms=("backward",), bitwise_reproducible=False)

    def plan(self, case: Case) -> Plan:
        def run(x):
            y = np.fft.fft(x)
            u = np.finfo(y.dtype).eps / 2
            return (y * (1 + u * _NOISE.standard_normal(y.shape))).astype(y.dtype)
        return FunctionPlan(case, run)
