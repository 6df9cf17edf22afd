"""SPEC parsing and loading: every form, every option path, every one-line error."""

from __future__ import annotations

import json
import subprocess
import sys
import textwrap

import numpy as np
import pytest

from fftgauge.backends import registry
from fftgauge.backends.registry import BUILTINS, ParsedSpec, list_backends, load_backend, parse_spec
from fftgauge.backends.user_function import FunctionBackend
from fftgauge.harness.cases import Case
from fftgauge.harness.errors import UsageError


def _usage_error(spec: str, **kwargs) -> str:
    """Return the message of the UsageError ``load_backend(spec)`` raises; it must be one line."""
    with pytest.raises(UsageError) as info:
        load_backend(spec, **kwargs)
    message = str(info.value)
    assert "\n" not in message and message.strip() == message and message
    return message


def _x(n: int = 16) -> np.ndarray:
    rng = np.random.default_rng(n)
    return rng.standard_normal(n) + 1j * rng.standard_normal(n)


@pytest.fixture
def adapters_module(data_dir, monkeypatch):
    """Make tests/data importable, so ``sample_adapters:...`` names a module attribute."""
    monkeypatch.syspath_prepend(str(data_dir))
    return "sample_adapters"


# -- parse_spec: the forms ------------------------------------------------------------------

@pytest.mark.parametrize("spec, expected", [
    ("numpy", ParsedSpec("numpy", "name", "numpy", None, {})),
    ("  numpy  ", ParsedSpec("numpy", "name", "numpy", None, {})),
    ("numpy[]", ParsedSpec("numpy[]", "name", "numpy", None, {})),
    ("pyfftw[threads=2,effort=measure]",
     ParsedSpec("pyfftw[threads=2,effort=measure]", "name", "pyfftw", None, {"threads": "2", "effort": "measure"})),
    ("scipy[ workers = 2 , ]", ParsedSpec("scipy[ workers = 2 , ]", "name", "scipy", None, {"workers": "2"})),
    ("radix2-dit", ParsedSpec("radix2-dit", "name", "radix2-dit", None, {})),
    ("my_pkg.fast:fft", ParsedSpec("my_pkg.fast:fft", "module", "my_pkg.fast", "fft", {})),
    ("my_pkg.fast:Adapter[level=3]",
     ParsedSpec("my_pkg.fast:Adapter[level=3]", "module", "my_pkg.fast", "Adapter", {"level": "3"})),
    ("my_fft.py:fft", ParsedSpec("my_fft.py:fft", "file", "my_fft.py", "fft", {})),
    ("path/to/file.py:fft[kind=ifft,sizes=pow2]",
     ParsedSpec("path/to/file.py:fft[kind=ifft,sizes=pow2]", "file", "path/to/file.py", "fft",
                {"kind": "ifft", "sizes": "pow2"})),
    ("src/plain_module:fft", ParsedSpec("src/plain_module:fft", "file", "src/plain_module", "fft", {})),
])
def test_parse_spec_forms(spec, expected):
    assert parse_spec(spec) == expected


@pytest.mark.parametrize("spec, fragment", [
    ("", "empty backend SPEC"),
    ("   ", "empty backend SPEC"),
    ("numpy[", "is malformed"),
    ("numpy]", "is malformed"),
    ("numpy[threads=2]x", "is malformed"),
    ("numpy[a=1][b=2]", "is malformed"),
    ("numpy[threads]", "option 'threads' must be written key=value"),
    ("numpy[=2]", "must be written key=value"),
    ("numpy[threads=]", "must be written key=value"),
    ("scipy[workers=1,workers=2]", "option 'workers' is given twice"),
    (":f", "write module:attribute or path/to/file.py:attribute"),
    ("mod:", "write module:attribute or path/to/file.py:attribute"),
    ("mod:1st", "'1st' is not a Python attribute name"),
    ("mod:a.b", "'a.b' is not a Python attribute name"),
    ("a b", "is not a backend name, module:attr or file.py:attr"),
    ("-numpy", "is not a backend name"),
])
def test_malformed_specs_are_one_line_usage_errors(spec, fragment):
    with pytest.raises(UsageError) as info:
        parse_spec(spec)
    assert fragment in str(info.value)
    assert "\n" not in str(info.value)
    # load_backend goes through the same parser
    assert fragment in _usage_error(spec)


# -- built-in names and their options -------------------------------------------------------

def test_unknown_name_lists_the_known_backends():
    message = _usage_error("nump")
    assert "unknown backend 'nump'" in message
    for name in BUILTINS:
        assert name in message
    assert "module:attr" in message


@pytest.mark.parametrize("spec, fragment", [
    ("numpy[threads=2]", "unknown option 'threads' (options it takes: none;"),
    ("scipy[threads=2]", "unknown option 'threads' (options it takes: workers;"),
    ("pyfftw[workers=2]", "unknown option 'workers' (options it takes: aligned, effort, threads;"),
    ("scipy[workers=two]", "option workers='two' must be int"),
    ("scipy[workers=2.5]", "option workers='2.5' must be int"),
    ("pyfftw[aligned=maybe]", "option aligned='maybe' must be bool"),
    ("pyfftw[effort=fast]", "option effort='fast' must be one of estimate, measure, patient"),
])
def test_bad_options_of_builtins(spec, fragment):
    assert fragment in _usage_error(spec)


def test_builtin_options_are_typed():
    backend = load_backend("pyfftw[threads=2,effort=measure,aligned=no]")
    assert backend.opts == {"threads": 2, "effort": "measure", "aligned": False}
    assert load_backend("pyfftw[aligned=TRUE]").opts["aligned"] is True
    assert load_backend("scipy[workers=3]").opts == {"workers": 3}


def test_missing_builtin_module_says_how_to_install(monkeypatch):
    monkeypatch.setitem(BUILTINS, "ghost", ("fftgauge.backends.fftgauge_no_such_module", "GhostBackend", "pip install ghost"))
    message = _usage_error("ghost")
    assert "backend 'ghost' is not available" in message
    assert "fftgauge.backends.fftgauge_no_such_module" in message and "to fix: pip install ghost" in message
    (ghost,) = [info for info in list_backends() if info.name == "ghost"]
    assert not ghost.available and ghost.version is None
    assert ghost.reason.startswith("No module named") and ghost.reason.endswith("to fix: pip install ghost")


def test_list_backends_covers_every_builtin():
    infos = {info.name: info for info in list_backends()}
    assert set(BUILTINS) <= set(infos)
    for name in ("numpy", "scipy", "pyfftw"):
        info = infos[name]
        assert info.available and info.source == "built-in" and info.reason is None
        assert info.version and info.capabilities.kinds


# -- threads= -------------------------------------------------------------------------------

def test_threads_sets_each_backends_own_option():
    assert load_backend("scipy", threads=2).opts["workers"] == 2
    assert load_backend("pyfftw", threads=3).opts["threads"] == 3
    assert load_backend("numpy", threads=2).opts == {}


def test_threads_does_not_override_an_explicit_option():
    assert load_backend("scipy[workers=1]", threads=4).opts["workers"] == 1
    assert load_backend("pyfftw[threads=1]", threads=4).opts["threads"] == 1


def test_threads_reaches_adapter_classes_named_by_module(adapters_module):
    assert load_backend(f"{adapters_module}:ScaledNumpyBackend", threads=5).opts["threads"] == 5
    assert load_backend(f"{adapters_module}:ScaledNumpyBackend[threads=2]", threads=5).opts["threads"] == 2
    # a plain callable has no thread option: threads is ignored, not an error
    assert isinstance(load_backend(f"{adapters_module}:numpy_forward", threads=5), FunctionBackend)


# -- module and file forms --------------------------------------------------------------------

def test_plain_callable_from_a_file_is_a_forward_complex_transform(write_module, tmp_path, monkeypatch):
    write_module("my_fft.py", textwrap.dedent("""
        import numpy as np

        def fft(x):
            return np.fft.fft(x)[::-1].copy()   # deliberately not the DFT, to see it is what runs
    """))
    monkeypatch.chdir(tmp_path)
    backend = load_backend("my_fft.py:fft")
    assert isinstance(backend, FunctionBackend)
    caps = backend.capabilities()
    assert caps.kinds == ("fft",) and caps.norms == ("backward",) and caps.sizes == "any"
    assert backend.label == "my_fft:fft"   # a short label: the file's stem and the function, never a path
    x = _x(16)
    out = backend.plan(Case("fft", "float64", 16)).execute(x)
    assert np.array_equal(out, np.fft.fft(x)[::-1])
    assert backend.unsupported_reason(Case("ifft", "float64", 16)) is not None


def test_plain_callable_options(data_dir):
    spec = f"{data_dir}/sample_adapters.py:numpy_forward[sizes=pow2,max_n=64,dtypes=float64]"
    backend = load_backend(spec)
    caps = backend.capabilities()
    assert (caps.sizes, caps.max_n, caps.dtypes) == ("pow2", 64, ("float64",))
    assert "powers of two" in backend.unsupported_reason(Case("fft", "float64", 12))
    assert "n <= 64" in backend.unsupported_reason(Case("fft", "float64", 128))
    assert "float32" in backend.unsupported_reason(Case("fft", "float32", 16))
    assert backend.unsupported_reason(Case("fft", "float64", 32)) is None


def test_plain_callable_rejects_options_it_does_not_take(data_dir):
    message = _usage_error(f"{data_dir}/sample_adapters.py:numpy_forward[threads=2]")
    assert "unknown option 'threads' (options it takes: dtypes, kind, max_n, min_n, sizes;" in message


def test_plain_callable_from_a_module(adapters_module):
    backend = load_backend(f"{adapters_module}:doubled_forward")
    x = _x(8)
    assert np.array_equal(backend.plan(Case("fft", "float64", 8)).execute(x), 2 * np.fft.fft(x))


@pytest.mark.parametrize("form", ["module", "file"])
def test_adapter_class_loads_with_typed_options(form, adapters_module, data_dir):
    target = adapters_module if form == "module" else f"{data_dir}/sample_adapters.py"
    backend = load_backend(f"{target}:ScaledNumpyBackend[gain=2.5,mode=fancy,check=yes]")
    assert type(backend).__name__ == "ScaledNumpyBackend"
    assert backend.opts == {"gain": 2.5, "threads": 1, "mode": "fancy", "check": True}
    x = _x(8)
    assert np.allclose(backend.plan(Case("fft", "float64", 8)).execute(x), 2.5 * np.fft.fft(x))


@pytest.mark.parametrize("options, fragment", [
    ("gain=loud", "option gain='loud' must be float"),
    ("mode=odd", "option mode='odd' must be one of plain, fancy"),
    ("speed=9", "unknown option 'speed' (options it takes: check, gain, mode, threads;"),
])
def test_adapter_class_option_errors(adapters_module, options, fragment):
    assert fragment in _usage_error(f"{adapters_module}:ScaledNumpyBackend[{options}]")


def test_adapter_instance_is_used_as_is_and_takes_no_options(adapters_module):
    import sample_adapters

    assert load_backend(f"{adapters_module}:READY") is sample_adapters.READY
    assert "ready-made adapter instance, which takes no options" in _usage_error(f"{adapters_module}:READY[gain=2]")


def test_missing_file(tmp_path):
    message = _usage_error(f"{tmp_path}/nope/missing.py:fft")
    assert "no file" in message and "missing.py" in message


def test_file_that_is_not_python_source(write_module):
    path = write_module("notes.txt", "def fft(x): return x\n")
    assert "cannot be loaded as Python source" in _usage_error(f"{path}:fft")


def test_file_whose_import_raises_names_the_exception(data_dir):
    message = _usage_error(f"{data_dir}/raising_at_import.py:fft")
    assert "running" in message and "RuntimeError: deliberate failure while importing" in message


@pytest.mark.parametrize("source, fragment", [
    ("def fft(x)\n    return x\n", "SyntaxError"),
    ("import sys\nsys.exit(3)\n", "SystemExit: 3"),
    ("raise ValueError('two\\nlines')\n", "ValueError: two lines"),
])
def test_file_failures_are_one_line(write_module, source, fragment):
    path = write_module("broken_user_fft.py", source)
    assert fragment in _usage_error(f"{path}:fft")
    assert not any(name.startswith("fftgauge_user_") and "broken_user_fft" in name for name in sys.modules)


def test_module_whose_import_raises(adapters_module):
    message = _usage_error("raising_at_import:fft")
    assert "importing 'raising_at_import' failed: RuntimeError: deliberate failure while importing" in message


def test_module_not_found():
    assert "no module named 'fftgauge_no_such_module_xyz'" in _usage_error("fftgauge_no_such_module_xyz:fft")
    assert "no module named 'json.fftgauge_no_such_sub'" in _usage_error("json.fftgauge_no_such_sub:fft")


def test_module_whose_dependency_is_missing(adapters_module):
    message = _usage_error("needs_missing_dependency:fft")
    assert "importing 'needs_missing_dependency' failed" in message
    assert "fftgauge_no_such_dependency_xyz" in message


@pytest.mark.parametrize("form", ["module", "file"])
def test_missing_attribute(form, adapters_module, data_dir):
    target = adapters_module if form == "module" else f"{data_dir}/sample_adapters.py"
    message = _usage_error(f"{target}:nothing_here")
    assert f"{form} " in message and "has no attribute 'nothing_here'" in message


def test_attribute_that_is_not_callable(adapters_module):
    assert "'ANSWER' is a int, not a callable or a backend adapter" in _usage_error(f"{adapters_module}:ANSWER")


# -- adapter construction errors are usage errors ----------------------------------------------

def test_bad_dtypes_option_of_a_plain_callable_is_a_usage_error(data_dir):
    assert "dtypes" in _usage_error(f"{data_dir}/sample_adapters.py:numpy_forward[dtypes=float16]")


def test_incomplete_adapter_class_is_a_usage_error(adapters_module):
    assert "IncompleteBackend" in _usage_error(f"{adapters_module}:IncompleteBackend")


def test_negative_max_n_is_a_usage_error(data_dir):
    assert "max_n" in _usage_error(f"{data_dir}/sample_adapters.py:numpy_forward[max_n=-3]")


# -- entry points (a real dist-info on a temporary sys.path) --------------------------------

PLUGIN_SOURCE = '''
import numpy as np
from fftgauge.backends.base import Backend, Capabilities, FunctionPlan, OptionSpec


class PluginBackend(Backend):
    name = "plugin-scaled"
    description = "numpy times level"
    options = {"level": OptionSpec(int, 1, "factor"), "lanes": OptionSpec(int, 1, "threads")}
    thread_option = "lanes"

    @property
    def version(self):
        return "9.9"

    def capabilities(self):
        return Capabilities(kinds=("fft",), norms=("backward",), thread_option="lanes")

    def plan(self, case):
        level = self.opts["level"]
        return FunctionPlan(case, lambda x: level * np.fft.fft(x))


class BrokenDescribe(PluginBackend):
    def capabilities(self):
        raise RuntimeError("capabilities exploded")


def forward(x):
    return np.fft.fft(x)
'''

ENTRY_POINTS = '''[fftgauge.backends]
plugin-scaled = fftgauge_test_plugin:PluginBackend
plugin-func = fftgauge_test_plugin:forward
plugin-missing = fftgauge_test_plugin_absent:Thing
plugin-broken = fftgauge_test_plugin:BrokenDescribe
'''


@pytest.fixture
def plugin_dist(tmp_path, monkeypatch):
    """Install a fake distribution with four ``fftgauge.backends`` entry points on sys.path."""
    site = tmp_path / "site"
    dist_info = site / "fftgauge_test_plugin-0.1.dist-info"
    dist_info.mkdir(parents=True)
    (dist_info / "METADATA").write_text("Metadata-Version: 2.1\nName: fftgauge-test-plugin\nVersion: 0.1\n")
    (dist_info / "entry_points.txt").write_text(ENTRY_POINTS)
    (site / "fftgauge_test_plugin.py").write_text(PLUGIN_SOURCE)
    monkeypatch.syspath_prepend(str(site))
    yield site
    sys.modules.pop("fftgauge_test_plugin", None)


def test_entry_points_are_found(plugin_dist):
    found = registry._entry_points()
    assert {"plugin-scaled", "plugin-func", "plugin-missing", "plugin-broken"} <= set(found)


def test_entry_point_adapter_class_with_options_and_threads(plugin_dist):
    backend = load_backend("plugin-scaled[level=3]", threads=4)
    assert backend.opts == {"level": 3, "lanes": 4}
    assert load_backend("plugin-scaled[lanes=2]", threads=4).opts["lanes"] == 2
    x = _x(8)
    assert np.allclose(backend.plan(Case("fft", "float64", 8)).execute(x), 3 * np.fft.fft(x))
    assert "unknown option 'speed' (options it takes: lanes, level;" in _usage_error("plugin-scaled[speed=1]")


def test_entry_point_plain_callable(plugin_dist):
    backend = load_backend("plugin-func")
    assert isinstance(backend, FunctionBackend)
    x = _x(8)
    assert np.allclose(backend.plan(Case("fft", "float64", 8)).execute(x), np.fft.fft(x))


def test_entry_point_that_fails_to_load(plugin_dist):
    message = _usage_error("plugin-missing")
    assert "its entry point failed to load: ModuleNotFoundError" in message
    assert "fftgauge_test_plugin_absent" in message


def test_unknown_name_lists_entry_points_too(plugin_dist):
    assert "plugin-scaled" in _usage_error("plugin-nothing")


def test_list_backends_includes_entry_points_and_survives_broken_ones(plugin_dist):
    infos = {info.name: info for info in list_backends()}
    assert infos["plugin-scaled"].available and infos["plugin-scaled"].source == "entry point"
    assert infos["plugin-scaled"].version == "9.9"
    assert not infos["plugin-missing"].available and "ModuleNotFoundError" in infos["plugin-missing"].reason
    assert not infos["plugin-broken"].available
    assert infos["plugin-broken"].reason == "RuntimeError: capabilities exploded"


def test_entry_point_load_failure_with_a_fake_entry_point(monkeypatch):
    """The same path through a stand-in object with ``.name`` and ``.load()``."""

    class FakeEntryPoint:
        name = "fake-ep"

        def load(self):
            raise ImportError("the plugin's own import broke")

    monkeypatch.setattr(registry, "_entry_points", lambda: {"fake-ep": FakeEntryPoint()})
    message = _usage_error("fake-ep")
    assert "entry point failed to load: ImportError: the plugin's own import broke" in message


# -- a file's folder on the import path; did you mean ---------------------------------------

NEIGHBOUR_USER = '''
import numpy as np
from fft_core import forward     # the module beside this file

def fft(x):
    return forward(x)
'''


def test_a_backend_file_imports_its_neighbour(tmp_path, monkeypatch):
    folder = tmp_path / "fft_src"
    folder.mkdir()
    (folder / "fft_core.py").write_text("import numpy as np\n\ndef forward(x):\n    return np.fft.fft(x)\n")
    (folder / "my_fft.py").write_text(NEIGHBOUR_USER)
    monkeypatch.chdir(tmp_path)
    monkeypatch.setattr(sys, "path", list(sys.path))
    monkeypatch.delitem(sys.modules, "fft_core", raising=False)
    backend = load_backend("fft_src/my_fft.py:fft")
    x = _x(16)
    assert np.array_equal(backend.plan(Case("fft", "float64", 16)).execute(x), np.fft.fft(x))
    assert sys.path[0] == str(folder)


def test_a_backend_file_imports_its_neighbour_in_the_worker_too(tmp_path):
    # The battery loads the SPEC again in each worker process: the same rule holds there.
    folder = tmp_path / "fft_src"
    folder.mkdir()
    (folder / "fft_core.py").write_text("import numpy as np\n\ndef forward(x):\n    return np.fft.fft(x)\n")
    (folder / "my_fft.py").write_text(NEIGHBOUR_USER)
    done = subprocess.run([sys.executable, "-m", "fftgauge", "check", "--backend", "fft_src/my_fft.py:fft",
                           "--sizes", "8,16", "--kinds", "fft", "--dtypes", "float64", "--quiet",
                           "--json", "out.json"], cwd=tmp_path, capture_output=True, text=True, timeout=300)
    assert done.returncode == 0, done.stderr
    rows = json.loads((tmp_path / "out.json").read_text())["rows"]
    assert rows and {r["backend"] for r in rows} == {"my_fft:fft"}
    assert not [r for r in rows if r["status"] == "error"]
    assert any(r["status"] == "pass" for r in rows)


@pytest.mark.parametrize("name, suggestion", [("numpyy", "numpy"), ("scpy", "scipy"), ("radix2dit", "radix2-dit")])
def test_an_unknown_name_offers_the_closest_known_one(name, suggestion):
    assert f"unknown backend {name!r}; did you mean {suggestion!r}" in _usage_error(name)   # difflib's ratio >= 0.6


def test_an_unknown_name_far_from_every_known_one_offers_none():
    assert "did you mean" not in _usage_error("zzzzqqq")


def test_the_adapter_api_is_exported_by_fftgauge_lazily():
    # `import fftgauge` alone must not import numpy (fftgauge --help stays quick); the adapter
    # API comes from the package itself and is the same objects as in fftgauge.backends.
    script = ("import sys, fftgauge; heavy = 'numpy' in sys.modules\n"
              "from fftgauge import Backend, Capabilities, Plan, FunctionPlan, OptionSpec, SizeRule, Conventions\n"
              "import fftgauge.backends.base as base\n"
              "print(heavy, Backend is base.Backend and Capabilities is base.Capabilities and Plan is base.Plan)")
    done = subprocess.run([sys.executable, "-c", script], capture_output=True, text=True, timeout=60)
    assert done.returncode == 0, done.stderr
    assert done.stdout.split() == ["False", "True"]
