"""fftgauge's Python API: the same engine as the command line, returning pandas DataFrames.

The engine lives in :mod:`harness` (cases, checks, timing, gate) and the adapters in
:mod:`backends`; this package re-exports what a user's own scripts need.

Examples
--------
>>> import fftgauge
>>> df = fftgauge.check(["numpy"], sizes="1..8", kinds=["fft"], dtypes=["float64"])  # doctest: +SKIP
>>> df.groupby("check")["status"].value_counts()  # doctest: +SKIP
"""

from __future__ import annotations

__version__ = "0.2.0"


def _map_source_folders() -> None:
    """In a source checkout, make ``fftgauge.harness`` and ``fftgauge.backends`` the
    repository-root folders ``harness/`` and ``backends/``.

    An installed wheel holds them inside this package (setuptools ``package-dir``), and
    nothing is changed. Run from a checkout (``python -m pytest`` at the repository root
    puts the root first on ``sys.path``, so this folder is imported, not the installed
    copy), the two folders sit beside this one; the root is added to this package's
    ``__path__`` only when it holds this project's ``pyproject.toml``, so an unrelated
    ``harness/`` next to an installed copy is never picked up.
    """
    import os

    here = os.path.dirname(os.path.abspath(__file__))
    if os.path.isdir(os.path.join(here, "harness")):
        return
    root = os.path.dirname(here)
    try:
        with open(os.path.join(root, "pyproject.toml"), encoding="utf-8") as f:
            ours = 'name = "fftgauge"' in f.read()
    except OSError:
        return
    if ours and all(os.path.isfile(os.path.join(root, d, "__init__.py")) for d in ("harness", "backends")):
        __path__.append(root)  # noqa: F821 - a package's own __path__


_map_source_folders()

from typing import Sequence  # noqa: E402

#: Names this package exports from its sub-modules, imported on first use (PEP 562), so
#: ``import fftgauge`` (and ``fftgauge --help``) stays quick: name -> module holding it.
#: The adapter API (``Backend``, ``Capabilities``, ``Plan``, ...) is what a user's own
#: adapter needs (docs/writing-an-adapter.md).
LAZY_EXPORTS = {
    "Case": "fftgauge.harness.cases",
    "list_backends": "fftgauge.backends.registry",
    "load_backend": "fftgauge.backends.registry",
    "Backend": "fftgauge.backends.base",
    "Plan": "fftgauge.backends.base",
    "FunctionPlan": "fftgauge.backends.base",
    "OptionSpec": "fftgauge.backends.base",
    "OpCount": "fftgauge.backends.base",
    "Capabilities": "fftgauge.backends.claims",
    "SizeRule": "fftgauge.backends.claims",
    "Conventions": "fftgauge.backends.claims",
}

__all__ = ["__version__", "check", *LAZY_EXPORTS]


def __getattr__(name: str):
    """Return an exported name of :data:`LAZY_EXPORTS`, importing its module on first use.

    Raises
    ------
    AttributeError
        For a name this package does not export.
    """
    if name not in LAZY_EXPORTS:
        raise AttributeError(f"module 'fftgauge' has no attribute {name!r}")
    import importlib

    value = getattr(importlib.import_module(LAZY_EXPORTS[name]), name)
    globals()[name] = value
    return value


def __dir__() -> list[str]:
    return sorted(set(globals()) | set(LAZY_EXPORTS))


def check(backends: Sequence[str] | None = None, sizes: str | None = None, kinds=None, dtypes=None,
          norms=None, checks=None, seed: int = 1234, json_path: str | None = None,
          timeout_seconds: float | None = None, threads: int | None = None,
          pure_python_max_n: int | None = None, limits=None, limits_file: str | None = None,
          case_budget_seconds: float | None = None, shapes: str | None = None, layouts=None):
    """Run the correctness battery and return its rows as a pandas DataFrame.

    Parameters mirror ``fftgauge check`` and are validated by the same request builder
    (:func:`fftgauge.harness.battery.request.build_request`), with the same defaults:
    ``backends`` are SPEC strings (default: every available built-in), ``sizes`` uses the
    ``--sizes`` grammar (default ``@default``), ``kinds``/``dtypes``/``norms``/``checks`` are
    lists or comma strings. The full document (envelope and rows) is written to ``json_path``
    when given. ``limits`` are the user's pass criteria instead of the built-in bounds (a mapping
    ``{"accuracy": "8 eps"}`` or ``--limit`` strings), ``limits_file`` a TOML file of them
    (docs/reference.md, "User limits"); the rows record the limit used in ``limit_source``.
    ``shapes`` (the ``--shapes`` grammar) and ``layouts`` run the shaped cases (alone, or
    beside ``sizes`` when both are given; docs/reference.md, "Shaped checks").

    Raises
    ------
    fftgauge.harness.errors.UsageError
        For an unknown backend, a malformed size list, an unknown kind/dtype/check or a bad limit.
    """
    from fftgauge.harness.battery.request import DEFAULT_CASE_TIMEOUT_SECONDS, build_request
    from fftgauge.harness.report.check_tables import rows_frame
    from fftgauge.harness.shapes.battery import run_check_request

    req = build_request(backends=backends, sizes=sizes, kinds=kinds, dtypes=dtypes, norms=norms, checks=checks,
                        seed=seed, threads=threads,
                        timeout_seconds=DEFAULT_CASE_TIMEOUT_SECONDS if timeout_seconds is None else timeout_seconds,
                        pure_python_max_n=pure_python_max_n, limits=limits, limits_file=limits_file,
                        **({} if case_budget_seconds is None else {"case_budget_seconds": case_budget_seconds}),
                        shapes=shapes, layouts=layouts)
    doc = run_check_request(req, json_path=json_path, quiet=True)
    return rows_frame(doc["rows"])
