"""Loading the user's own code a SPEC names: a module from the environment, or a Python
file from a path, with the file's folder first on the import path (so a backend file can
import the modules beside it, in the parent and in every worker alike)."""

from __future__ import annotations

import importlib
import importlib.util
import os
import re
import sys
from types import ModuleType
from typing import Any

from fftgauge.harness.errors import UsageError


def _one_line(text: Any) -> str:
    return " ".join(str(text).split())


def import_module(spec: str, module: str) -> ModuleType:
    """Return the module named ``module``, imported.

    Raises
    ------
    UsageError
        When it does not exist, or importing it raises (the message names the error).
    """
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


def put_folder_first(folder: str) -> None:
    """Put ``folder`` first on :data:`sys.path` (moving it there when it is already on it)."""
    while folder in sys.path:
        sys.path.remove(folder)
    sys.path.insert(0, folder)


def load_file(spec: str, path: str) -> ModuleType:
    """Return the module a Python file holds, run once per process; its folder goes first on
    :data:`sys.path` before it runs, so ``import neighbour`` in it finds ``neighbour.py``.

    Raises
    ------
    UsageError
        When the file does not exist, cannot be loaded as Python source, or raises while it runs.
    """
    full = os.path.abspath(os.path.expanduser(path))
    if not os.path.isfile(full):
        raise UsageError(f"backend {spec!r}: no file {path!r}; check the path (relative paths start "
                         f"from the current folder)")
    put_folder_first(os.path.dirname(full))
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


def attribute_of(spec: str, module: ModuleType, attr: str, where: str) -> Any:
    """Return ``module.attr``.

    Raises
    ------
    UsageError
        When the module has no such attribute (``where`` names the module or file).
    """
    if not hasattr(module, attr):
        raise UsageError(f"backend {spec!r}: {where} has no attribute {attr!r}")
    return getattr(module, attr)
