"""Tests of the plots (fftgauge.harness.report.plots), the comparison tables (fftgauge.harness.report.time_tables) and the
``fftgauge report`` sub-command (fftgauge.harness.cli.report).

tests/data/sample_time.json and sample_check.json are DEMO results files with invented
numbers (their "note" field says so): they exercise drawing and tables, they measure nothing.
"""

from __future__ import annotations

import argparse
import copy
import html
import json
import math
import os
import re
import sys
import xml.etree.ElementTree as ET

import numpy as np
import pytest

from fftgauge.harness import cli
from fftgauge.harness.cli import report as cmd_report
from fftgauge.harness.report import plots
from fftgauge.harness.cases import Case
from fftgauge.harness.errors import UsageError
from fftgauge.harness.report.time_tables import comparison_table, format_comparison, format_seconds, markdown_comparison

DATA = os.path.join(os.path.dirname(__file__), "data")
TIME_FILE = os.path.join(DATA, "sample_time.json")
CHECK_FILE = os.path.join(DATA, "sample_check.json")
PNG_MAGIC = b"\x89PNG\r\n\x1a\n"  # PNG specification (ISO/IEC 15948), file signature


def load(path: str) -> dict:
    with open(path, encoding="utf-8") as fh:
        return json.load(fh)


@pytest.fixture(scope="module")
def time_doc() -> dict:
    return load(TIME_FILE)


@pytest.fixture(scope="module")
def check_doc() -> dict:
    return load(CHECK_FILE)


def gids(ax, prefix: str) -> list[str]:
    return [line.get_gid() for line in ax.get_lines() if (line.get_gid() or "").startswith(prefix)]


def visible_axes(fig) -> list:
    return [ax for ax in fig.axes if ax.get_visible()]


def panel(fig, title: str):
    return next(ax for ax in visible_axes(fig) if ax.get_title().startswith(title))


def assert_png(path: str) -> None:
    """Valid PNG: the signature, and matplotlib's reader loads it larger than 100 x 100 pixels."""
    import matplotlib.image

    with open(path, "rb") as fh:
        assert fh.read(8) == PNG_MAGIC
    image = matplotlib.image.imread(path)
    assert image.shape[0] > 100 and image.shape[1] > 100


def assert_svg(path: str) -> None:
    root = ET.parse(path).getroot()
    assert root.tag.endswith("svg")
    assert len(list(root.iter())) > 50


def test_demo_files_say_they_are_demo_data(time_doc, check_doc):
    assert time_doc["schema"] == "fftgauge-time/1" and check_doc["schema"] == "fftgauge-check/1"
    assert "DEMO" in time_doc["note"] and "DEMO" in check_doc["note"]


# --------------------------------------------------------------------------- time-per-point plot

def legend_texts(fig) -> list[str]:
    return [t.get_text() for legend in fig.legends for t in legend.get_texts()]


def test_time_plot_has_one_line_per_backend_and_both_models(time_doc):
    fig = plots.draw_time(time_doc["rows"])
    assert len(visible_axes(fig)) == 3  # fft float32, fft float64, rfft float64
    expected = {("fft", "float64"): {"numpy", "scipy", "pyfftw", "radix2-dit"},
                ("fft", "float32"): {"numpy", "scipy", "pyfftw"}, ("rfft", "float64"): {"numpy", "scipy", "pyfftw"}}
    for (kind, dtype), backends in expected.items():
        ax = panel(fig, f"{kind} {dtype}")
        assert sorted(gids(ax, "backend:")) == sorted(f"backend:{b}" for b in backends)
        assert sorted(gids(ax, "model:")) == ["model:anchor", "model:n2", "model:nlogn"]
        assert ax.get_xscale() == "log" and ax.get_yscale() == "log"
        assert "/ N" in ax.get_ylabel() and "transform length N" in ax.get_xlabel()
    legend = legend_texts(fig)
    assert {"numpy", "scipy", "pyfftw", "radix2-dit"} <= set(legend)  # every backend, by colour, in one legend
    for words in ("line: powers of two", "hollow: other sizes", "band: 95% interval", "N log", "N$^2$", "grey ring"):
        assert any(words in t for t in legend), words  # every mark explained


def test_time_plot_values_and_model_lines_per_point(time_doc):
    """A point is the median time / N. Per point the N log2 N model is t0/n0 * log2 N / log2 n0 and the N^2
    model t0/n0 * N/n0, where t0 is the fastest median time at n0, the middle power of two >= 64 (here 2^12)."""
    fig = plots.draw_time(time_doc["rows"])
    ax = panel(fig, "fft float64")
    rows = [r for r in time_doc["rows"] if r["kind"] == "fft" and r["dtype"] == "float64" and r["seconds"]]
    numpy_line = next(line for line in ax.get_lines() if line.get_gid() == "backend:numpy")
    by_n = {r["n"]: r["seconds"] for r in rows if r["backend"] == "numpy"}
    assert [y * x for x, y in zip(numpy_line.get_xdata(), numpy_line.get_ydata())] == pytest.approx(
        [by_n[x] for x in numpy_line.get_xdata()], rel=1e-12)
    n0 = 2**12
    t0 = min(r["seconds"] for r in rows if r["n"] == n0)
    nlogn = next(line for line in ax.get_lines() if line.get_gid() == "model:nlogn")
    x, y = np.asarray(nlogn.get_xdata()), np.asarray(nlogn.get_ydata())
    assert np.allclose(y * x / (x * np.log2(x)), t0 / (n0 * math.log2(n0)), rtol=1e-12, atol=0)
    n2 = next(line for line in ax.get_lines() if line.get_gid() == "model:n2")
    x, y = np.asarray(n2.get_xdata()), np.asarray(n2.get_ydata())
    assert np.allclose(y * x / x**2, t0 / n0**2, rtol=1e-12, atol=0)
    anchor = next(line for line in ax.get_lines() if line.get_gid() == "model:anchor")
    assert list(anchor.get_xdata()) == [n0] and anchor.get_ydata()[0] == pytest.approx(t0 / n0, rel=1e-12)


def test_time_plot_lines_hold_the_powers_of_two_and_markers_the_other_sizes(time_doc):
    fig = plots.draw_time(time_doc["rows"])
    ax = panel(fig, "fft float32")
    line = next(ln for ln in ax.get_lines() if ln.get_gid() == "backend:pyfftw")
    rows = sorted((r for r in time_doc["rows"] if r["backend"] == "pyfftw" and r["kind"] == "fft"
                   and r["dtype"] == "float32"), key=lambda r: r["n"])
    pow2 = [r for r in rows if r["n"] & (r["n"] - 1) == 0]
    assert list(line.get_xdata()) == [r["n"] for r in pow2]
    assert list(line.get_ydata()) == pytest.approx([r["seconds"] / r["n"] for r in pow2], rel=1e-12)
    others = next(ln for ln in ax.get_lines() if ln.get_gid() == "other-sizes:pyfftw")
    assert sorted(others.get_xdata()) == [97, 1000, 1009, 9973]


def test_end_labels_only_where_they_do_not_collide(time_doc):
    """Labels at lines' ends that would overlap are not drawn (the figure's legend names the backends); labels
    far apart are. fft float32 ends with numpy and scipy 1.0x apart at 2^18 (collide); fft float64 at distinct
    heights."""
    fig = plots.draw_relative(time_doc["rows"])
    labels = {title: {t.get_text() for t in panel(fig, title).texts} for title in ("fft float32", "rfft float64")}
    assert labels["fft float32"] == set()
    assert labels["rfft float64"] == {"numpy", "scipy", "pyfftw"}
    from matplotlib.backends.backend_agg import FigureCanvasAgg

    renderer = FigureCanvasAgg(fig).get_renderer()
    fig.draw(renderer)
    boxes = [t.get_window_extent(renderer=renderer) for t in panel(fig, "rfft float64").texts]
    for i, a in enumerate(boxes):  # the labels drawn do not overlap
        for b in boxes[i + 1:]:
            assert not a.overlaps(b)


def test_labels_fit_rule():
    from fftgauge.harness.report.figures import LABEL_MIN_GAP, labels_fit

    close = [("a", 1024, 1.0, "k"), ("b", 1024, 10 ** (LABEL_MIN_GAP * 0.5 * 2), "k")]  # half the gap of a 2-decade axis
    far = [("a", 1024, 1.0, "k"), ("b", 1024, 10 ** (LABEL_MIN_GAP * 1.5 * 2), "k")]
    assert not labels_fit(close, 0.1, 10.0, log_y=True)
    assert labels_fit(far, 0.1, 10.0, log_y=True)
    assert labels_fit([("a", 16, 1.0, "k"), ("b", 1024, 1.0, "k")], 0.1, 10.0, log_y=True)  # columns 6 octaves apart


def test_time_plot_skips_rows_without_a_time(time_doc):
    fig = plots.draw_time(time_doc["rows"])
    line = next(ln for ln in panel(fig, "fft float64").get_lines() if ln.get_gid() == "backend:radix2-dit")
    assert 97 not in list(line.get_xdata())  # the skip row
    with pytest.raises(UsageError, match="no timed rows"):
        plots.draw_time([r for r in time_doc["rows"] if r["status"] != "ok"])


def test_time_plot_png_and_svg(tmp_path, time_doc):
    rows = [r for r in time_doc["rows"] if r["kind"] == "fft" and r["dtype"] == "float64"]
    png = plots.plot_time(rows, str(tmp_path / "t.png"))
    assert png == str(tmp_path / "t.png")
    assert_png(png)
    svg = plots.plot_time(rows, str(tmp_path / "sub" / "t.svg"))
    assert_svg(svg)
    assert sorted(os.listdir(tmp_path)) == ["sub", "t.png"]  # no temporary files left behind


def test_other_extension_is_a_usage_error(tmp_path, time_doc):
    for name in ("t.jpg", "t", "t.pdf"):
        with pytest.raises(UsageError, match=r"write \.png or \.svg"):
            plots.plot_time(time_doc["rows"], str(tmp_path / name))
    assert os.listdir(tmp_path) == []


def test_missing_matplotlib_is_a_usage_error(monkeypatch, time_doc):
    """With matplotlib not importable the plot functions say how to install it."""
    for name in [m for m in sys.modules if m == "matplotlib" or m.startswith("matplotlib.")]:
        monkeypatch.setitem(sys.modules, name, None)
    monkeypatch.setitem(sys.modules, "matplotlib", None)
    with pytest.raises(UsageError, match=r"install matplotlib \(pip install 'fftgauge\[plots\]'\)"):
        plots.draw_time(time_doc["rows"])
    with pytest.raises(UsageError, match="install matplotlib"):
        plots.require_matplotlib()


# --------------------------------------------------------------------------- relative-speed plot

def test_relative_plot_divides_by_the_fastest_at_each_size(time_doc):
    fig = plots.draw_relative(time_doc["rows"])
    ax = panel(fig, "fft float64")
    assert len(gids(ax, "backend:")) == 4 and gids(ax, "fastest")
    rows = [r for r in time_doc["rows"] if r["kind"] == "fft" and r["dtype"] == "float64" and r["seconds"]]
    for backend in ("numpy", "radix2-dit"):
        line = next(ln for ln in ax.get_lines() if ln.get_gid() == f"backend:{backend}")
        for n, ratio in zip(line.get_xdata(), line.get_ydata()):
            fastest = min(r["seconds"] for r in rows if r["n"] == n)
            mine = next(r["seconds"] for r in rows if r["n"] == n and r["backend"] == backend)
            assert ratio == pytest.approx(mine / fastest, rel=1e-12) and ratio >= 1.0
    assert "fastest" in ax.get_ylabel() and any("1×" in t for t in legend_texts(fig))
    # the rate chart is gone: no panel plots GFLOP/s
    assert not any("GFLOP" in a.get_ylabel() for a in visible_axes(fig))


def test_relative_plot_needs_two_backends_at_a_size():
    rows = [{"backend": "x", "kind": "fft", "dtype": "float64", "n": n, "seconds": 1e-6} for n in (64, 128)]
    with pytest.raises(UsageError, match="two or more backends"):
        plots.draw_relative(rows)


def test_rate_is_the_flop_convention_over_the_time():
    """Without a gflops field the rate is 5 N log2 N / seconds (common practice in FFT benchmarking),
    2.5 N log2 N for real transforms; it is a number in the tables."""
    from fftgauge.harness.report.time_tables import rate_gflops

    for kind, factor in (("fft", 5.0), ("rfft", 2.5)):
        row = {"kind": kind, "n": 256, "seconds": 1e-6}
        assert rate_gflops(row) == pytest.approx(factor * 256 * 8 / 1e-6 / 1e9, rel=1e-12)
    assert rate_gflops({"kind": "fft", "n": 256, "seconds": 1e-6, "gflops": 3.5}) == 3.5


# --------------------------------------------------------------------------- accuracy plot

def test_accuracy_plot_lines_bound_and_failures(check_doc, tmp_path):
    fig = plots.draw_accuracy(check_doc["rows"])
    assert len(visible_axes(fig)) == 2
    for dtype in ("float32", "float64"):
        ax = panel(fig, f"fft {dtype}")
        assert sorted(gids(ax, "backend:")) == ["backend:demo-recurrence", "backend:numpy", "backend:scipy"]
        bound = next(ln for ln in ax.get_lines() if ln.get_gid() == "bound")
        # eps = 2^-23 (binary32), 2^-52 (binary64): IEEE Std 754-2019; the demo rows store limit = bound x eps
        eps = {"float32": 2.0**-23, "float64": 2.0**-52}[dtype]
        limits = {r["n"]: r["limit"] / eps for r in check_doc["rows"]
                  if r["check"] == "accuracy" and r["dtype"] == dtype and r["limit"] > 0}
        for n, value in zip(bound.get_xdata(), bound.get_ydata()):
            assert value == pytest.approx(limits[n], rel=1e-12)
        fails = next(ln for ln in ax.get_lines() if ln.get_gid() == "fail")
        n_fail = sum(1 for r in check_doc["rows"] if r["check"] == "accuracy" and r["dtype"] == dtype
                     and r["status"] == "fail")
        assert len(fails.get_xdata()) == n_fail == 4
        assert "eps units" in ax.get_ylabel() and "eps = " in ax.get_title()
    legend = legend_texts(fig)
    assert any("error bound" in t for t in legend) and any("fails the check" in t for t in legend)
    assert "exact result" in panel(fig, "fft float64").get_title()  # the n = 1 row with 0 eps
    assert_png(plots.plot_accuracy(check_doc["rows"], str(tmp_path / "a.png")))


def test_bound_in_eps_units_uses_the_rows_own_scale():
    row = {"dtype": "float64", "value": 4.0e-16, "eps_units": 2.0, "limit": 2.0e-15}
    assert plots.bound_eps_units(row) == pytest.approx(10.0)
    assert plots.bound_eps_units({**row, "value": 0.0, "eps_units": 0.0}) == pytest.approx(2.0e-15 / 2.0**-52)
    assert plots.bound_eps_units({**row, "limit": None}) is None


def test_accuracy_plot_needs_accuracy_rows(check_doc):
    with pytest.raises(UsageError, match="no accuracy rows"):
        plots.draw_accuracy([r for r in check_doc["rows"] if r["check"] != "accuracy"])


# --------------------------------------------------------------------------- history plot

def history_docs(time_doc: dict, count: int = 4) -> list[dict]:
    docs = []
    for i in range(count):
        doc = copy.deepcopy(time_doc)
        doc["created"] = f"2026-12-0{i + 1}T10:00:00Z"
        if i % 2 == 0:
            doc["commit"] = f"{i}0c0ffee1234567890"
        for r in doc["rows"]:
            if r["seconds"]:
                for key in ("seconds", "seconds_low", "seconds_high"):
                    r[key] *= 1 + 0.1 * i
        docs.append(doc)
    return docs


def test_history_plot_orders_runs_and_labels_them(time_doc, tmp_path):
    docs = history_docs(time_doc)
    case = Case("fft", "float64", 1024)
    fig = plots.draw_history(list(reversed(docs)), case)
    axes = visible_axes(fig)
    assert [ax.get_title(loc="left") for ax in axes] == ["numpy", "pyfftw", "radix2-dit", "scipy"]
    labels = [t.get_text() for t in axes[-1].get_xticklabels()]
    assert labels == ["00c0ffee12", "2026-12-02 10:00", "20c0ffee12", "2026-12-04 10:00"]
    line = next(ln for ln in axes[0].get_lines() if ln.get_gid() == "backend:numpy")
    base = next(r["seconds"] for r in time_doc["rows"] if r["backend"] == "numpy" and r["kind"] == "fft"
                and r["dtype"] == "float64" and r["n"] == 1024)
    assert np.allclose(line.get_ydata(), [base * (1 + 0.1 * i) for i in range(4)], rtol=1e-12)
    assert_svg(plots.plot_history(docs, case, str(tmp_path / "h.svg"), backend="numpy"))


def test_history_with_gate_runs_adds_the_ratio_panel(time_doc):
    gate = {"schema": "fftgauge-gate/1", "created": "2026-12-09T00:00:00Z", "regressed": False,
            "rows": [{"backend": "numpy", "kind": "fft", "dtype": "float64", "n": 1024, "ratio": 1.07,
                      "ratio_low": 1.05, "ratio_high": 1.09, "p_value": 0.001, "verdict": "slower"}]}
    fig = plots.draw_history(history_docs(time_doc, 2) + [gate], Case("fft", "float64", 1024), backend="numpy")
    axes = visible_axes(fig)
    assert len(axes) == 2
    ratio = next(ln for ln in axes[1].get_lines() if ln.get_gid() == "ratio:numpy")
    assert list(ratio.get_xdata()) == [2] and list(ratio.get_ydata()) == [1.07]
    assert gids(axes[1], "no-change")


def test_history_of_an_absent_case_is_a_usage_error(time_doc):
    with pytest.raises(UsageError, match="no stored run holds fft float64 n=12345"):
        plots.draw_history(history_docs(time_doc, 1), Case("fft", "float64", 12345))


# --------------------------------------------------------------------------- tables

def test_comparison_table_and_fastest(time_doc):
    df = comparison_table(time_doc["rows"])
    assert list(df.index.names) == ["kind", "dtype", "n"]
    assert list(df.columns) == ["numpy", "scipy", "pyfftw", "radix2-dit"]
    block = df.loc[("fft", "float64")]
    numpy_1024 = next(r["seconds"] for r in time_doc["rows"] if r["backend"] == "numpy" and r["kind"] == "fft"
                      and r["dtype"] == "float64" and r["n"] == 1024)
    assert block.loc[1024, "numpy"] == numpy_1024
    assert math.isnan(block.loc[97, "radix2-dit"])  # a skip row is no time
    assert df.idxmin(axis=1).loc[("fft", "float64", 1009)] == "scipy"


def test_comparison_table_labels_thread_counts_and_keeps_the_last_duplicate():
    rows = [{"backend": "a", "kind": "fft", "dtype": "float64", "n": 8, "threads": t, "seconds": s}
            for t, s in ((1, 2.0), (2, 1.0), (2, 0.5))]
    df = comparison_table(rows)
    assert list(df.columns) == ["a (1 threads)", "a (2 threads)"]
    assert df.loc[("fft", "float64", 8), "a (2 threads)"] == 0.5
    assert comparison_table([]).empty


def test_terminal_and_markdown_tables_mark_the_fastest(time_doc):
    df = comparison_table(time_doc["rows"])
    blocks = format_comparison(df).split("\n\n")
    assert [b.splitlines()[0] for b in blocks] == [f"{k}: median time per transform (* fastest)"
                                                   for k in ("fft float32", "fft float64", "rfft float64")]
    line = next(ln for ln in blocks[1].splitlines() if ln.split()[0] == "1009")
    assert line.count("*") == 1 and "12.9 us *" in line
    md = markdown_comparison(df)
    assert "| 1009 | 14.3 µs | **12.9 µs** | 42.9 µs | - |" in md
    assert md.count("### ") == 3


@pytest.mark.parametrize("seconds, text", [(9.9e-6, "9.90 us"), (1e-4, "100 us"), (999.6e-6, "1.00 ms"),
                                           (2.5, "2.50 s"), (5e-10, "0.500 ns"), (float("nan"), "")])
def test_format_seconds(seconds, text):
    assert format_seconds(seconds) == text


# --------------------------------------------------------------------------- the command

def run_report(argv: list[str]) -> int:
    parser = argparse.ArgumentParser(prog="fftgauge report")
    cmd_report.add_arguments(parser)
    return cmd_report.run(parser.parse_args(argv))


def test_report_writes_plots_tables_and_scaling(tmp_path, capsys):
    out = tmp_path / "rep"
    md, page = tmp_path / "report.md", tmp_path / "report.html"
    assert run_report([TIME_FILE, CHECK_FILE, "--out", str(out), "--markdown", str(md), "--html", str(page)]) == 0
    printed = capsys.readouterr().out.split()
    expected = [str(out / f) for f in ("relative-speed.png", "time-per-point.png", "accuracy.png", "scaling.txt")]
    assert printed == expected + [str(md), str(page)]
    for path in expected[:3]:
        assert_png(path)
    assert not (out / "rate.png").exists()  # the rate is a table column, not a chart
    scaling = (out / "scaling.txt").read_text()
    assert "pyfftw fft float64: n = 9973 (prime)" in scaling and "cache cliff" in scaling
    text = md.read_text(encoding="utf-8")
    assert "(rep/time-per-point.png)" in text and "(rep/relative-speed.png)" in text
    assert "| 1009 | 14.3 µs | **12.9 µs** | 42.9 µs | - |" in text and "```text" in text
    assert "demo-recurrence" in text and "precision x4" in text  # the battery summary
    ET.fromstring(page.read_text(encoding="utf-8").split("\n", 1)[1])  # XHTML-clean apart from the doctype
    assert "<strong>12.9 µs</strong>" in page.read_text(encoding="utf-8")


def report_pages(tmp_path, *inputs: str) -> tuple[str, str]:
    md, page = tmp_path / "p.md", tmp_path / "p.html"
    assert run_report([*inputs, "--out", str(tmp_path / "o"), "--markdown", str(md), "--html", str(page)]) == 0
    return md.read_text(encoding="utf-8"), page.read_text(encoding="utf-8")


def test_page_opens_with_the_verdict(tmp_path, time_doc, check_doc):
    """The demo battery has 8 failing demo-recurrence cases (precision): FAIL, with the counts, first on the page."""
    md, page = report_pages(tmp_path, TIME_FILE, CHECK_FILE)
    first = md.split("\n\n")[1]
    assert first.startswith("## FAIL: correctness, 89 cases passed, 8 gave a wrong answer")
    assert '<p class="verdict FAIL">FAIL: correctness, 89 cases passed' in page
    assert page.index('class="verdict') < page.index("<h2 ")
    passing = {**check_doc, "rows": [r for r in check_doc["rows"] if r["backend"] != "demo-recurrence"]}
    md, page = report_pages(tmp_path, write(tmp_path, "ok.json", json.dumps(passing)))
    assert md.split("\n\n")[1].startswith("## PASS: correctness, 65 cases passed")
    cut = write(tmp_path, "cut.json", json.dumps({**passing, "complete": False}))
    md, page = report_pages(tmp_path, cut)
    assert md.split("\n\n")[1].startswith("## INCOMPLETE: ") and "did not complete" in md
    assert '<p class="verdict INCOMPLETE">' in page


def test_page_says_what_each_finding_means(tmp_path):
    """One sentence per cause with the diagnosis code's meaning (the contract's vocabulary), every size it covers,
    and the worst case's message with its bound; no "and N more"."""
    md, page = report_pages(tmp_path, CHECK_FILE)
    sentence = ("demo-recurrence (fft float64, fft float32): precision (errors at the level of a lower precision "
                "than the one asked for), seen by the accuracy check at n = 2048, 4096, 8192, 16384 (8 cases). "
                "accuracy, fft float64 n = 16384: relative rms error 646 eps, against a bound of 84 eps.")
    assert sentence in md and html.escape(sentence) in page
    assert "more cases" not in md and "its bound (eps)" in md


def test_findings_group_by_cause_across_checks():
    """One finding per backend and cause: a diagnosis seen by several checks is one sentence naming the checks;
    errors with different messages are different causes, the same message at other sizes is one."""
    from fftgauge.harness.report.findings import findings

    def row(check, n, status="fail", diagnosis="sign", message="m", eps=None):
        return {"backend": "b", "kind": "fft", "dtype": "float64", "n": n, "check": check, "status": status,
                "diagnosis": diagnosis if status == "fail" else None, "message": message, "eps_units": eps}

    rows = [row("accuracy", 8, eps=5.0), row("impulse", 8), row("accuracy", 16, eps=9.0), row("pairs", 16),
            row("accuracy", 8, diagnosis="scale", eps=2.0),
            row("accuracy", 7, "error", message="raised ValueError: n = 7"),
            row("accuracy", 9, "error", message="raised ValueError: n = 9"),
            row("accuracy", 11, "error", message="timed out after 120 s"), row("accuracy", 1, "pass")]
    found = findings(rows)
    assert [(f.cause, f.checks, f.sizes) for f in found] == [
        ("scale", ("accuracy",), (8,)), ("sign", ("accuracy", "impulse", "pairs"), (8, 16)),
        ("error", ("accuracy",), (7, 9)), ("error", ("accuracy",), (11,))]
    assert found[1].worst["n"] == 16 and "3 checks (accuracy, impulse, pairs)" in found[1].sentence()
    assert "opposite exponent sign" in found[1].sentence() and "could not run" in found[3].sentence()


def test_page_shows_planning_time_memory_and_rate(tmp_path, time_doc):
    md, page = report_pages(tmp_path, TIME_FILE)
    for column in ("planning (median)", "peak memory at largest N", "GFLOP/s at largest N", "fastest at"):
        assert column in md and f">{column}</th>" in page
    numpy_fft64 = sorted((r for r in time_doc["rows"] if r["backend"] == "numpy" and r["kind"] == "fft"
                          and r["dtype"] == "float64"), key=lambda r: r["n"])[-1]
    line = next(ln for ln in md.splitlines() if ln.startswith("| numpy | fft | float64 |"))
    assert f"{numpy_fft64['gflops']:.3g}" in line and "4.0 MiB" in line  # 4194304 bytes at N = 2^18


def test_page_images_have_captions_that_explain_every_mark(tmp_path):
    md, page = report_pages(tmp_path, TIME_FILE, CHECK_FILE)
    captions = re.findall(r"<figcaption>(.*?)</figcaption>", page, flags=re.S)
    assert len(captions) == 3 == page.count("<img ")
    joined = " ".join(captions)
    for words in ("hollow diamonds", "shaded band", "95% confidence", "N log2 N", "N^2", "grey ring", "1×",
                  "error bound", "red crosses"):
        assert words in joined, words
    assert md.count("![") == 3
    assert "white-space:pre-wrap" in page and "overflow-x:auto}" not in page.split("pre{", 1)[1].split("}", 1)[0]
    assert 'img{max-width:100%;height:auto}' in page  # drawn size, shrunk only to the page's width


def test_two_runs_of_the_same_backends_get_short_tags(tmp_path, time_doc):
    again = write(tmp_path, "again.json", json.dumps(time_doc))
    md, page = report_pages(tmp_path, TIME_FILE, again)
    assert r"numpy \[A\]" in md and r"numpy \[B\]" in md and r"\[A\] = " + TIME_FILE.replace("_", r"\_") in md
    from fftgauge.harness.report.inputs import merged_time_rows

    rows = merged_time_rows([(TIME_FILE, time_doc), ("again.json", time_doc)])
    assert {r["backend"] for r in rows} >= {"numpy [A]", "numpy [B]"}
    fig = plots.draw_time(rows)
    assert {"numpy [A]", "numpy [B]"} <= set(legend_texts(fig))


def test_report_svg_and_history_folder(tmp_path, capsys, time_doc):
    runs = tmp_path / "runs"
    runs.mkdir()
    small = {**time_doc, "rows": [r for r in time_doc["rows"] if r["kind"] == "fft" and r["dtype"] == "float64"
                                  and r["n"] in (64, 1024, 4096)]}
    for i, doc in enumerate(history_docs(small, 3)):
        (runs / f"run{i}.json").write_text(json.dumps(doc))
    (runs / "notes.txt").write_text("not a results file")
    out = tmp_path / "rep"
    assert run_report([str(runs), "--out", str(out), "--format", "svg"]) == 0
    printed = capsys.readouterr().out.split("\n")
    written = sorted(os.listdir(out))
    assert written == [f"history-runs-fft-float64-{n}.svg" for n in (1024, 4096, 64)]
    for name in written:
        assert_svg(str(out / name))
        assert str(out / name) in printed
    assert run_report([str(runs), "--out", str(out), "--case", "fft,float64,1024", "--no-plots"]) == 0


def test_report_caps_default_histories_and_says_so(tmp_path, capsys, time_doc, monkeypatch):
    runs = tmp_path / "runs"
    runs.mkdir()
    (runs / "a.json").write_text(json.dumps(time_doc))
    drawn = []
    monkeypatch.setattr(plots, "plot_history", lambda docs, case, path, **kw: drawn.append(case) or path)
    assert run_report([str(runs), "--out", str(tmp_path / "o")]) == 0
    assert len(drawn) == cmd_report.MAX_HISTORY_PLOTS
    assert "choose with --case" in capsys.readouterr().out


def test_report_without_plots_needs_no_matplotlib(tmp_path, capsys, monkeypatch):
    monkeypatch.setitem(sys.modules, "matplotlib", None)
    md = tmp_path / "r.md"
    assert run_report([TIME_FILE, "--no-plots", "--out", str(tmp_path / "o"), "--markdown", str(md)]) == 0
    assert "![" not in md.read_text(encoding="utf-8")
    with pytest.raises(UsageError, match="install matplotlib"):
        run_report([TIME_FILE, "--out", str(tmp_path / "o")])


def write(tmp_path, name: str, text: str) -> str:
    path = tmp_path / name
    path.write_text(text)
    return str(path)


def bad_inputs(tmp_path, time_doc) -> dict[str, tuple[list[str], str]]:
    broken_row = {**time_doc, "rows": [{k: v for k, v in time_doc["rows"][0].items() if k != "seconds"}]}
    gate = {"schema": "fftgauge-gate/1", "created": "x", "rows": []}
    empty, runs = tmp_path / "empty", tmp_path / "runs"
    empty.mkdir()
    runs.mkdir()
    (runs / "run.json").write_text(json.dumps(time_doc))
    return {
        "missing": ([str(tmp_path / "nope.json")], "does not exist"),
        "corrupt": ([write(tmp_path, "corrupt.json", '{"schema": "fftgauge-time/1", "rows": [')], "not valid JSON"),
        "foreign": ([write(tmp_path, "count.json", json.dumps({"schema": "fftgauge-count/1", "rows": []}))],
                    "has schema 'fftgauge-count/1'"),
        "not results": ([write(tmp_path, "list.json", "[1, 2]")], "not an fftgauge results file"),
        "row lacks a field": ([write(tmp_path, "row.json", json.dumps(broken_row))], "row 0 field 'seconds' is missing"),
        "gate file alone": ([write(tmp_path, "gate.json", json.dumps(gate))], "pass the folder"),
        "empty folder": ([str(empty)], "holds no results files"),
        "bad case": ([TIME_FILE, str(runs), "--case", "fft,float64"], "write KIND,DTYPE,N"),
        "unknown kind in case": ([str(runs), "--case", "dct,float64,8"], "unknown transform kind"),
        "case without a folder": ([TIME_FILE, "--case", "fft,float64,64"], "pass a folder"),
    }


def test_bad_inputs_are_usage_errors_naming_the_file(tmp_path, time_doc):
    for what, (argv, message) in bad_inputs(tmp_path, time_doc).items():
        with pytest.raises(UsageError, match=message):
            run_report(argv + ["--out", str(tmp_path / "o"), "--no-plots"])
        if "--case" not in argv:  # a file's fault: the message names the file
            with pytest.raises(UsageError, match=os.path.basename(argv[0])):
                run_report(argv + ["--out", str(tmp_path / "o"), "--no-plots"])
    assert not (tmp_path / "o").exists()


def test_bad_inputs_exit_2_with_one_line_through_the_cli(tmp_path, time_doc, monkeypatch, capsys):
    """The contract's exit code 2 and one line on stderr, through fftgauge.harness.cli.main."""
    for argv, message in bad_inputs(tmp_path, time_doc).values():
        assert cli.main(["report", *argv, "--out", str(tmp_path / "o")]) == 2
        err = capsys.readouterr().err
        assert err.count("\n") == 1 and err.startswith("fftgauge: error: ") and message in err
    assert cli.main(["report", TIME_FILE, "--format", "jpg"]) == 2
    assert "invalid choice" in capsys.readouterr().err


def test_markdown_table_escapes_pipes_and_newlines():
    from fftgauge.harness.report.markup import markdown_table

    assert markdown_table(["a|b", "c"], [["x|y", "1\n2"]]) == "| a\\|b | c |\n|---|---|\n| x\\|y | 1 2 |"


def test_comparison_table_accepts_time_rows():
    from fftgauge.harness.rows import TimeRow

    rows = [TimeRow(backend=b, kind="rfft", dtype="float32", n=64, threads=1, plan_seconds=0.0, seconds=s,
                    seconds_low=s, seconds_high=s, samples=5, loops=10, flops=960.0, gflops=960 / s / 1e9,
                    ns_per_nlogn=s * 1e9 / 384, peak_bytes=None, in_place=False) for b, s in (("p", 2e-6), ("q", 1e-6))]
    df = comparison_table(rows)
    assert df.idxmin(axis=1).tolist() == ["q"]
    assert "1.00 us *" in format_comparison(df)


def test_report_command_imports_no_heavy_library():
    """`fftgauge --help` builds every command's parser: the report command's module must not pull in
    matplotlib, pandas or scipy.stats (they load when a report is made)."""
    import subprocess

    code = ("import sys; import fftgauge.harness.cli.report, fftgauge.harness.report.plots, "
            "fftgauge.harness.report.check_tables, fftgauge.harness.report.time_tables; "
            "print(sorted(m for m in ('matplotlib', 'pandas', 'scipy.stats') if m in sys.modules))")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True).stdout
    assert out.strip() == "[]"


# --------------------------------------------------------------------------- hostile results files

def hostile_files(tmp_path, time_doc) -> dict[str, tuple[str, str]]:
    """Files that are not what fftgauge writes, each with the words of the one-line refusal."""
    row = time_doc["rows"][0]

    def with_row(name: str, **fields) -> str:
        return write(tmp_path, name, json.dumps({**time_doc, "rows": [{**row, **fields}]}))

    zero = tmp_path / "zero.json"
    zero.symlink_to("/dev/zero")
    deep = '{"schema": "fftgauge-time/1", "rows": [' + "[" * 100_000 + "]" * 100_000 + "]}"
    nan = json.dumps({**time_doc, "rows": [{**row, "seconds": 1.0}]}).replace('"seconds": 1.0', '"seconds": NaN')
    return {
        "link to /dev/zero": (str(zero), "is a device, pipe or socket, not a regular file"),
        "100,000 levels deep": (write(tmp_path, "deep.json", deep), "more than 64 levels deep"),
        "machine a string": (write(tmp_path, "machine.json", json.dumps({**time_doc, "machine": "a PC"})),
                             "field 'machine' is a string, expected an object"),
        "cores a string": (write(tmp_path, "cores.json", json.dumps({**time_doc, "machine": {"cores": "two"}})),
                           "field 'machine.cores' is a string"),
        "complete not a flag": (write(tmp_path, "flag.json", json.dumps({**time_doc, "complete": "no"})),
                                "field 'complete' is a string"),
        "negative time": (with_row("neg.json", seconds=-1), "row 0 field 'seconds' is -1; it cannot be negative"),
        "NaN time": (write(tmp_path, "nan.json", nan), "row 0 field 'seconds' is nan"),
        "text time": (with_row("text.json", seconds_low="fast"), "row 0 field 'seconds_low' is a string, not a number"),
        "n zero": (with_row("n0.json", n=0), "row 0 field 'n' is 0; a transform length is a positive integer"),
        "n a string": (with_row("nstr.json", n="1024"), "row 0 field 'n' is '1024'"),
        "n a flag": (with_row("nbool.json", n=True), "row 0 field 'n' is True"),
        "n a fraction": (with_row("nfrac.json", n=2.5), "row 0 field 'n' is 2.5"),
        "backend a number": (with_row("backend.json", backend=7), "row 0 field 'backend' is an integer, not text"),
        "unknown status": (with_row("status.json", status="great"), "row 0 field 'status' is 'great'"),
        "row not an object": (write(tmp_path, "rowlist.json", json.dumps({**time_doc, "rows": [[1]]})),
                              "row 0 is an array, not an object"),
    }


def test_hostile_files_are_refused_naming_the_file_and_field(tmp_path, time_doc, capsys):
    """Through the CLI: exit 2, one line on stderr that names the file and says what is wrong (no traceback,
    no RecursionError, no read of /dev/zero)."""
    for what, (path, message) in hostile_files(tmp_path, time_doc).items():
        assert cli.main(["report", path, "--no-plots", "--out", str(tmp_path / "o")]) == 2, what
        err = capsys.readouterr().err
        assert err.count("\n") == 1 and err.startswith("fftgauge: error: "), (what, err)
        assert message in err and os.path.basename(path) in err, (what, err)
    assert not (tmp_path / "o").exists()


def test_hostile_entries_inside_a_folder_of_runs(tmp_path, time_doc, capsys):
    """A folder stands for its *.json files: one that is a link to /dev/zero or a directory is refused by name,
    by report and by gate --baseline."""
    for name, make, message in (("b.json", lambda p: p.symlink_to("/dev/zero"), "is a device, pipe or socket"),
                                ("c.json", lambda p: p.mkdir(), "is a directory, not a regular file")):
        runs = tmp_path / f"runs-{name}"
        runs.mkdir()
        (runs / "a.json").write_text(json.dumps(time_doc))
        make(runs / name)
        for argv in (["report", str(runs), "--no-plots", "--out", str(tmp_path / "o")], ["gate", "--baseline", str(runs)]):
            assert cli.main(argv) == 2
            err = capsys.readouterr().err
            assert err.count("\n") == 1 and f"{name}' {message}" in err, (argv, err)


def test_size_cap(tmp_path, time_doc, monkeypatch):
    from fftgauge.harness import results

    path = write(tmp_path, "big.json", json.dumps(time_doc))
    monkeypatch.setattr(results, "MAX_RESULTS_BYTES", os.path.getsize(path) - 1)
    with pytest.raises(UsageError, match=r"big.json' is larger than [\d,]+ bytes"):
        run_report([path, "--no-plots", "--out", str(tmp_path / "o")])
    monkeypatch.setattr(results, "MAX_RESULTS_BYTES", os.path.getsize(path))
    assert run_report([path, "--no-plots", "--out", str(tmp_path / "o")]) == 0


def test_json_depth_counts_brackets_outside_strings():
    from fftgauge.harness.results import json_depth

    assert json_depth("1") == 0 and json_depth("[]") == 1
    assert json_depth('{"a": "[[[\\" {", "b": [[1]]}') == 3  # brackets and an escaped quote inside a string
    assert json_depth("[" * 100_000, limit=64) == 65  # stops counting past the limit


def test_gate_baseline_refuses_the_same_hostile_files(tmp_path, time_doc, capsys):
    """`gate --baseline` reads files with the same loader (fftgauge.harness.results.load_results)."""
    for what, (path, message) in hostile_files(tmp_path, time_doc).items():
        assert cli.main(["gate", "--baseline", path]) == 2, what
        err = capsys.readouterr().err
        assert err.count("\n") == 1 and message in err, (what, err)


def test_incomplete_run_is_noted(tmp_path, time_doc, capsys):
    path = write(tmp_path, "cut.json", json.dumps({**time_doc, "complete": False}))
    assert run_report([path, "--no-plots", "--out", str(tmp_path / "o")]) == 0
    out = capsys.readouterr().out
    assert "note: " + path + " is from a run that did not complete" in out
    done = write(tmp_path, "done.json", json.dumps({**time_doc, "complete": True}))
    assert run_report([done, "--no-plots", "--out", str(tmp_path / "o")]) == 0
    assert "did not complete" not in capsys.readouterr().out


# --------------------------------------------------------------------------- escaping what reports quote

HOSTILE_NAME = "evil|<img src=x onerror=alert(1)>`code`\nnext"


def test_reports_escape_what_they_quote(tmp_path, time_doc, check_doc, capsys):
    """A backend name and a message from a file are shown literally: in Markdown no raw HTML, no extra table
    cell, no code span, no line break; in HTML only entities (the page still parses as XML)."""
    timed = {**time_doc, "rows": [{**r, "backend": HOSTILE_NAME} if r["backend"] == "pyfftw" else r
                                  for r in time_doc["rows"]]}
    checked = {**check_doc, "rows": [{**r, "backend": HOSTILE_NAME, "message": "bad | <b>bold</b>"}
                                     if r["backend"] == "demo-recurrence" else r for r in check_doc["rows"]]}
    md, page = tmp_path / "r.md", tmp_path / "r.html"
    argv = [write(tmp_path, "t.json", json.dumps(timed)), write(tmp_path, "c.json", json.dumps(checked)),
            "--no-plots", "--out", str(tmp_path / "o"), "--markdown", str(md), "--html", str(page)]
    assert run_report(argv) == 0
    text = md.read_text(encoding="utf-8")
    fenced = re.findall(r"^(`{3,})text\n.*?\n\1$", text, flags=re.S | re.M)
    assert fenced  # the scaling text, literal inside a fence that nothing in it can close
    text = re.sub(r"^(`{3,})text\n.*?\n\1$", "", text, flags=re.S | re.M)
    assert "<img" not in text and "<b>" not in text and "onerror=alert(1)&gt;" in text
    shown = r"evil\|&lt;img src=x onerror=alert(1)&gt;\`code\` next"
    assert shown in text
    tables = [t for t in text.split("\n\n") if t.startswith("|")]
    assert tables
    for table in tables:
        widths = {len(re.split(r"(?<!\\)\|", line)) for line in table.splitlines()}
        assert len(widths) == 1, table
    body = page.read_text(encoding="utf-8")
    assert "<img src=x" not in body and "&lt;img src=x onerror=alert(1)&gt;" in body and "&lt;b&gt;" in body
    ET.fromstring(body.split("\n", 1)[1])


def test_markdown_escaping_and_fences():
    from fftgauge.harness.report.markup import escape_markdown, markdown_fence

    assert escape_markdown("a_b*c [x](y) #1 ~z~") == r"a\_b\*c \[x\](y) #1 \~z\~"
    assert [escape_markdown(s) for s in ("# h", "- item", "12. item", "+ x")] == [r"\# h", r"\- item", r"12\. item",
                                                                                r"\+ x"]
    assert escape_markdown("- cell", block=False) == "- cell"  # a table cell starts no block
    assert escape_markdown("1 < 2 & 3 > 2") == "1 &lt; 2 &amp; 3 &gt; 2"
    fenced = markdown_fence("before ``` inside")
    assert fenced.startswith("````text\n") and fenced.endswith("\n````")


def test_every_diagnosis_code_has_a_meaning():
    """The page's sentences explain every code rows may carry (fftgauge.harness.rows.DIAGNOSES)."""
    from fftgauge.harness.report.findings import DIAGNOSIS_MEANINGS
    from fftgauge.harness.rows import DIAGNOSES

    assert set(DIAGNOSES) <= set(DIAGNOSIS_MEANINGS)
