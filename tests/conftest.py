"""Shared fixtures: where the helper modules live, a writer of user modules, and the C
example built once per test session."""

from __future__ import annotations

import os
import shutil
import subprocess
from pathlib import Path
from typing import Callable

import pytest

DATA_DIR = Path(__file__).parent / "data"
#: How long the leftover ``sleep`` of tests/data/misbehaving.py sleeps: a value of this test
#: process's own, so tests that count those sleepers machine-wide (psutil) see only their own
#: when two test processes run at once (pytest -n 2).
# The terminal summary fits its findings to the terminal's width (harness/report/findings.py);
# the tests read it at one fixed width, whatever terminal (or none) the suite runs under.
os.environ["COLUMNS"] = "120"
# Set, never inherited: pytest-xdist's workers inherit the controller's environment, and with
# setdefault every worker of `pytest -n auto` (CI) slept the controller's value, so one worker's
# sleepers counted as another's leftovers. The whole pid keeps two live test processes apart.
os.environ["FFTGAUGE_TEST_SLEEP_SECONDS"] = f"987.{os.getpid():07d}"
C_EXAMPLE = Path(__file__).resolve().parent.parent / "examples" / "c_radix2"
#: What the example builds: the shared libraries and protocol servers, each also broken
#: on purpose (-DMISSING_BITREVERSAL).
C_TARGETS = {"libradix2.so": ("-fPIC", "-shared"), "libradix2_broken.so": ("-DMISSING_BITREVERSAL", "-fPIC", "-shared"),
             "radix2_server": (), "radix2_server_broken": ("-DMISSING_BITREVERSAL",),
             # Q15 (radix2_q15.c), broken with -DMISSING_SATURATION
             "libradix2_q15.so": ("-fPIC", "-shared"), "libradix2_q15_broken.so": ("-DMISSING_SATURATION", "-fPIC", "-shared"),
             "radix2_q15_server": (), "radix2_q15_server_broken": ("-DMISSING_SATURATION",),
             # Q31 (radix2_q31.c), broken with -DMISSING_SATURATION
             "radix2_q31_server": (), "radix2_q31_server_broken": ("-DMISSING_SATURATION",),
             # the batched and N-D shape (radix2_many.c), its leaking twin (-DLEAKING_BATCH), the version-2 server
             "libradix2_many.so": ("-fPIC", "-shared"), "libradix2_many_leaking.so": ("-DLEAKING_BATCH", "-fPIC", "-shared"),
             "radix2_shaped_server": ()}
#: Sources of the targets that are not radix2.c (with its server) or radix2_q15.c (without make).
C_MANY_SOURCES = {"libradix2_many.so": ("radix2_many.c", "radix2.c"),
                  "libradix2_many_leaking.so": ("radix2_many.c", "radix2.c"),
                  "radix2_shaped_server": ("radix2_shaped_server.c", "radix2_many.c", "radix2.c"),
                  "radix2_q31_server": ("radix2_q31_server.c", "radix2_q31.c"),
                  "radix2_q31_server_broken": ("radix2_q31_server.c", "radix2_q31.c")}


def c_compiler() -> str | None:
    """Return the system C compiler's path (cc, gcc or clang), or None."""
    for name in ("cc", "gcc", "clang"):
        found = shutil.which(name)
        if found:
            return found
    return None


@pytest.fixture(scope="session")
def c_example_build(tmp_path_factory: pytest.TempPathFactory) -> Path:
    """Build examples/c_radix2 once (make, or the compiler directly); return the build folder.

    Skips the test when there is no C compiler.
    """
    cc = c_compiler()
    if cc is None:
        pytest.skip("no C compiler (cc, gcc or clang) on PATH: the C example cannot be built")
    build = tmp_path_factory.mktemp("c_radix2_build")
    if shutil.which("make"):
        cmd = ["make", "-s", "-C", str(C_EXAMPLE), f"CC={cc}", f"BUILD={build}"] + [str(build / t) for t in C_TARGETS]
        subprocess.run(cmd, check=True, capture_output=True, timeout=120)
        return build
    for target, flags in C_TARGETS.items():
        sources = [str(C_EXAMPLE / ("radix2_q15.c" if "q15" in target else "radix2.c"))]
        if "server" in target:
            sources.insert(0, str(C_EXAMPLE / ("radix2_q15_server.c" if "q15" in target else "radix2_server.c")))
        if target in C_MANY_SOURCES:
            sources = [str(C_EXAMPLE / name) for name in C_MANY_SOURCES[target]]
        subprocess.run([cc, "-O2", "-std=c99", *flags, "-o", str(build / target), *sources, "-lm"],
                       check=True, capture_output=True, timeout=120)
    return build


@pytest.fixture
def data_dir() -> Path:
    """Return the folder of helper modules the tests load as SPEC targets."""
    return DATA_DIR


@pytest.fixture
def write_module(tmp_path: Path) -> Callable[[str, str], Path]:
    """Return ``write(filename, source) -> path``, which writes a user module into ``tmp_path``."""

    def write(filename: str, source: str) -> Path:
        path = tmp_path / filename
        path.write_text(source, encoding="utf-8")
        return path

    return write
