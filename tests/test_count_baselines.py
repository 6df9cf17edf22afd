"""Stored instruction counts (no valgrind needed): the count fingerprint's comparison, the rows a
counted file contributes, the refusal of counts from another instruction set or build (exit 2,
one line), the pooling of stored repeats, the frozen bytecode cache and the pinned entropy of
the count driver."""

import importlib.util
import json
import os
import py_compile
import subprocess
import sys

import pytest

from fftgauge.harness.cases import Case
from fftgauge.harness.counts import cachegrind, fingerprint
from fftgauge.harness.counts.driver import pin_entropy
from fftgauge.harness.errors import UsageError
from fftgauge.harness.gate.counted_baseline import load_count_runs, stored_counts

HERE_FP = {"instruction_set": {"baseline": ["X86_V2"], "found": ["X86_V3"]}, "machine": "x86_64",
           "python": "CPython 3.11.7", "libraries": {"fftgauge": "0.2.0", "numpy": "2.4.6"},
           "numpy_build": {"compiler": "gcc 14.2.1", "blas": "scipy-openblas 0.3.31"}, "valgrind": "valgrind-3.19.0"}


def _doc(fp, rows, created="2026-12-03T10:00:00Z"):
    return {"schema": "fftgauge-gate/1", "created": created, "seed": 1, "machine": {}, "versions": {},
            "complete": True, "metric": "instructions", "counting": {"tool": "cachegrind", "fingerprint": fp},
            "backends": {"mine": {"spec": "mine.py:fft"}}, "rows": rows}


def _row(instr, repeats=None, n=64, backend="mine"):
    return {"backend": backend, "kind": "fft", "dtype": "float64", "n": n, "norm": "backward", "status": "ok",
            "verdict": None, "metric": "instructions", "instructions": instr, "seconds": None,
            "instructions_repeats": repeats, "count_transforms": 10}


def _write(path, doc):
    path.write_text(json.dumps(doc))
    return str(path)


def test_fingerprint_differences_name_each_changed_entry():
    other = json.loads(json.dumps(HERE_FP))
    assert fingerprint.fingerprint_differences(other, HERE_FP) == []
    other["instruction_set"]["found"] = ["X86_V3", "X86_V4"]
    other["libraries"]["numpy"] = "2.3.0"
    assert fingerprint.fingerprint_differences(other, HERE_FP) == [
        "instruction_set.found: X86_V3,X86_V4 -> X86_V3", "libraries.numpy: 2.3.0 -> 2.4.6"]
    assert fingerprint.fingerprint_differences(None, HERE_FP)[0].startswith("no count fingerprint")


def test_stored_counts_pool_repeats_over_runs(tmp_path):
    folder = tmp_path / "hist"
    folder.mkdir()
    _write(folder / "a.json", _doc(HERE_FP, [_row(1000.0, [999.0, 1001.0])], "2026-12-03T10:00:00Z"))
    _write(folder / "b.json", _doc(HERE_FP, [_row(1002.0), _row(5.0, n=128, backend="other")],
                                   "2026-12-03T11:00:00Z"))
    _write(folder / "timed.json", _doc(HERE_FP, [dict(_row(None), seconds=1e-6)]))  # no counts: not used
    runs, warnings, notes = load_count_runs(str(folder), 5, False, HERE_FP)
    assert len(runs) == 2 and warnings == [] and notes == []
    old, held = stored_counts(runs, "mine", Case("fft", "float64", 64))
    assert held == 2 and old.instructions == (999.0, 1001.0, 1002.0) and old.median == 1001.0
    assert stored_counts(runs, "mine", Case("fft", "float64", 256)) is None
    assert len(load_count_runs(str(folder), 1, False, HERE_FP)[0]) == 1  # --last 1: the newest


def test_counts_of_another_instruction_set_are_refused_with_the_difference(tmp_path):
    other = json.loads(json.dumps(HERE_FP))
    other["instruction_set"]["found"] = ["X86_V3", "X86_V4"]
    path = _write(tmp_path / "base.json", _doc(other, [_row(1000.0)]))
    with pytest.raises(UsageError, match=r"another instruction set or build \(instruction_set.found: "
                                         r"X86_V3,X86_V4 -> X86_V3\)"):
        load_count_runs(path, 5, False, HERE_FP)
    runs, warnings, _ = load_count_runs(path, 5, True, HERE_FP)  # --allow-other-machine: a warning
    assert len(runs) == 1 and "ANOTHER instruction set" in warnings[0]
    with pytest.raises(UsageError, match="no count fingerprint"):
        load_count_runs(_write(tmp_path / "old.json", _doc(None, [_row(1000.0)])), 5, False, HERE_FP)
    with pytest.raises(UsageError, match="holds no instruction counts"):
        load_count_runs(_write(tmp_path / "t.json", _doc(HERE_FP, [dict(_row(None), seconds=1e-6)])), 5, False,
                        HERE_FP)
    with pytest.raises(UsageError, match="not a positive number"):
        load_count_runs(_write(tmp_path / "bad.json", _doc(HERE_FP, [_row(-3.0)])), 5, False, HERE_FP)


def test_cli_stored_counts_of_another_build_exit_2_with_one_line(tmp_path, monkeypatch):
    """The command line end to end, up to the refusal (no counting): valgrind's answers are
    stood in for by a program that prints this fingerprint's probe output."""
    other = json.loads(json.dumps(HERE_FP))
    other["libraries"]["numpy"] = "1.26.0"
    base = _write(tmp_path / "base.json", _doc(other, [_row(1000.0)]))
    fake = tmp_path / "valgrind"
    fake.write_text("#!/bin/sh\nif [ \"$1\" = --version ]; then echo valgrind-3.19.0; exit 0; fi\n"
                    "echo '{\"instruction_set\": {\"baseline\": [\"X86_V2\"], \"found\": [\"X86_V3\"]}, "
                    "\"numpy_build\": {}}'\n")
    fake.chmod(0o755)
    env = dict(os.environ, PATH=f"{tmp_path}:{os.environ['PATH']}")
    done = subprocess.run([sys.executable, "-m", "fftgauge", "gate", "--backend", "numpy", "--baseline", base,
                           "--metric", "instructions"], env=env, capture_output=True, text=True, timeout=120)
    assert done.returncode == 2, done.stderr
    assert done.stderr.count("\n") == 1 and "Traceback" not in done.stderr
    assert "another instruction set or build" in done.stderr and "libraries.numpy: 1.26.0 -> " in done.stderr


def test_frozen_bytecode_is_used_without_its_source(tmp_path):
    src = tmp_path / "mod_frozen.py"
    src.write_text("VALUE = 1\n")
    cache = tmp_path / "cache"
    pyc = cache / "mod_frozen.cpython-test.pyc"
    cache.mkdir()
    py_compile.compile(str(src), cfile=str(pyc), doraise=True)  # a timestamp-based pyc
    assert cachegrind.freeze_bytecode(str(cache)) == 1
    data = pyc.read_bytes()
    assert data[:4] == importlib.util.MAGIC_NUMBER and int.from_bytes(data[4:8], "little") == 1  # PEP 552
    assert cachegrind.freeze_bytecode(str(cache)) == 0  # already frozen
    # the interpreter loads the frozen code even after the source changed (PEP 552: unchecked)
    prefix = tmp_path / "prefix"
    env = dict(os.environ, PYTHONPYCACHEPREFIX=str(prefix), PYTHONDONTWRITEBYTECODE="")
    run = [sys.executable, "-c", "import mod_frozen; print(mod_frozen.VALUE)"]
    assert subprocess.run(run, cwd=tmp_path, env=env, capture_output=True, text=True).stdout.strip() == "1"
    cachegrind.freeze_bytecode(str(prefix))
    src.write_text("VALUE = 2\n")
    assert subprocess.run(run, cwd=tmp_path, env=env, capture_output=True, text=True).stdout.strip() == "1"


def test_pinned_entropy_is_a_fixed_stream():
    code = ("import sys; sys.path.insert(0, sys.argv[1]); from fftgauge.harness.counts.driver import pin_entropy; "
            "pin_entropy(7); import os, random, secrets; print(os.urandom(40).hex(), secrets.randbits(128))")
    root = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))
    outs = {subprocess.run([sys.executable, "-c", code, root], capture_output=True, text=True).stdout for _ in range(2)}
    assert len(outs) == 1 and len(outs.pop().split()[0]) == 80
    before = os.urandom
    try:
        pin_entropy(7)
        assert os.urandom(5) != os.urandom(5)  # a stream, not one value repeated
    finally:
        os.urandom = before
