"""``fftgauge check``'s outputs for CI: JUnit XML, Markdown, CSV (``--junit``, ``--markdown``,
``--csv``, each also ``-`` for standard output).

Sources: the JUnit XML structure CI servers read is the Jenkins JUnit plugin's schema
(junit-10.xsd) and Apache Ant's junit report, written out in tests/data/junit.xsd; every
report is checked by a structural validator here and, where lxml is installed, against that
schema. The Markdown is GitHub-flavoured (CommonMark plus tables), rendered with
python-markdown's ``tables`` extension where it is installed.
"""

from __future__ import annotations

import copy
import csv
import io
import json
import os
import xml.etree.ElementTree as ET

import pytest

from fftgauge.harness.battery.criteria import apply_limits, parse_limit_option
from fftgauge.harness.cli import main
from fftgauge.harness.report.check_outputs import csv_text, junit_class_name, junit_xml, markdown_summary

HERE = os.path.dirname(os.path.abspath(__file__))
BROKEN = os.path.join(HERE, "data", "broken_ffts.py")
CONTRACT_COLUMNS = ["backend", "kind", "dtype"]


@pytest.fixture(scope="module")
def run(tmp_path_factory):
    """One battery run of numpy, a 1/sqrt(N)-scaled fft (scale) and a backend whose plan raises
    (error), fft and rfft (the plain callable claims no rfft: skip), every output written."""
    folder = tmp_path_factory.mktemp("outputs")
    paths = {name: str(folder / f"run.{name}") for name in ("json", "xml", "md", "csv")}
    code = main(["check", "--backend", "numpy", "--backend", f"{BROKEN}:ortho_scaled_fft",
                 "--backend", f"{BROKEN}:PlanRaisesBackend", "--sizes", "8,16", "--kinds", "fft,rfft",
                 "--dtypes", "float64", "--quiet", "--json", paths["json"], "--junit", paths["xml"],
                 "--markdown", paths["md"], "--csv", paths["csv"]])
    texts = {}
    for name, path in paths.items():
        with open(path, encoding="utf-8") as fh:
            texts[name] = fh.read()
    return code, json.loads(texts["json"]), texts


# -- JUnit XML -------------------------------------------------------------------------------------

def validate_junit(text: str) -> ET.Element:
    """Check the JUnit structure CI servers read (tests/data/junit.xsd, by hand) and return the root.

    testsuites > testsuite(name, tests, failures, errors, skipped) > testcase(name, classname,
    time) > at most one of failure | error | skipped, then system-out/system-err; the counts
    match the test cases.
    """
    root = ET.fromstring(text)
    assert root.tag == "testsuites"
    totals = {"tests": 0, "failures": 0, "errors": 0, "skipped": 0}
    for suite in root:
        assert suite.tag == "testsuite"
        for attr in ("name", "tests", "failures", "errors", "skipped"):
            assert attr in suite.attrib, attr
        counted = {"tests": 0, "failures": 0, "errors": 0, "skipped": 0}
        tags = [child.tag for child in suite]
        assert set(tags) <= {"properties", "testcase", "system-out", "system-err"}
        assert tags.count("properties") <= 1 and (tags.index("properties") == 0 if "properties" in tags else True)
        for prop in suite.iter("property"):
            assert set(prop.attrib) == {"name", "value"}
        for case in suite.findall("testcase"):
            for attr in ("name", "classname", "time"):
                assert case.attrib.get(attr, "") != "", attr
            float(case.attrib["time"])
            outcomes = [c.tag for c in case if c.tag in ("failure", "error", "skipped")]
            assert len(outcomes) <= 1, outcomes
            assert {c.tag for c in case} <= {"failure", "error", "skipped", "system-out", "system-err"}
            counted["tests"] += 1
            for tag, key in (("failure", "failures"), ("error", "errors"), ("skipped", "skipped")):
                counted[key] += outcomes.count(tag)
        assert {k: int(suite.attrib[k]) for k in counted} == counted
        for k in totals:
            totals[k] += counted[k]
    assert {k: int(root.attrib[k]) for k in totals} == totals
    return root


def test_junit_validates(run):
    _, _, texts = run
    validate_junit(texts["xml"])


def test_junit_validates_against_the_schema(run):
    etree = pytest.importorskip("lxml.etree")
    schema = etree.XMLSchema(etree.parse(os.path.join(HERE, "data", "junit.xsd")))
    doc = etree.fromstring(run[2]["xml"].encode("utf-8"))
    assert schema.validate(doc), schema.error_log


def test_junit_has_one_case_per_backend_kind_precision_check(run):
    code, doc, texts = run
    assert code == 1
    root = validate_junit(texts["xml"])
    cases = {(c.attrib["classname"], c.attrib["name"]): c for c in root.iter("testcase")}
    checks = doc["request"]["checks"]
    assert len(cases) == 3 * 2 * len(checks)  # 3 backends x (fft, rfft) x float64 x every check
    for classname, _ in cases:
        assert classname.startswith("fftgauge.check.") and ".py" not in classname and "/" not in classname
    labels = list(doc["backends"])
    scaled = junit_class_name(labels[1])
    failure = cases[(scaled, "fft float64 accuracy")].find("failure")
    assert failure is not None and failure.attrib["type"] == "scale"
    assert failure.attrib["message"].startswith("fails at n = 8, 16 (scale: right shape of answer, wrong normalis")
    assert "n = 8: fail (scale)" in failure.text and "n = 16: fail (scale)" in failure.text
    assert cases[(scaled, "rfft float64 accuracy")].find("skipped") is not None
    assert cases[(scaled, "fft float64 linearity")].find("system-out").text.startswith("passes at n = 8, 16")
    raising = junit_class_name(labels[2])
    error = cases[(raising, "fft float64 accuracy")].find("error")
    assert error is not None and error.attrib["message"].startswith("could not run at n = 8, 16")
    assert all(c.find("failure") is None and c.find("error") is None
               for (cls, _), c in cases.items() if cls == "fftgauge.check.numpy")


def test_junit_class_name_is_a_label_not_a_path():
    assert junit_class_name("numpy") == "fftgauge.check.numpy"
    assert junit_class_name("/home/me/src/my_fft.py:fft") == "fftgauge.check.my_fft:fft"
    assert junit_class_name("lib/fast.fft.py") == "fftgauge.check.fast_fft"
    assert junit_class_name("scipy[workers=2]") == "fftgauge.check.scipy[workers=2]"


def test_incomplete_run_says_so(run):
    doc = copy.deepcopy(run[1])
    doc["complete"] = False
    root = validate_junit(junit_xml(doc))
    assert root.find("testsuite/properties/property[@name='complete']").attrib["value"] == "false"
    assert "stopped before every case ran" in root.find("testsuite/system-err").text
    assert markdown_summary(doc).startswith("## fftgauge check: INCOMPLETE\n")


# -- Markdown ------------------------------------------------------------------------------------

def test_markdown_verdict_first_then_findings_then_table(run):
    md = run[2]["md"]
    lines = md.splitlines()
    assert lines[0] == "## fftgauge check: FAIL"
    assert lines[2].startswith("**FAIL**: 4 of 12 case(s) passed, 2 wrong, 4 could not run, 2 skipped")
    assert md.index("### Findings") < md.index("### Results")
    findings = md[md.index("### Findings"):md.index("### Results")]
    assert "scale (right shape of answer, wrong normalisation" in findings and "at n = 8, 16" in findings
    assert "could not run" in findings
    table = [line for line in lines if line.startswith("|")]
    assert len(table) == 2 + 3 * 2  # header, rule, one line per backend x kind x precision
    assert len({line.count(" | ") for line in table if not line.startswith("|---")}) == 1


def test_markdown_renders_as_html(run):
    markdown = pytest.importorskip("markdown")
    html = markdown.markdown(run[2]["md"], extensions=["tables"])
    assert html.startswith("<h2>fftgauge check: FAIL</h2>")
    assert html.count("<tr>") == 1 + 3 * 2 and "<li>" in html and "<strong>accuracy" in html


def test_markdown_escapes_what_backends_write(run):
    doc = copy.deepcopy(run[1])
    for row in doc["rows"]:
        if row["status"] == "fail":
            row["message"] = "<img src=x onerror=alert(1)> a|b *c*"
            row["backend"] = "my|fft"
    md = markdown_summary(doc)
    assert "<img" not in md and "&lt;img" in md and "a\\|b \\*c\\*" in md and "my\\|fft" in md


def test_markdown_says_a_user_limit_is_looser(run):
    doc = copy.deepcopy(run[1])
    lim = parse_limit_option("accuracy=1e-3rel")
    doc["rows"] = apply_limits(doc["rows"], [lim])
    doc["request"]["limits"] = {"accuracy": lim.as_dict()}
    md = markdown_summary(doc)
    assert "limit for accuracy is 0.001 relative, looser than the built-in bound by" in md
    assert "yours: 0.001 relative" in md


# -- CSV and standard output ---------------------------------------------------------------------

def test_csv_holds_every_row(run):
    _, doc, texts = run
    rows = list(csv.DictReader(io.StringIO(texts["csv"])))
    assert len(rows) == len(doc["rows"])
    assert list(rows[0])[:3] == CONTRACT_COLUMNS and "limit_source" in rows[0]
    assert csv_text(doc) == texts["csv"]


def test_markdown_to_standard_output(tmp_path, capsys):
    code = main(["check", "--backend", "numpy", "--sizes", "8", "--kinds", "fft", "--dtypes", "float64",
                 "--checks", "accuracy", "--quiet", "--json", str(tmp_path / "r.json"), "--markdown", "-"])
    out, err = capsys.readouterr()
    assert code == 0
    assert out.startswith("## fftgauge check: PASS\n") and "PASS: every case held" in err
    assert "written to" in err and "written to" not in out


def test_two_outputs_on_standard_output_exit_2(capsys):
    assert main(["check", "--backend", "numpy", "--sizes", "8", "--junit", "-", "--csv", "-"]) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and "only one output can go to standard output" in err


def test_unwritable_output_exits_2_before_the_run(tmp_path, capsys):
    folder = tmp_path / "locked"
    folder.mkdir()
    folder.chmod(0o500)
    try:
        if os.access(folder, os.W_OK):
            pytest.skip("running as a user who can write anywhere")
        assert main(["check", "--backend", "numpy", "--sizes", "8", "--junit", str(folder / "r.xml")]) == 2
    finally:
        folder.chmod(0o700)
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and "cannot write --junit" in err


def test_output_path_that_is_a_folder_exits_2(tmp_path, capsys):
    assert main(["check", "--backend", "numpy", "--sizes", "8", "--markdown", str(tmp_path)]) == 2
    assert "is a folder" in capsys.readouterr().err


def test_markdown_verdict_says_a_pass_hides_bound_failures(run):
    doc = copy.deepcopy(run[1])
    doc["rows"] = [r for r in doc["rows"] if r["backend"] != doc["rows"][-1]["backend"]]  # drop the raising backend
    lim = parse_limit_option("10rel")
    doc["rows"] = apply_limits(doc["rows"], [lim])
    doc["request"]["limits"] = {"all": lim.as_dict()}
    first = markdown_summary(doc).splitlines()[2]
    assert first.startswith("**PASS**: every case held under the user's limits, but the built-in bounds fail")


@pytest.mark.timeout(180)
def test_a_stopped_run_writes_its_outputs_from_what_finished(tmp_path):
    """SIGINT mid-run (the real command line in its own process group): the JUnit XML,
    Markdown and CSV are written from the rows that finished and say the run is incomplete."""
    import signal
    import subprocess
    import sys
    import time

    root = os.path.dirname(HERE)
    out = tmp_path / "run.json"
    cmd = [sys.executable, "-m", "fftgauge", "check", "--backend", "tests/data/slow_fft.py:fft", "--sizes", "1..200",
           "--dtypes", "float64", "--case-budget", "0", "--quiet", "--json", str(out),
           "--junit", str(tmp_path / "r.xml"), "--markdown", str(tmp_path / "r.md"), "--csv", str(tmp_path / "r.csv")]
    proc = subprocess.Popen(cmd, cwd=root, env={**os.environ, "PYTHONPATH": root}, stdout=subprocess.PIPE,
                            stderr=subprocess.PIPE, text=True, start_new_session=True)
    deadline = time.monotonic() + 120
    while time.monotonic() < deadline and not (out.exists() and json.loads(out.read_text())["rows"]):
        time.sleep(0.2)
    assert proc.poll() is None, proc.communicate()
    os.killpg(proc.pid, signal.SIGINT)
    stdout, stderr = proc.communicate(timeout=60)
    assert proc.returncode == 130, stderr
    assert "written from what finished" in stdout, stdout + stderr
    doc = json.loads(out.read_text())
    root_el = validate_junit((tmp_path / "r.xml").read_text())
    assert root_el.find("testsuite/properties/property[@name='complete']").attrib["value"] == "false"
    assert (tmp_path / "r.md").read_text().startswith("## fftgauge check: INCOMPLETE\n")
    assert len(list(csv.DictReader(io.StringIO((tmp_path / "r.csv").read_text())))) == len(doc["rows"])


SHAPED_BUGS = os.path.join(HERE, "data", "shaped_bugs.py")


def test_shaped_cases_are_named_by_shape_axes_and_layout(tmp_path):
    """A small shaped run (tests/data/shaped_bugs.py:FortranBug, right for C-ordered input and
    wrong for F: its layout check fails in both cases, its accuracy only in F): the JUnit
    test cases, their messages and the Markdown name each shaped case by its shape, axes and
    layout, never by n alone (both cases have N = 240)."""
    paths = {name: str(tmp_path / f"run.{name}") for name in ("json", "xml", "md")}
    code = main(["check", "--backend", f"{SHAPED_BUGS}:FortranBug", "--shapes", "12x20", "--layouts", "C,F",
                 "--kinds", "fftn", "--dtypes", "float64", "--checks", "accuracy,layout", "--quiet",
                 "--json", paths["json"], "--junit", paths["xml"], "--markdown", paths["md"]])
    assert code == 1
    with open(paths["json"], encoding="utf-8") as fh:
        doc = json.load(fh)
    assert {(tuple(r["shape"]), tuple(r["axes"]), r["layout"], r["n"]) for r in doc["rows"]} == \
        {((12, 20), (0, 1), "C", 240), ((12, 20), (0, 1), "F", 240)}
    with open(paths["xml"], encoding="utf-8") as fh:
        root = validate_junit(fh.read())
    cases = {c.attrib["name"]: c for c in root.iter("testcase")}
    assert set(cases) == {f"fftn float64 12x20 axes (0,1) {layout} {check}"
                          for layout in ("C", "F") for check in ("accuracy", "layout")}
    assert cases["fftn float64 12x20 axes (0,1) C accuracy"].find("failure") is None
    failure = cases["fftn float64 12x20 axes (0,1) F accuracy"].find("failure")
    assert failure.attrib["type"] == "layout"
    assert failure.attrib["message"].startswith("fails at 12x20 axes (0,1) F (layout: ")
    assert "Worst, 12x20 axes (0,1) F: " in failure.attrib["message"]
    assert failure.text.startswith("12x20 axes (0,1) F: fail (layout)")
    passed = cases["fftn float64 12x20 axes (0,1) C accuracy"].find("system-out").text
    assert passed.startswith("passes at 12x20 axes (0,1) C; worst 12x20 axes (0,1) C: ")
    assert all("n = 240" not in (el.text or "") + (el.attrib.get("message") or "") for el in root.iter())
    with open(paths["md"], encoding="utf-8") as fh:
        md = fh.read()
    assert "2 wrong" in md and "of 2 case(s)" in md  # two cases of one N
    finding = next(line for line in md.splitlines() if line.startswith("- fortran-bug (fftn float64): layout "))
    assert "at 12x20 axes (0,1) C; 12x20 axes (0,1) F (2 cases)" in finding
    assert "accuracy, fftn float64 12x20 axes (0,1) F: " in finding and "n = 240" not in finding
