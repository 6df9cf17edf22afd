"""The last-level cache of this machine and the cold-cache eviction buffer.

Cold-cache timing (:attr:`fftgauge.harness.timing.timer.TimerSettings.cold_cache`) writes a
buffer larger than the last-level cache before every sample, outside the timed region, so
each call starts with its input, output and tables out of cache.
"""

from __future__ import annotations

import glob
import os
from functools import lru_cache

import numpy as np

#: Size of the cold-cache eviction buffer when the last-level cache size is unknown.
FALLBACK_EVICTION_BYTES = 64 * 2**20
#: The eviction buffer is this many times the last-level cache.
EVICTION_FACTOR = 1.5


def parse_cache_size(text: str) -> int | None:
    """Return the bytes of a sysfs cache size such as ``"48K"``, ``"2M"`` or ``"1024"``; None if unreadable."""
    text = text.strip().upper()
    units = {"K": 2**10, "M": 2**20, "G": 2**30}
    try:
        if text and text[-1] in units:
            return int(text[:-1]) * units[text[-1]]
        return int(text)
    except ValueError:
        return None


def last_level_cache_bytes(root: str = "/sys/devices/system/cpu/cpu0/cache") -> int | None:
    """Return the size of the highest-level data or unified cache from sysfs, or ``None``."""
    best: tuple[int, int] | None = None
    for folder in glob.glob(os.path.join(root, "index*")):
        try:
            with open(os.path.join(folder, "level"), encoding="ascii") as fh:
                level = int(fh.read())
            with open(os.path.join(folder, "type"), encoding="ascii") as fh:
                kind = fh.read().strip()
            with open(os.path.join(folder, "size"), encoding="ascii") as fh:
                size = parse_cache_size(fh.read())
        except (OSError, ValueError):
            continue
        if kind in ("Data", "Unified") and size and (best is None or level > best[0]):
            best = (level, size)
    return None if best is None else best[1]


def eviction_bytes() -> int:
    """Return the cold-cache buffer size: 1.5 x the last-level cache, else 64 MiB."""
    llc = last_level_cache_bytes()
    return FALLBACK_EVICTION_BYTES if llc is None else int(EVICTION_FACTOR * llc)


@lru_cache(maxsize=1)
def eviction_buffer(size: int) -> np.ndarray:
    """Return the cold-cache buffer of ``size`` bytes, kept for the next case of the process."""
    return np.zeros(size, dtype=np.uint8)


def evict_caches(size: int | None = None) -> None:
    """Read and write every byte of the eviction buffer (``size`` bytes, default
    :func:`eviction_bytes`), so that every line of the last-level cache is replaced."""
    buffer = eviction_buffer(size or eviction_bytes())
    np.add(buffer, 1, out=buffer)
