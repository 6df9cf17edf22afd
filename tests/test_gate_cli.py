"""Bad requests to `fftgauge gate`: exit code 2 and one line on stderr (contracts: exit codes)."""

import json

import pytest

from fftgauge.harness import cli
from fftgauge.harness.results import envelope


@pytest.fixture
def time_file(tmp_path):
    doc = envelope("fftgauge-time/1", 1)
    doc["rows"] = [{"backend": "numpy", "kind": "fft", "dtype": "float64", "n": 64, "threads": 1,
                    "plan_seconds": 0.0, "seconds": 1e-6, "seconds_low": 0.9e-6, "seconds_high": 1.1e-6,
                    "samples": 25, "loops": 100, "flops": 1920, "gflops": 1.9, "ns_per_nlogn": 2.6,
                    "peak_bytes": 0, "in_place": False, "norm": "backward", "status": "ok", "message": ""}]
    path = tmp_path / "base.json"
    path.write_text(json.dumps(doc))
    return path, doc


def _one_line_error(capsys, argv, needle):
    assert cli.main(["gate", *argv]) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and err.startswith("fftgauge: error: "), err
    assert needle in err, err


def test_bad_requests(tmp_path, capsys, time_file):
    path, doc = time_file
    _one_line_error(capsys, ["--baseline", str(tmp_path / "missing.json")], "does not exist")
    corrupt = tmp_path / "corrupt.json"
    corrupt.write_text('{"schema": "fftgauge-time/1", "rows": [')
    _one_line_error(capsys, ["--baseline", str(corrupt)], "not valid JSON")
    foreign = tmp_path / "foreign.json"
    foreign.write_text(json.dumps({"schema": "fftgauge-check/1", "rows": []}))
    _one_line_error(capsys, ["--baseline", str(foreign)], "schema")
    other = dict(doc, machine=dict(doc["machine"], cpu="An Imaginary CPU 9000", cores=128))
    other_path = tmp_path / "other.json"
    other_path.write_text(json.dumps(other))
    _one_line_error(capsys, ["--baseline", str(other_path)], "machine")
    _one_line_error(capsys, ["--old", "nosuchbackend", "--new", "numpy", "--sizes", "64"], "nosuchbackend")
    _one_line_error(capsys, ["--old", "numpy", "--new", "numpy", "--threshold", "abc"], "threshold")
    _one_line_error(capsys, ["--old", "numpy", "--new", "numpy", "--sizes", "0"], "'0'")
    _one_line_error(capsys, ["--new", "numpy"], "--old")
    _one_line_error(capsys, ["--old", "numpy", "--new", "numpy", "--inconclusive", "maybe"], "--inconclusive")


# -- a gate stopped by a signal: the real command line in a subprocess ------------------------

def _wait_for_workers(proc, count, limit_seconds=120.0):
    """Return once ``proc`` has ``count`` child processes (the gate's workers are up)."""
    import time

    import psutil

    parent = psutil.Process(proc.pid)
    deadline = time.monotonic() + limit_seconds
    while time.monotonic() < deadline:
        if proc.poll() is not None:
            raise AssertionError(f"the gate ended before its workers started: {proc.communicate()}")
        if len(parent.children()) >= count:
            return
        time.sleep(0.1)
    raise AssertionError("the gate's workers did not start")


@pytest.mark.slow
@pytest.mark.parametrize("signal_name, code", [("SIGTERM", 143), ("SIGHUP", 129)])
def test_a_signal_stops_the_gate_writes_what_finished_and_exits_with_its_code(tmp_path, signal_name, code):
    """SIGTERM (what CI sends on cancel) and SIGHUP stop the gate within seconds (bounded
    generously here; benchmarks/bench_gate.py signals measures it): every output is written,
    marked incomplete, and no case it did not finish is called a regression."""
    import signal
    import subprocess
    import sys
    import time
    import xml.etree.ElementTree as ET

    out = {k: tmp_path / f"g.{k}" for k in ("json", "md", "xml", "csv")}
    proc = subprocess.Popen(
        [sys.executable, "-m", "fftgauge", "gate", "--old", "busywait[seconds=0.01]", "--new",
         "busywait[seconds=0.01]", "--kinds", "fft", "--sizes", "64,128,256,512", "--budget", "60", "--quiet",
         "--json", str(out["json"]), "--markdown", str(out["md"]), "--junit", str(out["xml"]),
         "--csv", str(out["csv"])], stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
    try:
        _wait_for_workers(proc, 7)  # three per side and the yardstick's
        time.sleep(1.0)
        sent = time.monotonic()
        proc.send_signal(getattr(signal, signal_name))
        stdout, stderr = proc.communicate(timeout=30)
        seconds = time.monotonic() - sent
    finally:
        if proc.poll() is None:
            proc.kill()
    assert proc.returncode == code, (stdout, stderr)
    assert seconds < 10, seconds
    doc = json.loads(out["json"].read_text())
    assert doc["complete"] is False and doc["stopped_by"] == signal_name and doc["regressed"] is False
    assert doc["outcome"] == "incomplete" and any(r["status"] == "incomplete" for r in doc["rows"])
    assert all(r["verdict"] is None for r in doc["rows"] if r["status"] == "incomplete")
    assert stdout.startswith("INCOMPLETE: the run stopped before every case was decided: stopped by " + signal_name)
    assert out["md"].read_text().startswith("## fftgauge gate: INCOMPLETE")
    suite = ET.parse(out["xml"]).getroot().find("testsuite")
    assert len(list(suite.iter("testcase"))) == len(doc["rows"]) and int(suite.get("errors")) >= 1
    assert out["csv"].read_text().splitlines()[0].startswith("backend,kind,dtype,n,ratio")


def test_a_stored_run_that_did_not_complete_is_named_in_the_notes(tmp_path, time_file):
    from fftgauge.harness.gate.history import load_stored_runs

    path, doc = time_file
    folder = tmp_path / "history"
    folder.mkdir()
    (folder / "a.json").write_text(json.dumps(dict(doc, complete=False, created="2026-12-01T00:00:00Z")))
    (folder / "b.json").write_text(json.dumps(dict(doc, complete=True, created="2026-12-02T00:00:00Z")))
    runs, warnings, notes = load_stored_runs(str(folder), 5, False)
    assert [r.complete for r in runs] == [False, True]
    assert any("1 stored run(s) did not complete (a.json)" in n for n in notes), notes
    runs, _, notes = load_stored_runs(str(path), 5, False)
    assert runs[0].complete and not any("did not complete" in n for n in notes)


def test_output_paths_are_checked_before_the_work(tmp_path, capsys):
    _one_line_error(capsys, ["--old", "numpy", "--new", "numpy", "--sizes", "64", "--junit", str(tmp_path)],
                    "--junit")
    _one_line_error(capsys, ["--old", "numpy", "--new", "numpy", "--sizes", "64", "--json", str(tmp_path)], "--json")


def test_json_dash_writes_the_document_alone_to_standard_output(capsys):
    code = cli.main(["gate", "--old", "numpy", "--new", "tests/data/misbehaving.py:abort_fft", "--sizes", "64",
                     "--kinds", "fft", "--budget", "1", "--quiet", "--json", "-"])
    captured = capsys.readouterr()
    doc = json.loads(captured.out)
    assert code == 1 and doc["schema"] == "fftgauge-gate/1" and doc["outcome"] == "error"
    assert "FAIL" in captured.err and "written to standard output" in captured.err
