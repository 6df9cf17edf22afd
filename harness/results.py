"""Results files: the envelope (schema, time, seed, machine, versions), atomic writes and
incremental streaming, and loading with validation.

Every results file is JSON: ``{"schema": ..., "created": ..., "seed": ..., "machine": {...},
"versions": {...}, "rows": [...]}`` (the contracts). Writes go to a temporary file in the
same folder that is then renamed over the target, so a reader never sees half a file and an
interrupted run keeps what it had written.
"""

from __future__ import annotations

import datetime as _dt
import importlib.metadata
import json
import os
import platform
import tempfile
import threading
import time
from typing import Any, Iterable

from fftgauge import __version__
from fftgauge.harness.errors import UsageError


def write_text_atomic(path: str, text: str) -> None:
    """Write ``text`` to ``path`` atomically (temporary file + rename).

    Raises
    ------
    UsageError
        When the folder does not exist or is not writable.
    """
    folder = os.path.dirname(os.path.abspath(path))
    try:
        os.makedirs(folder, exist_ok=True)
        fd, tmp = tempfile.mkstemp(prefix=".fftgauge-", suffix=".tmp", dir=folder)
    except OSError as exc:
        raise UsageError(f"cannot write {path!r}: {exc.strerror}; choose a writable location") from None
    try:
        with os.fdopen(fd, "w", encoding="utf-8") as fh:
            fh.write(text)
        os.replace(tmp, path)
    except BaseException:
        if os.path.exists(tmp):
            os.unlink(tmp)
        raise


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


def envelope(schema: str, seed: int | None, extra: dict[str, Any] | None = None) -> dict[str, Any]:
    """Return a new results envelope (``rows`` empty) for ``schema``."""
    env = {
        "schema": schema,
        "created": _dt.datetime.now(_dt.timezone.utc).strftime("%Y-%m-%dT%H:%M:%SZ"),
        "seed": seed,
        "machine": machine_fingerprint(),
        "versions": library_versions(),
    }
    if extra:
        env.update(extra)
    env["rows"] = []
    return env


def _json_default(obj: Any) -> Any:
    """Turn numpy scalars and other non-JSON values into JSON ones."""
    if hasattr(obj, "item"):
        return obj.item()
    if isinstance(obj, (set, frozenset, tuple)):
        return list(obj)
    return str(obj)


def dumps(doc: dict[str, Any]) -> str:
    """Return ``doc`` as JSON text: the envelope indented, one row per line (numpy scalars
    converted; NaN/Inf written as null)."""
    head = {k: v for k, v in doc.items() if k != "rows"}
    text = json.dumps(_clean(head), indent=1, default=_json_default, allow_nan=False)
    if "rows" not in doc:
        return text + "\n"
    rows = ",\n  ".join(json.dumps(_clean(r), default=_json_default, allow_nan=False) for r in doc["rows"])
    body = f'"rows": [\n  {rows}\n ]' if doc["rows"] else '"rows": []'
    return (text[:-1].rstrip() + (",\n " if head else "\n ") + body + "\n}\n")


def _clean(obj: Any) -> Any:
    if isinstance(obj, float) and (obj != obj or obj in (float("inf"), float("-inf"))):
        return None
    if isinstance(obj, dict):
        return {k: _clean(v) for k, v in obj.items()}
    if isinstance(obj, (list, tuple)):
        return [_clean(v) for v in obj]
    if hasattr(obj, "item") and not isinstance(obj, (str, bytes)):
        return _clean(obj.item())
    return obj


#: A streaming rewrite waits at least this many times the previous rewrite's duration.
REWRITE_SPACING = 20.0


class ResultsWriter:
    """Streams rows into a results file, rewriting it atomically as rows arrive.

    Rewriting the whole file keeps it valid JSON at every moment, so an interrupted run
    leaves a readable file holding every row written so far. To keep long runs from
    spending their time rewriting a growing file, a rewrite happens at most every
    ``min_interval_seconds`` and never sooner than :data:`REWRITE_SPACING` times the last
    rewrite's duration after it (so rewriting costs at most about 1/REWRITE_SPACING of the
    run), and always on :meth:`close`. ``path=None`` keeps rows in memory only. Safe to
    call from several threads.
    """

    def __init__(self, path: str | None, doc: dict[str, Any], min_interval_seconds: float = 1.0):
        self.path = path
        self.doc = doc
        self.min_interval_seconds = min_interval_seconds
        self._lock = threading.Lock()
        self._last_write = 0.0
        self._last_duration = 0.0
        if path:
            self.flush()

    def add(self, rows: Iterable[dict[str, Any]]) -> None:
        """Append ``rows``; rewrite the file if the last rewrite is old enough."""
        with self._lock:
            self.doc["rows"].extend(rows)
            wait = max(self.min_interval_seconds, REWRITE_SPACING * self._last_duration)
            if self.path and time.monotonic() - self._last_write >= wait:
                self._write()

    def flush(self) -> None:
        """Write the document as it stands now."""
        with self._lock:
            if self.path:
                self._write()

    close = flush

    def _write(self) -> None:
        start = time.monotonic()
        write_text_atomic(self.path, dumps(self.doc))
        self._last_write = time.monotonic()
        self._last_duration = self._last_write - start


def load_results(path: str, schema: str | tuple[str, ...]) -> dict[str, Any]:
    """Return the results document at ``path`` after checking its schema.

    Raises
    ------
    UsageError
        When the file is missing, unreadable, not JSON, not a results envelope, or of
        another schema than ``schema``.
    """
    schemas = (schema,) if isinstance(schema, str) else tuple(schema)
    try:
        with open(path, encoding="utf-8") as fh:
            doc = json.load(fh)
    except FileNotFoundError:
        raise UsageError(f"results file {path!r} does not exist; check the path") from None
    except OSError as exc:
        raise UsageError(f"results file {path!r} cannot be read: {exc.strerror}") from None
    except (json.JSONDecodeError, UnicodeDecodeError) as exc:
        raise UsageError(f"results file {path!r} is not valid JSON ({exc}); it may be truncated or "
                         f"corrupt: rerun the command that wrote it") from None
    if not isinstance(doc, dict) or not isinstance(doc.get("rows"), list) or "schema" not in doc:
        raise UsageError(f"results file {path!r} is not an fftgauge results file (no schema/rows)")
    if doc["schema"] not in schemas:
        raise UsageError(f"results file {path!r} has schema {doc['schema']!r}; this command reads "
                         f"{' or '.join(schemas)}")
    return doc
