"""The worked JIT adapter of docs/writing-an-adapter.md (examples/jit_adapter.py): it computes
numpy.fft's transforms (checked against numpy), compiles each case once whatever the
number of plans, and compiles inside ``plan()`` so the timed region holds no compile."""

from __future__ import annotations

import json
import subprocess
import sys
from pathlib import Path

import numpy as np

from fftgauge.backends.registry import load_backend
from fftgauge.harness.battery.checks import check_case
from fftgauge.harness.cases import Case

ROOT = Path(__file__).resolve().parent.parent
EXAMPLE = ROOT / "examples" / "jit_adapter.py"


def test_the_example_computes_numpys_transforms():
    backend = load_backend(f"{EXAMPLE}:JitBackend")
    x = np.random.default_rng(5).standard_normal(32) + 1j
    assert np.allclose(backend.plan(Case("fft", "float64", 32)).execute(x), np.fft.fft(x), rtol=0, atol=1e-12)
    r = x.real.copy()
    assert np.allclose(backend.plan(Case("rfft", "float64", 32)).execute(r), np.fft.rfft(r), rtol=0, atol=1e-12)
    assert backend.plan(Case("fft", "float32", 32)).execute(x.astype(np.complex64)).dtype == np.complex64


def test_the_compile_happens_in_plan_and_once_per_case():
    backend = load_backend(f"{EXAMPLE}:JitBackend")
    case = Case("fft", "float64", 64)
    plan = backend.plan(case)
    assert backend.jit.compilations == 1            # compiled by plan()'s warm-up call, before any execute
    plan.execute(np.ones(64, dtype=complex))
    backend.plan(case)
    assert backend.jit.compilations == 1            # a second plan of the same case reuses the cache
    backend.plan(Case("fft", "float64", 128))
    assert backend.jit.compilations == 2


def test_the_example_passes_the_battery_and_compiles_each_case_once():
    backend = load_backend(f"{EXAMPLE}:JitBackend")
    rows = check_case(backend, Case("fft", "float64", 64), 1234)
    assert rows and all(r.status in ("pass", "skip") for r in rows), [r.message for r in rows if r.status != "pass"]
    # the battery planned the case several times (the concurrent check plans one per thread,
    # the round trip plans the companion): one compile for fft, one for its companion ifft
    assert backend.jit.compilations == 2


def test_the_example_from_the_command_line(tmp_path):
    done = subprocess.run([sys.executable, "-m", "fftgauge", "check", "--backend", f"{EXAMPLE}:JitBackend",
                           "--sizes", "1..16", "--quiet", "--json", "out.json"], cwd=tmp_path,
                          capture_output=True, text=True, timeout=300)
    assert done.returncode == 0, done.stdout[-2000:] + done.stderr
    rows = json.loads((tmp_path / "out.json").read_text())["rows"]
    assert {r["backend"] for r in rows} == {"tinyjit"}      # an adapter class is labelled by its name
    assert not [r for r in rows if r["status"] in ("fail", "error")]


def test_how_often_the_battery_plans_one_case():
    # The figure docs/writing-an-adapter.md gives, counted: an adapter that records its plans.
    from fftgauge import Backend, Capabilities, FunctionPlan
    from fftgauge.harness.battery.behaviour_checks import CONCURRENT_THREADS

    planned: list[Case] = []

    class Counting(Backend):
        name = "counting"

        def capabilities(self):
            return Capabilities(kinds=("fft", "ifft"), norms=("backward",))

        def plan(self, case):
            planned.append(case)
            return FunctionPlan(case, getattr(np.fft, case.kind))

    backend = Counting()
    fft16, ifft16 = Case("fft", "float64", 16), Case("ifft", "float64", 16)
    check_case(backend, fft16, 1234)
    own = planned.count(fft16)
    check_case(backend, ifft16, 1234)
    # its own checks share one plan, the concurrent check plans one per thread, and the
    # inverse case's round trip plans it once more as its companion
    assert own == 1 + CONCURRENT_THREADS
    assert planned.count(fft16) == 1 + CONCURRENT_THREADS + 1 == 6
