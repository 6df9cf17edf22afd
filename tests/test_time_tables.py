"""Output of ``fftgauge time`` and ``fftgauge count``: the comparison table's fastest mark and
self-timed columns, the count table's ratio column, and ``--json -`` on standard output.

The times below are invented (a scenario of our own); what is checked is which cell is
marked and how cells read, not any measurement.
"""

from __future__ import annotations

import json
import pathlib
import subprocess
import sys

from fftgauge.harness.cli.count import table_text
from fftgauge.harness.report.time_tables import (SELF_TIMED_LEGEND, SELF_TIMED_MARK, comparison_blocks,
                                                 comparison_table, format_comparison, markdown_comparison)
from fftgauge.harness.timing.opcount import count_table

ROOT = pathlib.Path(__file__).resolve().parent.parent


def time_row(backend: str, n: int, seconds: float, source: str = "harness") -> dict:
    return {"backend": backend, "kind": "fft", "dtype": "float64", "n": n, "threads": 1, "seconds": seconds,
            "status": "ok", "timing_source": source}


#: A host-timed library and a program reporting its own times: the program reads faster at
#: n = 16 (its own clock leaves out the pipe), slower at 32, alone at 64.
ROWS = ([time_row("numpy", 16, 2e-6), time_row("numpy", 32, 3e-6)]
        + [time_row("exec:./ourfft", n, s, "program") for n, s in ((16, 1e-7), (32, 4e-6), (64, 1e-6))])


def test_self_timed_column_is_marked_and_never_fastest_beside_host_timed_columns():
    (block,) = comparison_blocks(comparison_table(ROWS))
    assert block["header"] == ["n", "numpy", f"exec:./ourfft {SELF_TIMED_MARK}"]
    # n = 16: the self-timed 100 ns is not marked beside numpy's 2 us; n = 64: it is the only time
    assert block["fastest"] == [1, 1, 2]
    assert block["legend"] == SELF_TIMED_LEGEND
    text = format_comparison(comparison_table(ROWS))
    assert SELF_TIMED_LEGEND in text.splitlines()
    assert "**100 ns**" not in markdown_comparison(comparison_table(ROWS))
    assert SELF_TIMED_LEGEND in markdown_comparison(comparison_table(ROWS))


def test_host_timed_tables_have_no_mark_and_the_fastest_is_the_smallest():
    rows = [time_row("numpy", 16, 2e-6), time_row("scipy", 16, 1e-6), time_row("numpy", 32, 3e-6),
            time_row("scipy", 32, 5e-6)]
    (block,) = comparison_blocks(comparison_table(rows))
    assert block["header"] == ["n", "numpy", "scipy"] and block["legend"] is None
    assert block["fastest"] == [2, 1]
    assert SELF_TIMED_MARK not in format_comparison(comparison_table(rows))


def test_count_ratio_column_keeps_one_format():
    """direct/radix-2 ratio N^2 / ((N/2) log2 N) = 2N / log2 N: 4, 4, 5.33, 8, ..., 8192 at 2^16
    (by hand); every cell with one decimal, whatever its size."""
    rows = count_table([2**k for k in range(1, 17)], counting_backends={"radix2": None, "direct": None})
    cells = [line.split()[-1] for line in table_text(rows).splitlines()[2:]]
    assert cells[:4] == ["4.0", "4.0", "5.3", "8.0"] and cells[-1] == "8192.0"
    assert all(c.count(".") == 1 and len(c.split(".")[1]) == 1 for c in cells)


def _run(*args: str) -> subprocess.CompletedProcess:
    return subprocess.run([sys.executable, "-m", "fftgauge", *args], capture_output=True, text=True, cwd=ROOT,
                          timeout=300)


def test_count_json_dash_writes_json_to_standard_output(tmp_path):
    out = subprocess.run([sys.executable, "-m", "fftgauge", "count", "--sizes", "2^1..2^4", "--json", "-"],
                         capture_output=True, text=True, cwd=tmp_path, timeout=300)
    assert out.returncode == 0, out.stderr
    doc = json.loads(out.stdout)
    assert doc["schema"] == "fftgauge-count/1" and [r["n"] for r in doc["rows"]] == [2, 4, 8, 16]
    assert "direct DFT needs about" in out.stderr
    assert not (tmp_path / "-").exists()


def test_time_json_dash_writes_json_to_standard_output(tmp_path):
    out = subprocess.run([sys.executable, "-m", "fftgauge", "time", "--backend", "null", "--kinds", "fft",
                          "--sizes", "16,32", "--samples", "5", "--rounds", "1", "--no-memory", "--quiet",
                          "--json", "-"], capture_output=True, text=True, cwd=tmp_path, timeout=300)
    assert out.returncode == 0, out.stderr
    doc = json.loads(out.stdout)
    assert doc["schema"] == "fftgauge-time/1" and sorted(r["n"] for r in doc["rows"]) == [16, 32]
    assert "written to standard output" in out.stderr
    assert not (tmp_path / "-").exists()


def test_rate_of_a_row_without_its_own_rate_uses_the_conventional_count():
    """5 N log2 N / seconds / 1e9 (common practice): N = 1024 at 10 us gives 5.12 GFLOP/s,
    the real transform half of it; a row's own gflops field wins (by hand)."""
    from fftgauge.harness.report.time_tables import rate_gflops

    assert rate_gflops({"n": 1024, "kind": "fft", "seconds": 1e-5}) == 5.12
    assert rate_gflops({"n": 1024, "kind": "rfft", "seconds": 1e-5}) == 2.56
    assert rate_gflops({"n": 1024, "kind": "fft", "seconds": 1e-5, "gflops": 3.0}) == 3.0
    assert rate_gflops({"n": 1, "kind": "fft", "seconds": 1e-5}) is None


def test_the_report_prints_the_self_timed_legend_under_its_table():
    """``fftgauge report`` (pages.build_blocks): the legend line follows the timing table whose
    column is self-timed, and no table of host-timed columns gets one."""
    from fftgauge.harness.report.inputs import ReportInputs
    from fftgauge.harness.report.pages import build_blocks

    doc = json.loads((ROOT / "tests" / "data" / "sample_time.json").read_text())
    backends = sorted({r["backend"] for r in doc["rows"]})
    plain = build_blocks(ReportInputs(time=[("t.json", doc)]), {})
    assert ("p", SELF_TIMED_LEGEND) not in plain
    for row in doc["rows"]:
        row["timing_source"] = "program" if row["backend"] == backends[-1] else "harness"
    blocks = build_blocks(ReportInputs(time=[("t.json", doc)]), {})
    tables = [i for i, b in enumerate(blocks) if b[0] == "table" and f"{backends[-1]} {SELF_TIMED_MARK}" in b[1]]
    assert tables and all(blocks[i + 1] == ("p", SELF_TIMED_LEGEND) for i in tables)
    assert blocks.count(("p", SELF_TIMED_LEGEND)) == len(tables)
