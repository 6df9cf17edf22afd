"""What identifies the machine and the software a result was measured with: the machine
fingerprint (processor, cores, caches, operating system, Python) and the versions of fftgauge
and of the FFT libraries it can drive. Every results envelope carries both
(:func:`fftgauge.harness.results.envelope`)."""

from __future__ import annotations

import importlib.metadata
import os
import platform
from typing import Any

from fftgauge import __version__


def _cpu_model() -> str:
    try:
        with open("/proc/cpuinfo", encoding="utf-8") as fh:
            for line in fh:
                if line.lower().startswith("model name"):
                    return line.split(":", 1)[1].strip()
    except OSError:
        pass
    return platform.processor() or platform.machine()


def _cache_sizes() -> dict[str, str]:
    """Return cache sizes by level from sysfs where the OS exposes them (Linux), else {}."""
    out: dict[str, str] = {}
    base = "/sys/devices/system/cpu/cpu0/cache"
    try:
        for entry in sorted(os.listdir(base)):
            d = os.path.join(base, entry)
            try:
                level = open(os.path.join(d, "level")).read().strip()
                kind = open(os.path.join(d, "type")).read().strip()
                size = open(os.path.join(d, "size")).read().strip()
            except OSError:
                continue
            tag = f"L{level}" + {"Data": "d", "Instruction": "i"}.get(kind, "")
            out[tag] = size
    except OSError:
        pass
    return out


def machine_fingerprint() -> dict[str, Any]:
    """Return what identifies the machine a result was measured on.

    Keys: ``cpu`` (model name), ``cores`` (logical CPUs), ``caches`` (by level, where
    known), ``platform``, ``os``, ``python``, ``hostname_hash`` is deliberately not
    recorded (results files get shared).
    """
    return {
        "cpu": _cpu_model(),
        "cores": os.cpu_count(),
        "caches": _cache_sizes(),
        "machine": platform.machine(),
        "os": f"{platform.system()} {platform.release()}",
        "platform": platform.platform(),
        "python": platform.python_version(),
    }


def _dist_version(name: str) -> str | None:
    try:
        return importlib.metadata.version(name)
    except importlib.metadata.PackageNotFoundError:
        return None


def library_versions() -> dict[str, str | None]:
    """Return the versions of fftgauge and of the FFT libraries it can drive (None if absent)."""
    return {
        "fftgauge": __version__,
        "numpy": _dist_version("numpy"),
        "scipy": _dist_version("scipy"),
        "pyfftw": _dist_version("pyFFTW"),
        "mpmath": _dist_version("mpmath"),
    }
