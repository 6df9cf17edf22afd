"""The layout rules of architecture.md and DEVELOPERS.md, read from the source itself.

- ``harness/`` imports no FFT library (the ground truth's use of scipy.fft on long double,
  in ``harness/battery/reference.py``, is the one exception, by design);
- nothing imports ``harness`` or ``backends`` as top-level names (only ``fftgauge`` is installed);
- no module imports a name starting with ``_`` from another module of the project;
- no module of ``harness/`` or ``backends/`` is much longer than 500 lines.
"""

from __future__ import annotations

import ast
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]
FFT_LIBRARIES = ("numpy.fft", "scipy.fft", "scipy.fftpack", "pyfftw", "mkl_fft")
#: Modules allowed to import an FFT library, and why.
GROUND_TRUTH = {"harness/battery/reference.py": "the reference: scipy.fft on long double"}
MAX_LINES = 550


def _sources(*folders: str) -> list[Path]:
    return sorted(p for folder in folders for p in (ROOT / folder).rglob("*.py"))


def _imports(path: Path) -> list[tuple[str, list[str], int]]:
    """(module, imported names, line) of every import statement in ``path``."""
    out = []
    for node in ast.walk(ast.parse(path.read_text(), str(path))):
        if isinstance(node, ast.Import):
            out += [(alias.name, [], node.lineno) for alias in node.names]
        elif isinstance(node, ast.ImportFrom) and node.module and node.level == 0:
            out.append((node.module, [alias.name for alias in node.names], node.lineno))
    return out


def _attribute_uses(path: Path) -> set[str]:
    """Every dotted ``a.b.c`` attribute chain in ``path`` (to catch ``np.fft.fft``)."""
    chains = set()
    for node in ast.walk(ast.parse(path.read_text(), str(path))):
        if isinstance(node, ast.Attribute):
            parts, cur = [], node
            while isinstance(cur, ast.Attribute):
                parts.append(cur.attr)
                cur = cur.value
            if isinstance(cur, ast.Name):
                chains.add(".".join([cur.id, *reversed(parts)]))
    return chains


@pytest.mark.parametrize("path", _sources("harness"), ids=lambda p: str(p.relative_to(ROOT)))
def test_harness_imports_no_fft_library(path):
    rel = str(path.relative_to(ROOT))
    if rel in GROUND_TRUTH:
        pytest.skip(GROUND_TRUTH[rel])
    for module, names, line in _imports(path):
        full = [module] + [f"{module}.{n}" for n in names]
        assert not any(f.startswith(lib) for f in full for lib in FFT_LIBRARIES), f"{rel}:{line} imports {module}"
    uses = {u for u in _attribute_uses(path) if u.startswith(("np.fft", "numpy.fft", "scipy.fft"))}
    assert not uses, f"{rel} calls {sorted(uses)}"


@pytest.mark.parametrize("path", _sources("harness", "backends", "fftgauge", "tests", "benchmarks"),
                         ids=lambda p: str(p.relative_to(ROOT)))
def test_only_fftgauge_is_imported_by_name(path):
    for module, _names, line in _imports(path):
        assert module.split(".")[0] not in ("harness", "backends"), f"{path.relative_to(ROOT)}:{line}"


@pytest.mark.parametrize("path", _sources("harness", "backends", "fftgauge"), ids=lambda p: str(p.relative_to(ROOT)))
def test_no_private_name_crosses_a_module(path):
    for module, names, line in _imports(path):
        if module.startswith("fftgauge"):
            private = [n for n in names if n.startswith("_") and not n.startswith("__")]
            assert not private, f"{path.relative_to(ROOT)}:{line} imports {private} from {module}"


@pytest.mark.parametrize("path", _sources("harness", "backends"), ids=lambda p: str(p.relative_to(ROOT)))
def test_modules_stay_small(path):
    lines = len(path.read_text().splitlines())
    assert lines <= MAX_LINES, f"{path.relative_to(ROOT)} has {lines} lines; split it by concern"


def test_every_package_is_installed():
    """Each folder of harness/ and backends/ with an __init__.py is listed in pyproject.toml's
    packages (setuptools installs only what is listed; a missing one breaks the wheel)."""
    import tomllib

    listed = set(tomllib.loads((ROOT / "pyproject.toml").read_text())["tool"]["setuptools"]["packages"])
    on_disk = {"fftgauge." + ".".join(p.parent.relative_to(ROOT).parts)
               for folder in ("harness", "backends") for p in (ROOT / folder).rglob("__init__.py")}
    assert on_disk <= listed, sorted(on_disk - listed)
