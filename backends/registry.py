"""Turn a SPEC string into a validated backend adapter, and list every backend there is.

SPEC forms (see the contracts)::

    NAME                      built-in or entry-point backend (numpy, scipy, pyfftw, ...)
    NAME[key=value,...]       with options, e.g. pyfftw[threads=2,effort=measure]
    package.module:attr       a Python object importable from the environment
    path/to/file.py:attr      a Python object loaded from a file
    clib:...                  a C function in a shared library (backends/shared_library.py)
    exec:...                  an external program speaking a pipe protocol (backends/external_program.py)

Any form may carry ``[key=value,...]``. ``attr`` is a :class:`~fftgauge.backends.base.Backend`
subclass, an instance of one, or a plain callable (wrapped by
:class:`~fftgauge.backends.user_function.FunctionBackend`). Third-party packages register adapters
under the entry-point group ``fftgauge.backends``.

Every problem with a SPEC raises :class:`~fftgauge.harness.errors.UsageError` with a one-line
message that names the bad part and says how to fix it.
"""

from __future__ import annotations

import importlib
import importlib.metadata
import importlib.util
import os
import re
import sys
from dataclasses import dataclass, field
from typing import Any

from fftgauge.backends.base import Backend, OptionSpec
from fftgauge.harness.errors import UsageError

ENTRY_POINT_GROUP = "fftgauge.backends"

#: Built-in backends: SPEC name -> (module, class, how to install what it needs). Each
#: module imports its library at the top, so a missing library shows up as an ImportError
#: when the backend is loaded.
BUILTINS: dict[str, tuple[str, str, str]] = {
    "numpy": ("fftgauge.backends.numpy_fft", "NumpyBackend", "pip install numpy"),
    "scipy": ("fftgauge.backends.scipy_fft", "ScipyBackend", "pip install scipy"),
    "pyfftw": ("fftgauge.backends.pyfftw_plans", "PyfftwBackend", "pip install 'fftgauge[pyfftw]'"),
    "radix2-dit": ("fftgauge.backends.radix2", "Radix2DitBackend", "reinstall fftgauge"),
    "radix2-dif": ("fftgauge.backends.radix2", "Radix2DifBackend", "reinstall fftgauge"),
    "direct": ("fftgauge.backends.direct", "DirectBackend", "reinstall fftgauge"),
    # Synthetic backends for the engine's own measurements (not FFTs; never in the defaults):
    "null": ("fftgauge.backends.null", "NullBackend", "reinstall fftgauge"),
    "busywait": ("fftgauge.backends.busywait", "BusyWaitBackend", "reinstall fftgauge"),
    "slowed": ("fftgauge.backends.slowed", "SlowedBackend", "reinstall fftgauge"),
}

#: Built-ins that compute no transform (the timer's overhead floor, a backend of known cost).
SYNTHETIC_BACKENDS = ("null", "busywait")

#: SPEC schemes for implementations outside Python: ``scheme:rest`` -> (module, function).
#: The function takes ``(spec, rest)`` and returns a Backend; it parses ``rest`` itself
#: (its own syntax is documented in its module) and raises UsageError on bad input.
SCHEMES: dict[str, tuple[str, str]] = {
    "clib": ("fftgauge.backends.shared_library", "backend_from_spec"),
    "exec": ("fftgauge.backends.external_program", "backend_from_spec"),
}

#: The backends a command uses when no --backend is given (those available on this machine).
DEFAULT_BACKENDS = ("numpy", "scipy", "pyfftw", "radix2-dit", "radix2-dif", "direct")

_NAME = re.compile(r"^[A-Za-z][A-Za-z0-9_.+-]*$")
_SPEC = re.compile(r"^(?P<body>[^\[\]]+?)(?:\[(?P<opts>[^\[\]]*)\])?$")
_TRUE = {"1", "true", "yes", "on"}
_FALSE = {"0", "false", "no", "off"}


@dataclass(frozen=True)
class ParsedSpec:
    """A SPEC split into its parts: ``form`` is ``name``, ``module``, ``file`` or a scheme
    of :data:`SCHEMES` (then ``target`` is everything after ``scheme:``)."""

    text: str
    form: str
    target: str
    attr: str | None
    options: dict[str, str] = field(default_factory=dict)


@dataclass(frozen=True)
class BackendInfo:
    """What ``fftgauge backends`` shows for one backend."""

    name: str
    source: str
    available: bool
    reason: str | None
    version: str | None
    description: str | None
    capabilities: dict[str, Any] | None
    options: dict[str, Any] | None


def _one_line(text: str) -> str:
    return " ".join(str(text).split())


def parse_options(spec: str, text: str | None) -> dict[str, str]:
    """Return the ``key=value,...`` text of a SPEC's options as a dict of raw strings.

    Raises
    ------
    UsageError
        When an option is not written ``key=value`` or a key is given twice.
    """
    if text is None:
        return {}
    out: dict[str, str] = {}
    for raw in text.split(","):
        item = raw.strip()
        if not item:
            continue
        key, sep, value = item.partition("=")
        key, value = key.strip(), value.strip()
        if not sep or not key or not value:
            raise UsageError(f"backend {spec!r}: option {item!r} must be written key=value")
        if key in out:
            raise UsageError(f"backend {spec!r}: option {key!r} is given twice")
        out[key] = value
    return out


def parse_spec(spec: str) -> ParsedSpec:
    """Split a SPEC string into its form, target, attribute and raw options.

    Raises
    ------
    UsageError
        When the SPEC is empty or malformed (unbalanced brackets, missing attribute,
        options not written ``key=value``).

    Examples
    --------
    >>> parse_spec("pyfftw[threads=2]")
    ParsedSpec(text='pyfftw[threads=2]', form='name', target='pyfftw', attr=None, options={'threads': '2'})
    >>> parse_spec("my_fft.py:fft").form
    'file'
    """
    if spec is None or not str(spec).strip():
        raise UsageError("empty backend SPEC; give a name such as numpy, or path/to/file.py:function")
    spec = str(spec).strip()
    scheme, sep, rest = spec.partition(":")
    if sep and scheme in SCHEMES:
        if not rest.strip():
            raise UsageError(f"backend {spec!r}: nothing after {scheme}:; see fftgauge check --help for the form")
        return ParsedSpec(spec, scheme, rest.strip(), None, {})
    m = _SPEC.match(spec)
    if not m:
        raise UsageError(f"backend {spec!r} is malformed; options go in one trailing [key=value,...]")
    body, opts = m.group("body").strip(), parse_options(spec, m.group("opts"))
    if ":" in body:
        target, _, attr = body.rpartition(":")
        if not target or not attr:
            raise UsageError(f"backend {spec!r}: write module:attribute or path/to/file.py:attribute")
        if not attr.isidentifier():
            raise UsageError(f"backend {spec!r}: {attr!r} is not a Python attribute name")
        form = "file" if target.endswith(".py") or os.sep in target or "/" in target else "module"
        return ParsedSpec(spec, form, target, attr, opts)
    if not _NAME.match(body):
        raise UsageError(f"backend {spec!r} is not a backend name, module:attr or file.py:attr")
    return ParsedSpec(spec, "name", body, None, opts)


def _coerce(spec: str, key: str, value: str, option: OptionSpec) -> Any:
    try:
        if option.type is bool:
            low = value.lower()
            if low not in _TRUE | _FALSE:
                raise ValueError
            result: Any = low in _TRUE
        else:
            result = option.type(value)
    except ValueError:
        raise UsageError(
            f"backend {spec!r}: option {key}={value!r} must be {option.type.__name__}" + (
                f" (one of {', '.join(map(str, option.choices))})" if option.choices else "")
        ) from None
    if option.choices is not None and result not in option.choices:
        raise UsageError(f"backend {spec!r}: option {key}={value!r} must be one of "
                         f"{', '.join(map(str, option.choices))}")
    return result


def coerce_options(spec: str, cls: type[Backend], raw: dict[str, str]) -> dict[str, Any]:
    """Return ``raw`` converted to the types ``cls.options`` declares.

    Raises
    ------
    UsageError
        For an option the backend does not take (the message lists the ones it does) or a
        value of the wrong type or outside the allowed choices.
    """
    out = {}
    for key, value in raw.items():
        if key not in cls.options:
            known = ", ".join(sorted(cls.options)) or "none"
            raise UsageError(f"backend {spec!r}: unknown option {key!r} (options it takes: {known})")
        out[key] = _coerce(spec, key, value, cls.options[key])
    return out


def _import_module(spec: str, module: str) -> Any:
    try:
        return importlib.import_module(module)
    except ModuleNotFoundError as exc:
        if exc.name and (module == exc.name or module.startswith(exc.name + ".")):
            raise UsageError(f"backend {spec!r}: no module named {module!r}; check the name, or install "
                             f"the package that provides it") from None
        raise UsageError(f"backend {spec!r}: importing {module!r} failed: {_one_line(exc)}") from None
    except Exception as exc:  # the user's module raised while importing
        raise UsageError(f"backend {spec!r}: importing {module!r} failed: {type(exc).__name__}: "
                         f"{_one_line(exc)}") from None


def _load_file(spec: str, path: str) -> Any:
    full = os.path.abspath(os.path.expanduser(path))
    if not os.path.isfile(full):
        raise UsageError(f"backend {spec!r}: no file {path!r}; check the path (relative paths start "
                         f"from the current folder)")
    mod_name = "fftgauge_user_" + re.sub(r"\W", "_", full)
    if mod_name in sys.modules:
        return sys.modules[mod_name]
    loader_spec = importlib.util.spec_from_file_location(mod_name, full)
    if loader_spec is None or loader_spec.loader is None:
        raise UsageError(f"backend {spec!r}: {path!r} cannot be loaded as Python source")
    module = importlib.util.module_from_spec(loader_spec)
    sys.modules[mod_name] = module
    try:
        loader_spec.loader.exec_module(module)
    except BaseException as exc:  # noqa: BLE001 - any failure in user code is a usage error here
        del sys.modules[mod_name]
        if isinstance(exc, KeyboardInterrupt):
            raise
        raise UsageError(f"backend {spec!r}: running {path!r} failed: {type(exc).__name__}: "
                         f"{_one_line(exc)}") from None
    return module


def _construct(spec: str, factory: Any, *args: Any, **kwargs: Any) -> Backend:
    """Call ``factory(*args, **kwargs)``; a TypeError/ValueError from it is the SPEC's fault.

    Raises
    ------
    UsageError
        When building the adapter fails (an abstract class, an option value its
        constructor refuses).
    """
    try:
        return factory(*args, **kwargs)
    except UsageError:
        raise
    except (TypeError, ValueError) as exc:
        raise UsageError(f"backend {spec!r}: building the adapter failed: {type(exc).__name__}: "
                         f"{_one_line(exc)}") from None


def _from_object(parsed: ParsedSpec, obj: Any, extra: dict[str, Any]) -> Backend:
    """Return a backend for ``obj``: a Backend subclass, an instance of one, or a callable."""
    from fftgauge.backends.user_function import FunctionBackend

    spec = parsed.text
    if isinstance(obj, type) and issubclass(obj, Backend):
        opts = coerce_options(spec, obj, parsed.options)
        return _construct(spec, obj, **{**extra, **opts})
    if isinstance(obj, Backend):
        if parsed.options:
            raise UsageError(f"backend {spec!r} names a ready-made adapter instance, which takes no "
                             f"options; name its class instead")
        return obj
    if callable(obj):
        opts = coerce_options(spec, FunctionBackend, parsed.options)
        body = spec.split("[", 1)[0]
        return _construct(spec, FunctionBackend, obj, body, **opts)
    raise UsageError(f"backend {spec!r}: {parsed.attr or parsed.target!r} is a {type(obj).__name__}, "
                     f"not a callable or a backend adapter")


def _entry_points() -> dict[str, importlib.metadata.EntryPoint]:
    return {ep.name: ep for ep in importlib.metadata.entry_points(group=ENTRY_POINT_GROUP)}


def _builtin_class(spec: str, name: str) -> type[Backend]:
    module_name, class_name, install = BUILTINS[name]
    try:
        module = importlib.import_module(module_name)
    except ImportError as exc:
        raise UsageError(f"backend {spec!r} is not available: {_one_line(exc)}; to fix: {install}") from None
    return getattr(module, class_name)


def load_backend(spec: str, threads: int | None = None) -> Backend:
    """Return the backend adapter a SPEC string names, with its options applied.

    ``threads``, when given, sets the backend's own thread option (``workers`` for scipy,
    ``threads`` for pyFFTW) unless the SPEC sets it explicitly.

    Raises
    ------
    UsageError
        Unknown name, unknown or mistyped option, malformed SPEC, missing file, missing
        module, failing import, an attribute that does not exist or is not callable, or a
        built-in backend whose library is not installed.
    """
    parsed = parse_spec(spec)
    if parsed.form in SCHEMES:
        module_name, func_name = SCHEMES[parsed.form]
        module = importlib.import_module(module_name)
        return getattr(module, func_name)(spec, parsed.target)
    if parsed.form == "name":
        if parsed.target in BUILTINS:
            cls = _builtin_class(spec, parsed.target)
            opts = coerce_options(spec, cls, parsed.options)
            extra = _thread_extra(cls, threads, opts)
            return _construct(spec, cls, **{**extra, **opts})
        eps = _entry_points()
        if parsed.target in eps:
            try:
                obj = eps[parsed.target].load()
            except Exception as exc:
                raise UsageError(f"backend {spec!r}: its entry point failed to load: {type(exc).__name__}: "
                                 f"{_one_line(exc)}") from None
            return _from_object(parsed, obj, _thread_extra(obj, threads, parsed.options))
        known = ", ".join(sorted(set(BUILTINS) | set(eps)))
        raise UsageError(f"unknown backend {parsed.target!r}; known backends: {known} "
                         f"(or give module:attr or path/to/file.py:attr)")
    if parsed.form == "module":
        module = _import_module(spec, parsed.target)
        where = f"module {parsed.target!r}"
    else:
        module = _load_file(spec, parsed.target)
        where = f"file {parsed.target!r}"
    if not hasattr(module, parsed.attr):
        raise UsageError(f"backend {spec!r}: {where} has no attribute {parsed.attr!r}")
    obj = getattr(module, parsed.attr)
    return _from_object(parsed, obj, _thread_extra(obj, threads, parsed.options))


def _thread_extra(cls: Any, threads: int | None, explicit: dict[str, Any]) -> dict[str, Any]:
    """Return ``{thread option: threads}`` for a backend class that declares a thread option."""
    if threads is None or not (isinstance(cls, type) and issubclass(cls, Backend)):
        return {}
    option = cls.thread_option
    if option is None or option in explicit:
        return {}
    return {option: threads}


def default_specs() -> list[str]:
    """Return the names in :data:`DEFAULT_BACKENDS` whose backends load on this machine."""
    out = []
    for name in DEFAULT_BACKENDS:
        try:
            load_backend(name)
        except UsageError:
            continue
        out.append(name)
    return out


def list_backends() -> list[BackendInfo]:
    """Return every built-in and entry-point backend, available or not, with the reason.

    Never raises for a broken backend: its ``reason`` carries the error.
    """
    infos = []
    names = [(n, "built-in") for n in BUILTINS] + [(n, "entry point") for n in _entry_points() if n not in BUILTINS]
    for name, source in names:
        try:
            backend = load_backend(name)
            d = backend.describe()
            infos.append(BackendInfo(name, source, True, None, d["version"], d["description"],
                                     d["capabilities"], d["options"]))
        except UsageError as exc:
            reason = str(exc).split(" is not available: ", 1)[-1]
            infos.append(BackendInfo(name, source, False, reason, None, None, None, None))
        except Exception as exc:  # a broken third-party adapter must not break the listing
            infos.append(BackendInfo(name, source, False, f"{type(exc).__name__}: {_one_line(exc)}",
                                     None, None, None, None))
    return infos
