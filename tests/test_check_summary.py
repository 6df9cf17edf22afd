"""Tests of the terminal summary's findings (harness/report/check_tables.py): never cut
silently, one line per distinct cause, every backend's first finding listed.

Source: the rows are made here by hand, so what each line must say is known exactly.
"""

from __future__ import annotations

import pytest

from fftgauge.harness.report.check_tables import finding_lines, format_summary, rows_frame


def _row(backend, check, status, diagnosis=None, n=16, kind="fft", dtype="float32", message="m", eps=None):
    return {"backend": backend, "kind": kind, "dtype": dtype, "norm": "backward", "n": n, "check": check,
            "status": status, "value": None, "limit": None, "eps_units": eps, "diagnosis": diagnosis,
            "message": message, "reference": None}


CODES = ["sign", "scale", "bit-reversed", "shifted", "precision", "truncated-size", "nonfinite", "real-only",
         "dtype", "shape"]


def test_more_causes_than_the_old_limit_are_all_listed():
    """Two backends with ten distinct causes each (the old summary stopped after 8 lines in all):
    every cause is a line, including the second backend's real bug."""
    rows = []
    for backend in ("lib-f32", "lib-q31"):
        for code in CODES:
            rows += [_row(backend, "accuracy", "fail", code, n=n) for n in (16, 32, 64)]
            rows.append(_row(backend, "parseval", "fail", code, n=16))
        rows.append(_row(backend, "accuracy", "pass", n=128))
    rows.append(_row("lib-q31", "accuracy", "fail", "overflow", n=4096, message="wrap-around overflow: DC"))
    lines = finding_lines(rows)
    assert len(lines) == 21
    assert sum("lib-q31 · overflow (accuracy)" in line for line in lines) == 1
    assert all("3 cases (fft float32) at n = 16, 32, 64" in line for line in lines if "overflow" not in line)
    assert all("(accuracy, parseval)" in line for line in lines if "overflow" not in line)
    text = format_summary(rows_frame(rows))
    assert "wrap-around overflow: DC" in text and "lib-f32 · shape" in text


def test_past_the_per_backend_lines_the_summary_says_how_many_more():
    rows = [_row("noisy", "accuracy", "fail", code) for code in CODES]
    rows += [_row("crashy", "accuracy", "error", message="the backend raised RuntimeError: boom")]
    lines = finding_lines(rows, per_backend=4)
    noisy = [line for line in lines if line.startswith("  noisy")]
    assert len(noisy) == 5 and "6 more findings (distinct causes) not listed" in noisy[-1]
    assert lines[-1].startswith("  crashy · error (accuracy): 1 case") and "boom" in lines[-1]
    assert finding_lines(rows, per_backend=0)[0].startswith("  noisy · ")  # each backend's first, always
    assert finding_lines(rows, per_backend=0)[2].startswith("  crashy · error")


def test_wrong_answers_come_before_could_not_run_within_a_backend():
    rows = [_row("b", "accuracy", "error", message="hung"), _row("b", "parseval", "fail", "unknown")]
    lines = finding_lines(rows)
    assert [line.split(":")[0] for line in lines] == ["  b · unknown (parseval)", "  b · error (accuracy)"]


def test_one_line_per_backend_that_declared_a_convention():
    """A backend whose SPEC declares conventions other than numpy's gets one line saying so
    (numpy's own values, sign=-1 and order=natural, are not declarations); the others none."""
    from fftgauge.backends.claims import Conventions

    def record(**conventions):
        return {"spec": "x", "capabilities": {"conventions": Conventions(**conventions).as_dict()}}

    backends = {"dit": record(order="bit-reversed"), "plain": record(),
                "mine": record(sign=1, forward_scale="1/n", inverse_scale="1", packing="halfcomplex"),
                "same": record(sign=-1, order="natural")}
    text = format_summary(rows_frame([_row(b, "accuracy", "pass") for b in backends]), backends)
    lines = [line for line in text.splitlines() if "declared" in line]
    assert lines == ["dit: declared order=bit-reversed (checked in numpy's convention)",
                     "mine: declared sign=+1, forward_scale=1/n, inverse_scale=1, packing=halfcomplex "
                     "(checked in numpy's convention)"]
    assert "declared" not in format_summary(rows_frame([_row("dit", "accuracy", "pass")]))


LONG_MESSAGE = ("relative rms error 3.1e-03 (2.8e+13 eps) worst on the real part; the outputs of the second "
                "half of the spectrum are the complex conjugates of a wrongly mirrored first half, "
                "look at the loop that fills X[N-k] from X[k] near bin 1000 (zzlastword)")


def _words(lines):
    return " ".join(lines).split()


@pytest.mark.parametrize("columns", [60, 80])
def test_a_long_finding_wraps_at_the_terminal_width_and_loses_no_word(monkeypatch, columns):
    """At COLUMNS=60 and 80 a finding longer than the line wraps, with a hanging indent, and
    every word of it (the same finding at an unbounded width) is there, in order, the last
    word of its message included."""
    from fftgauge.harness.report.findings import findings, summary_width

    monkeypatch.setenv("COLUMNS", str(columns))
    assert summary_width() == columns
    rows = [_row("a-rather-long-backend-name", check, "fail", "unknown", n=n, dtype="float64",
                 message=LONG_MESSAGE, eps=2.8e13)
            for check in ("accuracy", "parseval", "linearity") for n in (3, 5, 7, 11, 13, 17, 19, 23)]
    (found,) = findings(rows)
    wide = found.summary_lines(width=10**6)
    assert len(wide) == 2 and "zzlastword)" in wide[1]
    lines = found.summary_lines()
    assert len(lines) > 2
    assert _words(lines) == _words(wide)
    assert all(len(line) <= columns for line in lines), lines
    assert lines[0].startswith("  a-rather-long-backend-name · unknown")
    second = [i for i, line in enumerate(lines) if line.startswith("    ") and not line.startswith("      ")]
    assert len(second) == 1 and lines[second[0]].startswith("    worst fft float64")  # part 2, then continuations
    assert all(line.startswith("      ") for i, line in enumerate(lines) if i not in (0, second[0]))
    text = format_summary(rows_frame(rows))  # the whole summary's findings, at the terminal's width
    entry = text.split("details in the results file):\n", 1)[1].split("\n\n")[0]
    assert _words(entry.split("\n")) == _words(wide)
    assert all(len(line) <= columns for line in entry.split("\n"))


@pytest.mark.parametrize("columns", [60, 80])
def test_a_long_shaped_finding_wraps_and_loses_no_word(monkeypatch, columns):
    """The shaped summary's findings (harness/shapes/summary.py) wrap the same way: every
    word of the unbounded line is there at COLUMNS=60 and 80."""
    from fftgauge.harness.shapes.summary import shaped_summary_lines

    monkeypatch.setenv("COLUMNS", str(columns))
    rows = [dict(_row("a-rather-long-backend-name", "accuracy", "fail", "layout", n=144, dtype="float64",
                      kind="fftn", message=LONG_MESSAGE, eps=2.8e13), shape=[12, 12], axes=[0, 1], layout=layout)
            for layout in ("F", "strided")]
    wide = shaped_summary_lines(rows, width=10**6)
    narrow = shaped_summary_lines(rows)
    (finding,) = [line for line in wide if line.startswith("  a-rather-long-backend-name · layout")]
    assert "zzlastword)" in finding and len(finding) > columns
    at = [i for i, line in enumerate(narrow) if line.startswith("  a-rather-long-backend-name · layout")][0]
    block = [narrow[at]] + [line for line in narrow[at + 1:] if line.startswith("      ")]
    assert len(block) > 1 and _words(block) == finding.split()
    found_at = narrow.index(block[-1]) + 1
    assert all(len(line) <= columns for line in narrow[at:found_at])
