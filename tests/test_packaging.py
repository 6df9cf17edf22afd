"""The installed wheel holds one top-level package, ``fftgauge``, and lives beside projects
that have packages of their own called ``harness`` and ``backends``.

This builds the wheel from the repository, installs it into a fresh virtual environment
(with its dependencies, from the package index pip is set up with) and runs a neighbouring
project's own pytest there: the ``pytest11`` plugin that the wheel registers must neither
break that project's start-up nor take its ``harness`` away. It takes a minute or two (a
virtual environment and an install), hence the ``slow`` marker; ``make test`` runs it.
"""

from __future__ import annotations

import os
import subprocess
import sys
import textwrap
import zipfile
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]

pytestmark = pytest.mark.slow


def _run(cmd: list[str], cwd: Path, timeout: float = 600) -> subprocess.CompletedProcess:
    env = {k: v for k, v in os.environ.items() if k not in ("PYTHONPATH", "VIRTUAL_ENV")}
    return subprocess.run(cmd, cwd=cwd, env=env, capture_output=True, text=True, timeout=timeout)


@pytest.fixture(scope="module")
def wheel(tmp_path_factory) -> Path:
    """The wheel pip builds from this repository (build isolation, no dependencies)."""
    out = tmp_path_factory.mktemp("wheel")
    proc = _run([sys.executable, "-m", "pip", "wheel", "--quiet", "--no-deps", "-w", str(out), str(ROOT)], out)
    assert proc.returncode == 0, proc.stderr[-3000:]
    (built,) = out.glob("fftgauge-*.whl")
    return built


@pytest.fixture(scope="module")
def fresh_env(wheel, tmp_path_factory) -> Path:
    """A new virtual environment with the wheel and its pytest extra installed; returns its python."""
    where = tmp_path_factory.mktemp("venv")
    proc = _run([sys.executable, "-m", "venv", str(where / "env")], where)
    assert proc.returncode == 0, proc.stderr
    python = where / "env" / "bin" / "python"
    proc = _run([str(python), "-m", "pip", "install", "--quiet", f"{wheel}[pytest]"], where)
    assert proc.returncode == 0, proc.stderr[-3000:]
    return python


def test_wheel_has_one_top_level_package(wheel):
    with zipfile.ZipFile(wheel) as zf:
        tops = {name.split("/", 1)[0] for name in zf.namelist()}
        names = set(zf.namelist())
    tops = {t for t in tops if not t.endswith(".dist-info")}
    assert tops == {"fftgauge"}
    assert {"fftgauge/harness/cli/__init__.py", "fftgauge/backends/base.py",
            "fftgauge/harness/execution/jobs.py"} <= names
    entry_points = zipfile.ZipFile(wheel).read(
        next(n for n in names if n.endswith(".dist-info/entry_points.txt"))).decode()
    assert "fftgauge = fftgauge.harness.cli:main" in entry_points
    assert "fftgauge = fftgauge.harness.pytest_plugin" in entry_points


def test_a_project_with_its_own_harness_and_backends_keeps_working(fresh_env, tmp_path):
    project = tmp_path / "neighbour"
    for package, marker in (("harness", "HARNESS_OF_THE_NEIGHBOUR"), ("backends", "BACKENDS_OF_THE_NEIGHBOUR")):
        (project / package).mkdir(parents=True)
        (project / package / "__init__.py").write_text(f"{marker} = True\n")
    (project / "harness" / "cases.py").write_text("OWN_CASES = ['a', 'b']\n")
    (project / "tests").mkdir()
    # the neighbour's own test module (its package names filled in, so that this file itself
    # imports nothing by those names)
    (project / "tests" / "test_own.py").write_text(textwrap.dedent("""
        import {b}
        import {h}
        from {h}.cases import OWN_CASES


        def test_own_packages_are_the_projects():
            assert {h}.HARNESS_OF_THE_NEIGHBOUR and {b}.BACKENDS_OF_THE_NEIGHBOUR
            assert OWN_CASES == ['a', 'b']


        def test_fftgauge_imports_beside_them():
            import fftgauge
            from fftgauge.backends.base import Backend
            from fftgauge.harness.cases import Case
            assert fftgauge.__version__ and Backend and Case("fft", "float64", 8).n == 8
            assert {h}.HARNESS_OF_THE_NEIGHBOUR
    """).format(h="harness", b="backends"))
    proc = _run([str(fresh_env), "-m", "pytest", "-q", "-p", "no:cacheprovider"], project)
    assert proc.returncode == 0, proc.stdout[-3000:] + proc.stderr[-3000:]
    assert "2 passed" in proc.stdout
    # the plugin was loaded in that run (it registers the fftgauge fixtures)
    proc = _run([str(fresh_env), "-m", "pytest", "--fixtures", "-p", "no:cacheprovider"], project)
    assert "fftgauge_check" in proc.stdout
    # and the console script works from inside that project
    proc = _run([str(fresh_env.parent / "fftgauge"), "backends"], project)
    assert proc.returncode == 0, proc.stderr
    assert "numpy" in proc.stdout


def test_repository_tests_run_against_a_regular_install(fresh_env):
    """From the repository root, with fftgauge installed as a wheel (not editable), the
    checkout's own tests import the checkout (the README's test command, on a few files)."""
    probe = "import fftgauge.harness.cli as c; print(c.__file__)"
    proc = _run([str(fresh_env), "-c", probe], ROOT)
    assert proc.returncode == 0, proc.stderr
    assert proc.stdout.strip().startswith(str(ROOT / "harness"))
    proc = _run([str(fresh_env), "-m", "pytest", "-q", "-p", "no:cacheprovider", "-m", "not slow",
                 "tests/test_sizes.py", "tests/test_pytest_plugin.py"], ROOT)
    assert proc.returncode == 0, proc.stdout[-3000:] + proc.stderr[-3000:]
