"""CPU pinning of the timed commands (harness/affinity.py) and the gate's several processes per side."""

from __future__ import annotations

import json
import os
import subprocess
import sys
from collections import Counter

import pytest

from fftgauge.harness.timing.affinity import allowed_cpus, choose_cpus, parse_pin, pinned
from fftgauge.harness.errors import UsageError

ROOT = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))
needs_affinity = pytest.mark.skipif(allowed_cpus() is None, reason="this platform cannot pin processes to CPUs")


def test_parse_pin_words_and_numbers():
    assert parse_pin(None) == "auto"
    assert parse_pin("AUTO") == "auto"
    assert parse_pin("off") == "off"
    if allowed_cpus():
        first = allowed_cpus()[0]
        assert parse_pin(f"{first},{first}") == (first,)


@pytest.mark.parametrize("text", ["fast", "1.5", "", "0,x"])
def test_parse_pin_rejects_malformed_values(text):
    with pytest.raises(UsageError, match="--pin-cpu"):
        parse_pin(text)


@needs_affinity
def test_parse_pin_rejects_a_cpu_outside_the_allowed_set():
    with pytest.raises(UsageError, match="not one this process may use"):
        parse_pin(str(max(allowed_cpus()) + 1000))


@needs_affinity
def test_auto_takes_the_last_cpus_and_gives_up_when_threads_exceed_them():
    allowed = allowed_cpus()
    assert choose_cpus("auto", 1) == allowed[-1:]
    assert choose_cpus("auto", None) == allowed[-1:]
    assert choose_cpus("auto", len(allowed)) == allowed
    assert choose_cpus("auto", len(allowed) + 1) is None
    assert choose_cpus("off", 1) is None
    assert choose_cpus((allowed[0],), 4) == (allowed[0],)


@needs_affinity
def test_pinned_restores_the_previous_set_and_children_inherit_it():
    before = os.sched_getaffinity(0)
    target = (allowed_cpus()[-1],)
    with pinned(target) as got:
        assert got == target
        assert os.sched_getaffinity(0) == set(target)
        child = subprocess.run([sys.executable, "-c", "import os; print(sorted(os.sched_getaffinity(0)))"],
                               capture_output=True, text=True, check=True)
        assert json.loads(child.stdout) == list(target)
    assert os.sched_getaffinity(0) == before
    with pinned(None) as got:
        assert got is None
        assert os.sched_getaffinity(0) == before


@needs_affinity
def test_gate_workers_run_on_the_pinned_cpu_and_blocks_use_every_process():
    """Every worker the sampler starts inside the pinned block runs on the pinned CPU, and
    the blocks of a side are drawn from each of its processes."""
    from fftgauge.harness.cases import Case
    from fftgauge.harness.gate.sampling import WorkerSampler

    class Item:
        case = Case("fft", "float64", 64)
        new_key, old_key = "new", "old"

    target = (allowed_cpus()[-1],)
    with pinned(target):
        sampler = WorkerSampler({"old": "numpy", "new": "numpy"}, threads=1, seed=7, samples_per_block=2,
                                timeout_seconds=60, yardstick=False, processes=3)
        with sampler:
            sampler.prepare(Item)
            used = []
            next_worker = sampler._next_worker

            def recording(key):
                worker = next_worker(key)
                used.append((key, worker.pid))
                return worker

            sampler._next_worker = recording
            draw = sampler.sample(Item, pairs=6)
            assert len(draw.old) == len(draw.new) == 12
            for side in ("old", "new"):
                pids = [w.pid for w in sampler.workers[side]]
                assert len(set(pids)) == 3 and None not in pids
                for pid in pids:
                    assert os.sched_getaffinity(pid) == set(target)
                # 6 pairs over 3 processes, each process once per turn: every process ran 2 blocks
                assert Counter(pid for key, pid in used if key == side) == {pid: 2 for pid in pids}


def test_bad_pin_cpu_is_a_usage_error_with_exit_2():
    out = subprocess.run([sys.executable, "-m", "fftgauge", "time", "--backend", "numpy", "--sizes", "16",
                          "--pin-cpu", "fast", "--quiet"], capture_output=True, text=True, cwd=ROOT)
    assert out.returncode == 2
    assert "--pin-cpu 'fast'" in out.stderr and "Traceback" not in out.stderr
