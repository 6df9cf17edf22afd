"""Turn a SPEC string into a validated backend adapter, and list every backend there is.

SPEC forms (see the contracts)::

    NAME                      built-in or entry-point backend (numpy, scipy, pyfftw, ...)
    NAME[key=value,...]       with options, e.g. pyfftw[threads=2,effort=measure]
    package.module:attr       a Python object importable from the environment
    path/to/file.py:attr      a Python object loaded from a file
    clib:...                  a C function in a shared library (backends/shared_library.py)
    exec:...                  an external program speaking a pipe protocol (backends/external_program.py)

Any form may carry ``[key=value,...]``: the backend's own options, and those every SPEC
takes (:data:`COMMON_OPTIONS`: ``label`` and the declared conventions ``sign``,
``forward_scale``, ``inverse_scale``, ``order``, ``packing``). The options are parsed here,
once, for every form, and each value checked against its type, choices and minimum. A file
SPEC may pair a function with its inverse (``myfft.py:fft+ifft``). ``attr`` is a :class:`~fftgauge.backends.base.Backend`
subclass, an instance of one, or a plain callable (wrapped by
:class:`~fftgauge.backends.user_function.FunctionBackend`). Third-party packages register adapters
under the entry-point group ``fftgauge.backends``.

Every problem with a SPEC raises :class:`~fftgauge.harness.errors.UsageError` with a one-line
message that names the bad part and says how to fix it.
"""

from __future__ import annotations

import difflib
import importlib
import importlib.metadata
import os
import re
from dataclasses import dataclass, field
from typing import Any, Mapping

from fftgauge.backends.base import Backend, Conventions, OptionSpec
from fftgauge.backends.claims import ORDERS, PACKINGS, SCALES
from fftgauge.harness.errors import UsageError

ENTRY_POINT_GROUP = "fftgauge.backends"

#: Built-in backends: SPEC name -> (module, class, how to install what it needs). Each
#: module imports its library at the top, so a missing library shows up as an ImportError
#: when the backend is loaded.
BUILTINS: dict[str, tuple[str, str, str]] = {
    "numpy": ("fftgauge.backends.numpy_fft", "NumpyBackend", "pip install numpy"),
    "scipy": ("fftgauge.backends.scipy_fft", "ScipyBackend", "pip install scipy"),
    "pyfftw": ("fftgauge.backends.pyfftw_plans", "PyfftwBackend", "pip install 'fftgauge[pyfftw]'"),
    "mkl_fft": ("fftgauge.backends.mkl_fft_dfti", "MklFftBackend", "pip install 'fftgauge[mkl]'"),
    "ducc0": ("fftgauge.backends.ducc0_fft", "Ducc0Backend", "pip install 'fftgauge[ducc0]'"),
    "array-api": ("fftgauge.backends.array_api_fft", "ArrayApiBackend", "pip install the namespace's package"),
    "scipy-backend": ("fftgauge.backends.scipy_backend_object", "ScipyBackendObject", "pip install scipy"),
    "jax": ("fftgauge.backends.jax_fft", "JaxBackend", "pip install 'fftgauge[jax]'"),
    "torch": ("fftgauge.backends.torch_fft", "TorchBackend", "pip install 'fftgauge[torch]'"),
    "cupy": ("fftgauge.backends.cupy_fft", "CupyBackend",
             "pip install 'fftgauge[cupy]' (cupy-cuda12x) on a machine with an NVIDIA GPU and its driver"),
    "radix2-dit": ("fftgauge.backends.radix2", "Radix2DitBackend", "reinstall fftgauge"),
    "radix2-dif": ("fftgauge.backends.radix2", "Radix2DifBackend", "reinstall fftgauge"),
    "direct": ("fftgauge.backends.direct", "DirectBackend", "reinstall fftgauge"),
    "radix2-fixed": ("fftgauge.backends.fixed_radix2", "FixedRadix2Backend", "reinstall fftgauge"),
    "cmsis-dsp": ("fftgauge.backends.cmsis_dsp", "CmsisDspBackend", "pip install 'fftgauge[cmsis]'"),
    # Synthetic backends for the engine's own measurements (not FFTs; never in the defaults):
    "null": ("fftgauge.backends.null", "NullBackend", "reinstall fftgauge"),
    "busywait": ("fftgauge.backends.busywait", "BusyWaitBackend", "reinstall fftgauge"),
    "slowed": ("fftgauge.backends.slowed", "SlowedBackend", "reinstall fftgauge"),
}

#: Built-ins that compute no transform (the timer's overhead floor, a backend of known cost).
SYNTHETIC_BACKENDS = ("null", "busywait")

#: SPEC schemes for implementations outside Python: ``scheme:body[options]`` -> (module,
#: class). The registry splits off and checks the options (the class's ``options``), then
#: calls ``cls.from_spec(spec, body, **options)``, which parses the body (its syntax is
#: documented in its module) and raises UsageError on a bad one.
SCHEMES: dict[str, tuple[str, str]] = {
    "clib": ("fftgauge.backends.shared_library", "SharedLibraryBackend"),
    "exec": ("fftgauge.backends.external_program", "ExternalProgramBackend"),
}

#: The backends a command uses when no --backend is given (those available on this machine).
DEFAULT_BACKENDS = ("numpy", "scipy", "pyfftw", "radix2-dit", "radix2-dif", "direct")

#: Options every SPEC takes, whatever the backend: its label in every table, plot and file,
#: and the conventions its outputs follow (docs/reference.md, "Backend SPEC options").
COMMON_OPTIONS: dict[str, OptionSpec] = {
    "label": OptionSpec(str, "", "short name used in every table, plot and file"),
    "sign": OptionSpec(str, "-1", "exponent sign of the forward transform: -1 or +1", choices=("-1", "+1")),
    "forward_scale": OptionSpec(str, "", "factor the forward transform applies: 1, 1/n, 1/sqrt(n)",
                                choices=SCALES),
    "inverse_scale": OptionSpec(str, "", "factor the inverse transform applies: 1, 1/n, 1/sqrt(n)",
                                choices=SCALES),
    "order": OptionSpec(str, "", "spectrum order (fft output, ifft input): natural, bit-reversed, centred",
                        choices=ORDERS),
    "packing": OptionSpec(str, "", "real transforms' half spectrum: complex, dc-nyquist, halfcomplex",
                          choices=PACKINGS),
}
#: The longest label a SPEC may give.
MAX_LABEL_LENGTH = 40

_NAME = re.compile(r"^[A-Za-z][A-Za-z0-9_.+-]*$")
_LABEL = re.compile(r"^[A-Za-z0-9][A-Za-z0-9_.:+=-]*$")
_TRAILING_OPTIONS = re.compile(r"^(?P<body>.*?)(?:\[(?P<opts>[^\[\]]*)\])?\s*$", re.S)
_TRUE = {"1", "true", "yes", "on"}
_FALSE = {"0", "false", "no", "off"}


@dataclass(frozen=True)
class ParsedSpec:
    """A SPEC split into its parts: ``form`` is ``name``, ``module``, ``file`` or a scheme
    of :data:`SCHEMES` (then ``target`` is the body after ``scheme:``, options split off).
    ``options`` are the backend's own (raw strings); ``companion`` the inverse function of
    ``file.py:fft+ifft``; ``label`` and ``conventions`` come from :data:`COMMON_OPTIONS`."""

    text: str
    form: str
    target: str
    attr: str | None
    options: dict[str, str] = field(default_factory=dict)
    companion: str | None = None
    label: str | None = None
    conventions: Conventions | None = None


@dataclass(frozen=True)
class BackendInfo:
    """What ``fftgauge backends`` shows for one backend (``capabilities`` typed)."""

    name: str
    source: str
    available: bool
    reason: str | None
    version: str | None
    description: str | None
    capabilities: Any | None
    options: dict[str, Any] | None

    def as_dict(self) -> dict[str, Any]:
        """Return the entry as JSON-able values (the capabilities as their dict)."""
        d = dict(vars(self))
        d["capabilities"] = self.capabilities.as_dict() if self.capabilities is not None else None
        return d


def one_line(text: Any) -> str:
    """Return ``text`` as one line (runs of white space become one blank)."""
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


def split_options(spec: str, text: str) -> tuple[str, dict[str, str]]:
    """Split ``body[key=value,...]`` into the body and its raw options.

    Only a trailing bracket group is options; a body that must end with ``]`` is written
    with an empty group after it (``...][]``).

    Returns
    -------
    tuple
        ``(body, {key: value})``, the body stripped of surrounding blanks.

    Raises
    ------
    UsageError
        When an option is not written ``key=value``, a key is given twice, or the body is empty.
    """
    m = _TRAILING_OPTIONS.match(text)
    body, opts = (m.group("body"), m.group("opts")) if m else (text, None)
    body = body.strip()
    if not body:
        raise UsageError(f"backend {spec!r}: nothing before the options; see docs/external-backends.md")
    return body, parse_options(spec, opts)


def _common_options(spec: str, raw: dict[str, str]) -> tuple[dict[str, str], str | None, Conventions | None]:
    """Split the :data:`COMMON_OPTIONS` off ``raw``; return the rest, the label, the conventions."""
    rest = {k: v for k, v in raw.items() if k not in COMMON_OPTIONS}
    common = {k: _coerce(spec, k, v, COMMON_OPTIONS[k]) for k, v in raw.items() if k in COMMON_OPTIONS}
    label = common.pop("label", None)
    if label is not None and (len(label) > MAX_LABEL_LENGTH or not _LABEL.match(label)):
        raise UsageError(f"backend {spec!r}: label={label!r} must be at most {MAX_LABEL_LENGTH} letters, digits "
                         f"and _ . : + = - (it names the backend in tables, plots and files)")
    if "sign" in common:
        common["sign"] = int(common["sign"])
    return rest, label, (Conventions(**common) if common else None)


def parse_spec(spec: str) -> ParsedSpec:
    """Split a SPEC string into its form, target, attribute, options, label and conventions.

    Raises
    ------
    UsageError
        When the SPEC is empty or malformed (unbalanced brackets, missing attribute,
        options not written ``key=value``, a common option with a value outside its choices).

    Examples
    --------
    >>> parse_spec("pyfftw[threads=2]")
    ParsedSpec(text='pyfftw[threads=2]', form='name', target='pyfftw', attr=None, options={'threads': '2'}, companion=None, label=None, conventions=None)
    >>> parse_spec("my_fft.py:fft+ifft[label=mine]").companion
    'ifft'
    """
    if spec is None or not str(spec).strip():
        raise UsageError("empty backend SPEC; give a name such as numpy, or path/to/file.py:function")
    spec = str(spec).strip()
    scheme, sep, rest = spec.partition(":")
    if sep and scheme in SCHEMES:
        if not rest.strip():
            raise UsageError(f"backend {spec!r}: nothing after {scheme}:; see fftgauge check --help for the form")
        body, raw = split_options(spec, rest)
        opts, label, conventions = _common_options(spec, raw)
        return ParsedSpec(spec, scheme, body, None, opts, None, label, conventions)
    body, raw = split_options(spec, spec)
    if "[" in body or "]" in body:
        raise UsageError(f"backend {spec!r} is malformed; options go in one trailing [key=value,...]")
    opts, label, conventions = _common_options(spec, raw)
    if ":" in body:
        target, _, attr = body.rpartition(":")
        attr, _, companion = attr.partition("+")
        if not target or not attr:
            raise UsageError(f"backend {spec!r}: write module:attribute or path/to/file.py:attribute")
        for name in (attr, companion) if companion else (attr,):
            if not name.isidentifier():
                raise UsageError(f"backend {spec!r}: {name!r} is not a Python attribute name")
        form = "file" if target.endswith(".py") or os.sep in target or "/" in target else "module"
        return ParsedSpec(spec, form, target, attr, opts, companion or None, label, conventions)
    if not _NAME.match(body):
        raise UsageError(f"backend {spec!r} is not a backend name, module:attr or file.py:attr")
    return ParsedSpec(spec, "name", body, None, opts, None, label, conventions)


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
    check_minimum(spec, key, result, option)
    return result


def check_minimum(spec: str, key: str, value: Any, option: OptionSpec) -> None:
    """Check ``value`` against the option's minimum.

    Raises
    ------
    UsageError
        When it is below (or, for an exclusive minimum, at) the minimum.
    """
    if not option.admits(value):
        raise UsageError(f"backend {spec!r}: option {key}={value!r} must be {option.bound_text()} "
                         f"({option.help})")


def coerce_options(spec: str, cls: type[Backend], raw: dict[str, str]) -> dict[str, Any]:
    """Return ``raw`` converted to the types ``cls.options`` declares, each checked once
    against its choices and minimum.

    Raises
    ------
    UsageError
        For an option the backend does not take (the message lists the ones it does) or a
        value of the wrong type, outside the allowed choices or below the minimum.
    """
    out = {}
    for key, value in raw.items():
        if key not in cls.options:
            known = ", ".join(sorted(cls.options)) or "none"
            raise UsageError(f"backend {spec!r}: unknown option {key!r} (options it takes: {known}; every "
                             f"SPEC also takes {', '.join(COMMON_OPTIONS)})")
        out[key] = _coerce(spec, key, value, cls.options[key])
    return out


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
                         f"{one_line(exc)}") from None


def _from_object(parsed: ParsedSpec, obj: Any, extra: dict[str, Any], companion: Any = None) -> Backend:
    """Return a backend for ``obj``: a Backend subclass, an instance of one, or a callable
    (with its ``companion`` inverse, when the SPEC names one)."""
    from fftgauge.backends.user_function import FunctionBackend, derived_label

    spec = parsed.text
    is_adapter = isinstance(obj, Backend) or (isinstance(obj, type) and issubclass(obj, Backend))
    if companion is not None and (is_adapter or not callable(obj) or not callable(companion)):
        raise UsageError(f"backend {spec!r}: {parsed.attr}+{parsed.companion} pairs two plain functions; "
                         f"{parsed.attr!r} is a {type(obj).__name__}")
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
        name = derived_label(parsed.form, parsed.target, parsed.attr, parsed.companion)
        return _construct(spec, FunctionBackend, obj, name, companion=companion, **opts)
    raise UsageError(f"backend {spec!r}: {parsed.attr or parsed.target!r} is a {type(obj).__name__}, "
                     f"not a callable or a backend adapter")


def _entry_points() -> dict[str, importlib.metadata.EntryPoint]:
    return {ep.name: ep for ep in importlib.metadata.entry_points(group=ENTRY_POINT_GROUP)}


def _builtin_class(spec: str, name: str) -> type[Backend]:
    module_name, class_name, install = BUILTINS[name]
    try:
        module = importlib.import_module(module_name)
    except ImportError as exc:
        raise UsageError(f"backend {spec!r} is not available: {one_line(exc)}; to fix: {install}") from None
    return getattr(module, class_name)


def _unknown_name(name: str, known: list[str]) -> UsageError:
    """Return the error for an unknown backend name, with the closest known names offered."""
    close = difflib.get_close_matches(name, known, n=2, cutoff=0.6)
    hint = f"; did you mean {' or '.join(repr(c) for c in close)}?" if close else ""
    return UsageError(f"unknown backend {name!r}{hint} known backends: {', '.join(known)} "
                      f"(or give module:attr or path/to/file.py:attr)")


def _load(parsed: ParsedSpec, threads: int | None) -> Backend:
    """Return the backend ``parsed`` names, before its label and conventions are applied."""
    from fftgauge.backends.user_code import attribute_of, load_file, import_module

    spec = parsed.text
    if parsed.form in SCHEMES:
        module_name, class_name = SCHEMES[parsed.form]
        cls = getattr(importlib.import_module(module_name), class_name)
        opts = coerce_options(spec, cls, parsed.options)
        return cls.from_spec(spec, parsed.target, **opts)
    if parsed.form == "name":
        if parsed.target in BUILTINS:
            cls = _builtin_class(spec, parsed.target)
            opts = coerce_options(spec, cls, parsed.options)
            extra = _thread_extra(spec, cls, threads, opts)
            return _construct(spec, cls, **{**extra, **opts})
        eps = _entry_points()
        if parsed.target in eps:
            try:
                obj = eps[parsed.target].load()
            except Exception as exc:
                raise UsageError(f"backend {spec!r}: its entry point failed to load: {type(exc).__name__}: "
                                 f"{one_line(exc)}") from None
            return _from_object(parsed, obj, _thread_extra(spec, obj, threads, parsed.options))
        raise _unknown_name(parsed.target, sorted(set(BUILTINS) | set(eps)))
    module = import_module(spec, parsed.target) if parsed.form == "module" else load_file(spec, parsed.target)
    where = f"module {parsed.target!r}" if parsed.form == "module" else f"file {parsed.target!r}"
    obj = attribute_of(spec, module, parsed.attr, where)
    companion = attribute_of(spec, module, parsed.companion, where) if parsed.companion else None
    return _from_object(parsed, obj, _thread_extra(spec, obj, threads, parsed.options), companion)


def load_backend(spec: str, threads: int | None = None) -> Backend:
    """Return the backend adapter a SPEC string names, with its options, label and declared
    conventions applied.

    ``threads``, when given, sets the backend's own thread option (``workers`` for scipy,
    ``threads`` for pyFFTW) unless the SPEC sets it explicitly.

    Raises
    ------
    UsageError
        Unknown name (with the closest known names offered), unknown, mistyped or
        out-of-range option, malformed SPEC, missing file, missing module, failing import,
        an attribute that does not exist or is not callable, or a built-in backend whose
        library is not installed.
    """
    parsed = parse_spec(spec)
    backend = _load(parsed, threads)
    if parsed.label is not None:
        backend.chosen_label = parsed.label
    if parsed.conventions is not None:
        backend.declared_conventions = parsed.conventions
    return backend


def require_unique_labels(labels: Mapping[str, str]) -> None:
    """Check that no two SPECs of one run share a label (``labels`` maps SPEC -> label).

    Raises
    ------
    UsageError
        Naming the first label two SPECs share, and how to tell them apart.
    """
    seen: dict[str, str] = {}
    for spec, label in labels.items():
        if label in seen:
            raise UsageError(f"backends {seen[label]!r} and {spec!r} have the same label {label!r}; give one "
                             f"of them its own with [label=NAME]")
        seen[label] = spec


def _thread_extra(spec: str, cls: Any, threads: int | None, explicit: dict[str, Any]) -> dict[str, Any]:
    """Return ``{thread option: threads}`` for a backend class that declares a thread option.

    Raises
    ------
    UsageError
        When ``threads`` is below the thread option's minimum.
    """
    if threads is None or not (isinstance(cls, type) and issubclass(cls, Backend)):
        return {}
    option = cls.thread_option
    if option is None or option in explicit:
        return {}
    if option in cls.options:
        check_minimum(spec, option, threads, cls.options[option])
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
            infos.append(BackendInfo(name, source, True, None, d.version, d.description,
                                     d.capabilities, d.options))
        except UsageError as exc:
            reason = str(exc).split(" is not available: ", 1)[-1]
            infos.append(BackendInfo(name, source, False, reason, None, None, None, None))
        except Exception as exc:  # a broken third-party adapter must not break the listing
            infos.append(BackendInfo(name, source, False, f"{type(exc).__name__}: {one_line(exc)}",
                                     None, None, None, None))
    return infos
