"""Seconds from a signal to the exit of ``fftgauge check`` on a slow backend.

Starts the real command line (in its own process group, as a terminal's job) on
tests/data/slow_fft.py, waits until some case has been written, sends SIGINT, SIGTERM or
SIGHUP to the group, and prints the seconds to exit, the exit code and the summary's last
line. Goal: under 2 s each (issue 21). Run: ``.venv/bin/python benchmarks/bench_check_signals.py``.
"""

from __future__ import annotations

import json
import os
import signal
import subprocess
import sys
import tempfile
import time
from pathlib import Path

REPO_ROOT = Path(__file__).resolve().parent.parent


def seconds_to_exit(signame: str, folder: str) -> tuple[float, int, str]:
    """Return (seconds from the signal to exit, exit code, last line printed) for one run."""
    out = os.path.join(folder, f"{signame}.json")
    env = {**os.environ, "PYTHONPATH": str(REPO_ROOT)}
    proc = subprocess.Popen([sys.executable, "-m", "fftgauge", "check", "--backend", "tests/data/slow_fft.py:fft",
                             "--sizes", "1..200", "--dtypes", "float64", "--case-budget", "0", "--quiet",
                             "--json", out], cwd=REPO_ROOT, env=env, stdout=subprocess.PIPE, stderr=subprocess.PIPE,
                            text=True, start_new_session=True)
    while not (os.path.exists(out) and json.loads(Path(out).read_text())["rows"]):
        time.sleep(0.1)
    time.sleep(2.0)
    sent = time.monotonic()
    os.killpg(proc.pid, getattr(signal, signame))
    stdout, _ = proc.communicate()
    return time.monotonic() - sent, proc.returncode, (stdout.strip().splitlines() or [""])[-1]


def main() -> None:
    with tempfile.TemporaryDirectory() as folder:
        for signame in ("SIGINT", "SIGTERM", "SIGHUP"):
            seconds, code, last = seconds_to_exit(signame, folder)
            print(f"{signame}: exit {code} after {seconds:.2f} s; {last[:90]}")


if __name__ == "__main__":
    main()
