"""What an instruction count depends on, recorded beside every count and compared before stored
counts are used (:func:`count_fingerprint`, :func:`fingerprint_differences`).

A count does not depend on the machine's load, its clock or its core count, but it does depend
on the code paths taken and on the tools that count:

- ``instruction_set``: the SIMD targets numpy finds *under valgrind* (``numpy.show_config(
  mode="dicts")["SIMD Extensions"]``, its public build and dispatch report), read by a short
  probe run under ``valgrind --tool=none``. Under valgrind a program sees valgrind's CPU, not
  the host's (valgrind 3.19 on an AVX-512 host offers AVX2 at most, found ``X86_V3``), and
  libraries that choose kernels at run time choose from that;
- ``machine`` (the architecture), ``python`` (version and implementation: the interpreter's
  per-call work is in every count);
- ``libraries``: the versions of fftgauge (its per-call wrapper is counted) and of the FFT
  libraries it can drive (:func:`fftgauge.harness.machine.library_versions`);
- ``numpy_build``: numpy's compiler and BLAS build (``show_config``'s ``Compilers`` and
  ``Build Dependencies``);
- ``valgrind``: ``valgrind --version``.

The host's own flags (``/proc/cpuinfo``) are kept in the run's ``counting`` record
(``host_instruction_set``) but not compared: two hosts whose valgrind offers the same CPU count
the same.
"""

from __future__ import annotations

import json
import platform
import subprocess
import sys
from functools import lru_cache
from typing import Any

from fftgauge.harness.errors import UsageError

#: Fingerprint keys compared between a stored count and this run's (all of them).
COUNT_FINGERPRINT_KEYS = ("instruction_set", "machine", "python", "libraries", "numpy_build", "valgrind")

#: The probe run under ``valgrind --tool=none``: prints numpy's SIMD and build report as JSON.
PROBE = """\
import json, numpy
d = numpy.show_config(mode="dicts") or {}
simd = d.get("SIMD Extensions") or {}
comp = (d.get("Compilers") or {}).get("c") or {}
blas = (d.get("Build Dependencies") or {}).get("blas") or {}
print(json.dumps({"instruction_set": {"baseline": list(simd.get("baseline") or []),
                                      "found": list(simd.get("found") or [])},
                  "numpy_build": {"compiler": " ".join(str(comp.get(k, "")) for k in ("name", "version")).strip(),
                                  "blas": " ".join(str(blas.get(k, "")) for k in ("name", "version")).strip()}}))
"""


def probe_argv(valgrind: str) -> list[str]:
    """Return the command line of the probe: this interpreter under ``valgrind --tool=none``."""
    return [valgrind, "--tool=none", "-q", sys.executable, "-s", "-c", PROBE]


@lru_cache(maxsize=None)
def count_fingerprint(valgrind: str, timeout: float = 120.0) -> dict[str, Any]:
    """Return the fingerprint of counts made here with the valgrind at ``valgrind``
    (:data:`COUNT_FINGERPRINT_KEYS`; about 2 s for the probe, once per process).

    Raises
    ------
    UsageError
        When the interpreter cannot run under valgrind (nothing could be counted here).
    """
    from fftgauge.harness.counts.cachegrind import run_environment, valgrind_version
    from fftgauge.harness.machine import library_versions

    try:
        done = subprocess.run(probe_argv(valgrind), env=run_environment(), capture_output=True, text=True,
                              timeout=timeout)
        seen = json.loads(done.stdout.strip().splitlines()[-1]) if done.returncode == 0 else None
    except (OSError, subprocess.SubprocessError, ValueError, IndexError):
        seen = None
    if not isinstance(seen, dict):
        raise UsageError(f"python does not run under valgrind here ({valgrind}): nothing can be counted; "
                         f"check the valgrind install, or use --metric time")
    libraries = {k: v for k, v in library_versions().items() if k != "mpmath"}
    return {"instruction_set": seen.get("instruction_set"), "machine": platform.machine(),
            "python": f"{platform.python_implementation()} {platform.python_version()}",
            "libraries": libraries, "numpy_build": seen.get("numpy_build"), "valgrind": valgrind_version(valgrind)}


def _flat(value: Any, prefix: str) -> dict[str, Any]:
    if isinstance(value, dict):
        out: dict[str, Any] = {}
        for key in sorted(value):
            out.update(_flat(value[key], f"{prefix}.{key}"))
        return out
    return {prefix: value}


def _shown(value: Any) -> str:
    if isinstance(value, list):
        return ",".join(str(v) for v in value) or "none"
    return "none" if value is None else str(value)


def fingerprint_differences(stored: Any, current: dict[str, Any]) -> list[str]:
    """Return ``"key: stored -> current"`` for each :data:`COUNT_FINGERPRINT_KEYS` entry that
    differs (nested keys dotted: ``libraries.numpy: 2.3.0 -> 2.4.6``); a stored run without a
    fingerprint gives the one entry ``no count fingerprint``."""
    if not isinstance(stored, dict) or not stored:
        return ["no count fingerprint (written before counts recorded one, or not a counted run)"]
    old: dict[str, Any] = {}
    new: dict[str, Any] = {}
    for key in COUNT_FINGERPRINT_KEYS:
        old.update(_flat(stored.get(key), key))
        new.update(_flat(current.get(key), key))
    return [f"{k}: {_shown(old.get(k))} -> {_shown(new.get(k))}" for k in sorted(set(old) | set(new))
            if old.get(k) != new.get(k)]
