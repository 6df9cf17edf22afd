"""``fftgauge backends``: the listing, its JSON, its exit codes; and a user's file from a shell."""

from __future__ import annotations

import json
import os
import subprocess
import sys
import textwrap
from pathlib import Path


from fftgauge.backends.registry import BUILTINS
from fftgauge.harness.cli import main

REPO_ROOT = Path(__file__).resolve().parent.parent
LIBRARY_BACKENDS = ("numpy", "scipy", "pyfftw")


def _listed(stdout: str) -> dict[str, str]:
    """Return {backend name: the rest of its entry} from the human listing (an entry is its
    heading line plus the indented lines under it)."""
    rows: dict[str, str] = {}
    name = None
    for line in stdout.splitlines():
        if line.startswith("  ") and line[2:3] != " ":
            name, _, rest = line.strip().partition(" ")
            rows[name] = rest.strip()
        elif name and line.startswith("   "):
            rows[name] += " " + line.strip()
    return rows


def _run_cli(*args: str, cwd: Path = REPO_ROOT, env_extra: dict | None = None) -> subprocess.CompletedProcess:
    env = {**os.environ, "PYTHONPATH": str(REPO_ROOT), **(env_extra or {})}
    return subprocess.run([sys.executable, "-m", "fftgauge", *args], cwd=cwd, env=env,
                          capture_output=True, text=True, timeout=120)


def test_listing_shows_library_backends_available(capsys):
    assert main(["backends"]) == 0
    out = capsys.readouterr().out
    rows = _listed(out)
    for name in LIBRARY_BACKENDS:
        assert name in rows, out
        assert not rows[name].startswith("unavailable"), rows[name]
        assert "fft,ifft,rfft,irfft" in rows[name]
    assert "thread option workers" in rows["scipy"]
    assert "separate planning" in rows["pyfftw"] and "thread option threads" in rows["pyfftw"]
    # the references (written elsewhere) are listed too, available or with a reason
    assert set(BUILTINS) <= set(rows)


def test_json_to_stdout_has_the_schema(capsys):
    assert main(["backends", "--json", "-"]) == 0
    doc = json.loads(capsys.readouterr().out)
    assert doc["schema"] == "fftgauge-backends/1"
    entries = {b["name"]: b for b in doc["backends"]}
    for name in LIBRARY_BACKENDS:
        entry = entries[name]
        assert entry["available"] is True and entry["reason"] is None
        assert entry["capabilities"]["kinds"] == ["fft", "ifft", "rfft", "irfft"]
        assert set(entry) >= {"name", "source", "version", "description", "capabilities", "options"}
    assert entries["pyfftw"]["capabilities"]["separate_planning"] is True
    assert entries["scipy"]["options"]["workers"]["default"] == 1


def test_json_to_a_file(tmp_path, capsys):
    path = tmp_path / "out" / "fftgauge.backends.json"
    assert main(["backends", "--json", str(path)]) == 0
    doc = json.loads(path.read_text(encoding="utf-8"))
    assert doc["schema"] == "fftgauge-backends/1"
    assert {b["name"] for b in doc["backends"]} >= set(LIBRARY_BACKENDS)
    assert "numpy" in _listed(capsys.readouterr().out)
    assert not [p for p in path.parent.iterdir() if p.name.endswith(".tmp")]


def test_unknown_option_is_exit_2_with_one_line(capsys):
    assert main(["backends", "--bogus"]) == 2
    captured = capsys.readouterr()
    lines = captured.err.strip().splitlines()
    assert len(lines) == 1 and "--bogus" in lines[0] and "Traceback" not in captured.err
    assert captured.out == ""


def test_unwritable_json_path_is_exit_2(tmp_path, capsys):
    blocker = tmp_path / "a_file"
    blocker.write_text("")
    assert main(["backends", "--json", str(blocker / "out.json")]) == 2
    err = capsys.readouterr().err
    assert len(err.strip().splitlines()) == 1 and "cannot write" in err and "Traceback" not in err


def test_console_module_exit_codes():
    ok = _run_cli("backends")
    assert ok.returncode == 0, ok.stderr
    rows = _listed(ok.stdout)
    assert all(name in rows and not rows[name].startswith("unavailable") for name in LIBRARY_BACKENDS)
    bad = _run_cli("backends", "--bogus")
    assert bad.returncode == 2
    assert len(bad.stderr.strip().splitlines()) == 1 and "Traceback" not in bad.stderr


def test_users_own_file_from_the_command_line(tmp_path, write_module):
    """A user in their own folder names ``my_fft.py:fft``; loading and running it works in a fresh
    interpreter (no ``check`` command yet, so the registry is called as the CLI will call it)."""
    write_module("my_fft.py", textwrap.dedent("""
        import numpy as np

        def fft(x):
            return np.fft.fft(x)
    """))
    script = textwrap.dedent("""
        import numpy as np
        from fftgauge.backends.registry import load_backend
        from fftgauge.harness.cases import Case
        b = load_backend("my_fft.py:fft")
        x = np.arange(8) + 1j
        y = b.plan(Case("fft", "float64", 8)).execute(x)
        print(b.label, bool(np.allclose(y, np.fft.fft(x))))
    """)
    env = {**os.environ, "PYTHONPATH": str(REPO_ROOT)}
    done = subprocess.run([sys.executable, "-c", script], cwd=tmp_path, env=env, capture_output=True,
                          text=True, timeout=120)
    assert done.returncode == 0, done.stderr
    assert done.stdout.split() == ["my_fft:fft", "True"]  # the short label: file stem and function


def test_users_own_file_in_process(tmp_path, write_module, monkeypatch):
    from fftgauge.backends.registry import load_backend
    from fftgauge.harness.cases import Case

    import numpy as np

    write_module("my_fft.py", "import numpy as np\n\ndef fft(x):\n    return np.conj(np.fft.fft(x))\n")
    monkeypatch.chdir(tmp_path)
    backend = load_backend("my_fft.py:fft")
    x = np.linspace(0, 1, 8) + 0.5j
    # the wrapper runs the user's function as it is (here a deliberately conjugated DFT)
    assert np.array_equal(backend.plan(Case("fft", "float64", 8)).execute(x), np.conj(np.fft.fft(x)))


HEAVY_MODULES = ("pandas", "matplotlib", "scipy.stats")


def test_help_and_backends_import_nothing_heavy():
    """Building the parser (what ``fftgauge --help`` does: every command module is imported)
    and listing the backends import neither pandas, matplotlib nor scipy.stats (issue 11:
    start-up); each command module imports those inside its run()."""
    code = textwrap.dedent(f"""
        import contextlib, io, sys
        from fftgauge.harness.cli import build_parser, main
        build_parser().format_help()
        with contextlib.redirect_stdout(io.StringIO()):
            assert main(["backends"]) == 0
        print(",".join(sorted(m for m in sys.modules if m.split(".")[0] in ("pandas", "matplotlib")
                              or m == "scipy.stats" or m.startswith("scipy.stats."))))
    """)
    env = {**os.environ, "PYTHONPATH": str(REPO_ROOT)}
    done = subprocess.run([sys.executable, "-c", code], cwd=REPO_ROOT, env=env, capture_output=True, text=True,
                          timeout=120)
    assert done.returncode == 0, done.stderr
    assert done.stdout.strip() == "", f"heavy modules imported at start-up: {done.stdout.strip()[:300]}"


def test_check_help_shows_the_defaults_and_the_check_names(capsys):
    import pytest

    from fftgauge.harness.battery.checks import CHECKS

    with pytest.raises(SystemExit) as done:
        main(["check", "--help"])
    assert done.value.code == 0
    text = " ".join(capsys.readouterr().out.split())
    for default in ("(default @default)", "(default float32,float64)", "(default results/check-"):
        assert default in text
    assert all(name.replace("-", "- ") in text or name in text for name in CHECKS)
