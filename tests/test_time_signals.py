"""``fftgauge time`` cut short. Signals (SIGINT, SIGTERM, SIGHUP): the real command line in a
subprocess, a slow backend (busy-waits of 50 ms per call), the signal sent to its process
group (what a terminal or a CI runner does) once the results file holds a finished row.

Checked: the exit code (128 + the signal's number), the file (``complete`` false, the rows
that finished and no more), the summary printed, and the seconds from the signal to the exit
under a generous bound (the goal of 2 s is measured by ``benchmarks/bench_timing.py signals``,
not asserted here). A full disk: a fake writer that fails with ENOSPC, in-process.
"""

from __future__ import annotations

import json
import os
import pathlib
import signal
import subprocess
import sys
import time

import pytest

ROOT = pathlib.Path(__file__).resolve().parent.parent
SIZES = "2^4..2^20"  # 17 cases of about 0.35 s each: several seconds left when the first row is written
CASES = 17
#: Seconds from the signal to the exit that the test accepts (the goal is 2 s; a loaded machine
#: may stretch the clean-up, so the bound is loose).
EXIT_BOUND_SECONDS = 15.0


def rows_in(path: pathlib.Path) -> int:
    """Return how many rows the (atomically rewritten) results file holds; 0 before it exists."""
    try:
        return len(json.loads(path.read_text())["rows"])
    except (OSError, ValueError, KeyError):
        return 0


@pytest.mark.skipif(not hasattr(os, "killpg"), reason="process groups are POSIX")
@pytest.mark.parametrize("signum, code", [(signal.SIGINT, 130), (signal.SIGTERM, 143), (signal.SIGHUP, 129)])
def test_time_stops_on_a_signal_and_keeps_what_finished(tmp_path, signum, code):
    path = tmp_path / "t.json"
    proc = subprocess.Popen([sys.executable, "-m", "fftgauge", "time", "--backend", "busywait[seconds=0.05]",
                             "--kinds", "fft", "--sizes", SIZES, "--samples", "5", "--rounds", "1", "--no-memory",
                             "--quiet", "--json", str(path)],
                            cwd=ROOT, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True,
                            start_new_session=True)
    try:
        deadline = time.monotonic() + 180
        while rows_in(path) < 1:
            assert proc.poll() is None, proc.communicate()
            assert time.monotonic() < deadline, "no row written within 180 s"
            time.sleep(0.05)
        sent = time.monotonic()
        os.killpg(proc.pid, signum)
        out, err = proc.communicate(timeout=120)
        waited = time.monotonic() - sent
    finally:
        if proc.poll() is None:
            proc.kill()
            proc.communicate()
    assert proc.returncode == code, err
    assert waited < EXIT_BOUND_SECONDS, waited
    doc = json.loads(path.read_text())
    assert doc["complete"] is False
    assert 1 <= len(doc["rows"]) < CASES and all(r["status"] == "ok" for r in doc["rows"])
    assert "median time per transform" in out
    assert f"stopped by {signal.Signals(signum).name}" in err and "Traceback" not in err


def test_a_finished_run_says_complete(tmp_path):
    path = tmp_path / "t.json"
    out = subprocess.run([sys.executable, "-m", "fftgauge", "time", "--backend", "null", "--kinds", "fft",
                          "--sizes", "16", "--samples", "5", "--rounds", "1", "--no-memory", "--quiet",
                          "--json", str(path)], cwd=ROOT, capture_output=True, text=True, timeout=300)
    assert out.returncode == 0, out.stderr
    assert json.loads(path.read_text())["complete"] is True


def test_a_full_disk_keeps_the_rows_and_exits_2(tmp_path, monkeypatch, capsys):
    """Every write of the results file fails with ENOSPC (a fake writer): the run still ends,
    prints its tables, keeps the rows in the fallback file and exits 2 with one line."""
    import errno

    import fftgauge.harness.results as results
    from fftgauge.harness.cli import main

    target = str(tmp_path / "t.json")
    real_write = results.write_text_atomic

    def full_disk(path, text):
        if path == target:
            raise OSError(errno.ENOSPC, "No space left on device")
        return real_write(path, text)

    monkeypatch.setattr(results, "write_text_atomic", full_disk)
    monkeypatch.setattr(results.tempfile, "gettempdir", lambda: str(tmp_path))
    code = main(["time", "--backend", "null", "--kinds", "fft", "--sizes", "16,32", "--samples", "5",
                 "--rounds", "1", "--no-memory", "--quiet", "--json", target])
    out, err = capsys.readouterr()
    assert code == 2
    assert "median time per transform" in out
    assert "No space left on device" in err and "Traceback" not in err and len(err.strip().splitlines()) == 1
    kept = json.loads(pathlib.Path(results.fallback_path(target)).read_text())
    assert kept["complete"] is True and len(kept["rows"]) == 2
