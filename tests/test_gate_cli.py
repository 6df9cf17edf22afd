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
