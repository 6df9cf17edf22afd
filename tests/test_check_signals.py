"""``fftgauge check`` cut short: a signal mid-run stops it within seconds with the summary of
what finished, the exit code the shell expects (128 + the signal), and a results file marked
incomplete; results paths that cannot be written are exit 2 before the work, and a write
that fails during the run keeps the rows (issues 13 and 21).

The signal tests run the real command line in a subprocess (its own process group, as a
terminal's job) and bound the seconds to exit generously; nothing is asserted to the
millisecond.
"""

from __future__ import annotations

import errno
import json
import os
import signal
import stat
import subprocess
import sys
import time
from pathlib import Path

import pytest

from fftgauge.harness import results

REPO_ROOT = Path(__file__).resolve().parent.parent


def _start_check(out: Path) -> subprocess.Popen:
    env = {**os.environ, "PYTHONPATH": str(REPO_ROOT)}
    cmd = [sys.executable, "-m", "fftgauge", "check", "--backend", "tests/data/slow_fft.py:fft", "--sizes", "1..200",
           "--dtypes", "float64", "--case-budget", "0", "--quiet", "--json", str(out)]
    return subprocess.Popen(cmd, cwd=REPO_ROOT, env=env, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True,
                            start_new_session=True)


@pytest.mark.timeout(180)
@pytest.mark.parametrize("signame", ["SIGINT", "SIGTERM", "SIGHUP"])
def test_a_signal_stops_check_with_the_summary_and_an_incomplete_file(tmp_path, signame):
    out = tmp_path / "run.json"
    proc = _start_check(out)
    deadline = time.monotonic() + 120
    while time.monotonic() < deadline and not (out.exists() and json.loads(out.read_text())["rows"]):
        time.sleep(0.2)  # until some case has finished and was written
    assert proc.poll() is None, proc.communicate()
    sent = time.monotonic()
    os.killpg(proc.pid, getattr(signal, signame))
    stdout, stderr = proc.communicate(timeout=60)
    seconds = time.monotonic() - sent
    assert proc.returncode == 128 + getattr(signal, signame), stderr
    assert seconds < 10, f"exit {seconds:.1f} s after {signame}"
    assert f"stopped by {signame}" in stdout and "Traceback" not in stderr, stdout + stderr
    doc = json.loads(out.read_text())
    assert doc["complete"] is False and doc["rows"]
    finished = {r["n"] for r in doc["rows"]}
    assert len(finished) < 200
    left = subprocess.run(["pgrep", "-g", str(proc.pid)], capture_output=True, text=True).stdout.split()
    assert not left, f"processes left in the run's group: {left}"


def test_a_finished_file_says_complete(tmp_path):
    doc = {"schema": "fftgauge-check/1", "rows": []}
    writer = results.ResultsWriter(str(tmp_path / "r.json"), doc)
    assert json.loads((tmp_path / "r.json").read_text())["complete"] is False
    writer.add([{"i": 1}])
    writer.close()
    assert json.loads((tmp_path / "r.json").read_text())["complete"] is True
    # a document written in one go (count) is complete too
    assert json.loads(results.dumps({"schema": "fftgauge-count/1", "rows": []}))["complete"] is True


def test_a_full_disk_keeps_the_rows_in_a_fallback_file(tmp_path):
    """A writer that raises ENOSPC after its first write: the rows stay in memory, close()
    writes them to the fallback file and raises one error naming both paths."""
    calls = []

    def full_disk(path, text):
        calls.append(path)
        if len(calls) > 1:
            raise OSError(errno.ENOSPC, os.strerror(errno.ENOSPC), path)
        results.write_text_atomic(path, text)

    target = str(tmp_path / "r.json")
    doc = {"schema": "fftgauge-check/1", "rows": []}
    writer = results.ResultsWriter(target, doc, min_interval_seconds=0.0, writer=full_disk)
    writer.add([{"i": 1}])
    writer.add([{"i": 2}])
    with pytest.raises(results.ResultsWriteError) as info:
        writer.close()
    message = str(info.value)
    spare = results.fallback_path(target)
    assert target in message and spare in message and "No space left" in message and "\n" not in message
    kept = json.loads(Path(spare).read_text())
    assert [r["i"] for r in kept["rows"]] == [1, 2] and kept["complete"] is True
    assert info.value.doc["rows"] == [{"i": 1}, {"i": 2}]
    os.unlink(spare)


def test_a_full_disk_during_check_is_exit_2_with_the_summary(tmp_path, monkeypatch, capsys):
    from fftgauge.harness.cli import main

    real = results.write_text_atomic
    calls = []

    def full_disk(path, text):
        calls.append(path)
        if path.endswith("run.json") and len(calls) > 1:
            raise OSError(errno.ENOSPC, os.strerror(errno.ENOSPC), path)
        real(path, text)

    monkeypatch.setattr(results, "write_text_atomic", full_disk)
    code = main(["check", "--backend", "numpy", "--sizes", "8,16", "--kinds", "fft", "--dtypes", "float64",
                 "--quiet", "--json", str(tmp_path / "run.json")])
    captured = capsys.readouterr()
    assert code == 2, captured.err
    assert "PASS" in captured.out and "Traceback" not in captured.err
    assert "No space left" in captured.err and "run.json" in captured.err and len(captured.err.splitlines()) == 1
    spare = results.fallback_path(str(tmp_path / "run.json"))
    assert len(json.loads(Path(spare).read_text())["rows"]) > 0
    os.unlink(spare)


@pytest.mark.parametrize("bad", ["folder", "nofolder"])
def test_unwritable_json_paths_are_exit_2_before_any_case(tmp_path, capsys, bad):
    from fftgauge.harness.cli import main

    if bad == "nofolder" and os.geteuid() == 0:
        pytest.skip("root writes into any folder")
    locked = tmp_path / "locked"
    locked.mkdir()
    path = str(tmp_path) if bad == "folder" else str(locked / "sub" / "run.json")
    if bad == "nofolder":
        locked.chmod(0o500)
    try:
        code = main(["check", "--backend", "numpy", "--sizes", "8", "--quiet", "--json", path])
    finally:
        locked.chmod(0o700)
    err = capsys.readouterr().err
    assert code == 2 and len(err.strip().splitlines()) == 1 and path in err, err


def test_files_follow_the_umask(tmp_path):
    old = os.umask(0o022)
    try:
        results.write_text_atomic(str(tmp_path / "a.json"), "{}")
        os.umask(0o077)
        results.write_text_atomic(str(tmp_path / "b.json"), "{}")
    finally:
        os.umask(old)
    assert stat.S_IMODE((tmp_path / "a.json").stat().st_mode) == 0o644
    assert stat.S_IMODE((tmp_path / "b.json").stat().st_mode) == 0o600


def test_json_to_standard_output(capsys):
    from fftgauge.harness.cli import main

    code = main(["check", "--backend", "numpy", "--sizes", "8", "--kinds", "fft", "--dtypes", "float64", "--quiet",
                 "--json", "-"])
    captured = capsys.readouterr()
    assert code == 0
    doc = json.loads(captured.out)
    assert doc["schema"] == "fftgauge-check/1" and doc["complete"] is True and doc["rows"]
    assert "PASS" in captured.err
    assert not os.path.exists("-")
