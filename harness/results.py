"""Results files: the envelope (schema, time, seed, machine, versions), atomic writes and
incremental streaming, and loading with validation.

Every results file is JSON: ``{"schema": ..., "created": ..., "seed": ..., "machine": {...},
"versions": {...}, "rows": [...]}`` (the contracts). Writes go to a temporary file in the
same folder that is then renamed over the target, so a reader never sees half a file and an
interrupted run keeps what it had written.
"""

from __future__ import annotations

import datetime as _dt
import json
import os
import tempfile
import threading
import time
from typing import Any, Callable, Iterable

from fftgauge.harness.errors import UsageError
from fftgauge.harness.machine import library_versions, machine_fingerprint  # noqa: F401 - re-exported


_UMASK_LOCK = threading.Lock()


def file_mode() -> int:
    """Return the permission bits a new file gets under this process's umask (0o666 & ~umask)."""
    with _UMASK_LOCK:
        mask = os.umask(0o022)
        os.umask(mask)
    return 0o666 & ~mask


def write_text_atomic(path: str, text: str) -> None:
    """Write ``text`` to ``path`` atomically (temporary file + rename); the file's permissions
    follow the umask, as for any file the user creates (a temporary file alone would be 0600).

    Raises
    ------
    UsageError
        When the folder does not exist or is not writable.
    OSError
        When writing fails once the file is open (a full disk: ENOSPC); nothing is left behind.
    """
    folder = os.path.dirname(os.path.abspath(path))
    try:
        os.makedirs(folder, exist_ok=True)
        fd, tmp = tempfile.mkstemp(prefix=".fftgauge-", suffix=".tmp", dir=folder)
    except OSError as exc:
        raise UsageError(f"cannot write {path!r}: {exc.strerror}; choose a writable location") from None
    try:
        os.fchmod(fd, file_mode())
        with os.fdopen(fd, "w", encoding="utf-8") as fh:
            fh.write(text)
        os.replace(tmp, path)
    except BaseException:
        if os.path.exists(tmp):
            os.unlink(tmp)
        raise


def check_output_path(path: str | None, option: str = "--json") -> None:
    """Check, before any work, that ``path`` can be written: not a folder, its folder existing
    (or creatable) and writable. ``None`` and ``-`` (standard output) always pass.

    Raises
    ------
    UsageError
        Naming the path and what is wrong with it.
    """
    if path is None or is_stdout(path):
        return
    if os.path.isdir(path):
        raise UsageError(f"{option} {path!r} is a folder; give a file name, e.g. {os.path.join(path, 'run.json')}")
    if os.path.exists(path) and not os.access(path, os.W_OK):
        raise UsageError(f"{option} {path!r} is not writable; choose a writable location")
    folder = os.path.dirname(os.path.abspath(path))
    existing = folder
    while not os.path.isdir(existing):
        parent = os.path.dirname(existing)
        if parent == existing or (os.path.exists(existing) and not os.path.isdir(existing)):
            raise UsageError(f"{option} {path!r}: {existing!r} is not a folder; choose a writable location")
        existing = parent
    if not os.access(existing, os.W_OK | os.X_OK):
        raise UsageError(f"{option} {path!r}: the folder {existing!r} is not writable; choose a writable location")


#: The ``--json`` (or other output path) value that means standard output.
STDOUT_PATH = "-"


def is_stdout(path: str | None) -> bool:
    """Return True when ``path`` asks for standard output (:data:`STDOUT_PATH`)."""
    return path == STDOUT_PATH


def write_output(path: str, text: str) -> None:
    """Write ``text`` to standard output when ``path`` is ``-``, else atomically to the file
    (:func:`write_text_atomic`, which raises UsageError for an unwritable location)."""
    if is_stdout(path):
        import sys

        sys.stdout.write(text if text.endswith("\n") else text + "\n")
        sys.stdout.flush()
    else:
        write_text_atomic(path, text)


def write_rendered(doc: Any, outputs: Iterable[tuple[str | None, Callable[[Any], str]]]) -> list[str]:
    """Write ``render(doc)`` to each ``path`` of ``outputs`` that is set (``-``: standard
    output); return what was written (``standard output`` for ``-``).

    Every output is attempted even when an earlier one cannot be written.

    Raises
    ------
    UsageError
        After trying all of them, for the first path that could not be written.
    """
    written: list[str] = []
    first_error: UsageError | None = None
    for path, render in outputs:
        if not path:
            continue
        try:
            write_output(path, render(doc))
            written.append("standard output" if is_stdout(path) else path)
        except UsageError as exc:
            first_error = first_error or exc
    if first_error is not None:
        raise first_error
    return written


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
    if "schema" in head and "complete" not in head:
        head["complete"] = True  # a document written in one go is complete; a stream says so itself
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


class ResultsWriteError(UsageError):
    """The results file could not be written during or at the end of a run (a full disk, a
    folder that went away). The message names the path and where the rows were kept
    instead; ``doc`` holds the whole document (every row) in memory."""

    def __init__(self, message: str, doc: dict[str, Any]):
        super().__init__(message)
        self.doc = doc


def fallback_path(path: str) -> str:
    """Return where the rows go when ``path`` cannot be written: a file of the same name in
    the system's temporary folder (with this process's id, so runs do not overwrite each other)."""
    stem, ext = os.path.splitext(os.path.basename(path) or "results.json")
    return os.path.join(tempfile.gettempdir(), f"{stem}-{os.getpid()}{ext or '.json'}")


class ResultsWriter:
    """Streams rows into a results file, rewriting it atomically as rows arrive.

    Rewriting the whole file keeps it valid JSON at every moment, so an interrupted run
    leaves a readable file holding every row written so far; until :meth:`close` says
    otherwise the envelope says ``"complete": false``. To keep long runs from
    spending their time rewriting a growing file, a rewrite happens at most every
    ``min_interval_seconds`` and never sooner than :data:`REWRITE_SPACING` times the last
    rewrite's duration after it (so rewriting costs at most about 1/REWRITE_SPACING of the
    run), and always on :meth:`close`. ``path=None`` keeps rows in memory only; ``path="-"``
    writes the document to standard output once, on :meth:`close`. A write that fails (a
    full disk) stops the rewrites but keeps every row in memory; :meth:`close` then writes
    them to :func:`fallback_path` and raises :class:`ResultsWriteError`. Safe to call from
    several threads.
    """

    def __init__(self, path: str | None, doc: dict[str, Any], min_interval_seconds: float = 1.0,
                 writer: Any = None):
        self.path = path
        self.doc = doc
        self.min_interval_seconds = min_interval_seconds
        #: The function that writes a file: ``writer(path, text)`` (a test passes a failing one).
        self.writer = writer or write_text_atomic
        #: The OSError that stopped the rewrites, or None.
        self.error: OSError | None = None
        self._lock = threading.Lock()
        self._last_write = 0.0
        self._last_duration = 0.0
        doc["complete"] = False
        if self._streams():
            self.flush()

    def _streams(self) -> bool:
        return bool(self.path) and not is_stdout(self.path) and self.error is None

    def add(self, rows: Iterable[dict[str, Any]]) -> None:
        """Append ``rows``; rewrite the file if the last rewrite is old enough."""
        with self._lock:
            self.doc["rows"].extend(rows)
            wait = max(self.min_interval_seconds, REWRITE_SPACING * self._last_duration)
            if self._streams() and time.monotonic() - self._last_write >= wait:
                self._write()

    def flush(self) -> None:
        """Write the document as it stands now (unless an earlier write failed)."""
        with self._lock:
            if self._streams():
                self._write()

    def close(self, complete: bool = True) -> None:
        """Write the final document, marked ``complete`` (False: the run was cut short).

        Raises
        ------
        ResultsWriteError
            When the file could not be written (now or during the run): the message names
            the path, the error and the fallback file holding the rows (or why there is none).
        """
        with self._lock:
            self.doc["complete"] = bool(complete)
            if self.path and is_stdout(self.path):
                write_output(self.path, dumps(self.doc))
                return
            if self._streams():
                self._write()
            if self.error is None or not self.path:
                return
            reason = self.error.strerror or str(self.error)
            spare = fallback_path(self.path)
            try:
                write_text_atomic(spare, dumps(self.doc))
                kept = f"the {len(self.doc['rows'])} rows are kept in {spare}"
            except (OSError, UsageError) as exc:
                kept = f"the rows could not be kept in {spare} either ({getattr(exc, 'strerror', None) or exc})"
            raise ResultsWriteError(f"could not write the results to {self.path!r}: {reason}; {kept}", self.doc)

    def _write(self) -> None:
        start = time.monotonic()
        try:
            self.writer(self.path, dumps(self.doc))
        except OSError as exc:
            self.error = exc
            return
        self._last_write = time.monotonic()
        self._last_duration = self._last_write - start


# --------------------------------------------------------------------------- loading and validation

#: Largest results file that is read, in bytes (a check run of every size set and backend is a
#: few MB; the cap keeps a hostile path, such as a link to /dev/zero, from exhausting memory).
MAX_RESULTS_BYTES = 128 * 2**20

#: Deepest nesting of JSON arrays and objects a results file may hold (fftgauge writes at most
#: about 4 levels); deeper files are refused before parsing, so no RecursionError can occur.
MAX_JSON_DEPTH = 64

TIME_SCHEMA, CHECK_SCHEMA, GATE_SCHEMA = "fftgauge-time/1", "fftgauge-check/1", "fftgauge-gate/1"

#: Row fields every row of a schema holds (fftgauge always writes them).
REQUIRED_ROW_FIELDS = {
    TIME_SCHEMA: ("backend", "kind", "dtype", "n", "seconds"),
    CHECK_SCHEMA: ("backend", "kind", "dtype", "n", "check", "status"),
    GATE_SCHEMA: ("backend", "kind", "dtype", "n"),
}

#: The statuses a row of each schema may carry (the contracts; time and gate rows add ``ok``).
ROW_STATUSES = {
    TIME_SCHEMA: ("ok", "skip", "error"),
    CHECK_SCHEMA: ("pass", "fail", "error", "skip"),
}

#: Numeric row fields that are durations or sizes: a finite number >= 0, or null.
NONNEGATIVE_FIELDS = ("seconds", "seconds_low", "seconds_high", "plan_seconds", "seconds_p10", "seconds_p10_low",
                      "seconds_p10_high", "overhead_seconds", "floor_seconds", "flops", "gflops", "ns_per_nlogn",
                      "peak_bytes", "ratio", "ratio_low", "ratio_high", "limit", "eps_units", "coverage",
                      "relative_spread", "host_to_device_seconds", "device_to_host_seconds", "host_to_device_bytes",
                      "device_to_host_bytes")

#: Other numeric row fields: a finite number, or null.
NUMBER_FIELDS = ("value", "p_value")

#: Row fields that hold text, or null.
TEXT_FIELDS = ("backend", "check", "message", "diagnosis", "status", "verdict", "reference", "timing_source",
               "memory_method")

#: Integer row fields that count something (>= 1 for ``n`` and ``threads``, >= 0 otherwise), or null.
COUNT_FIELDS = ("samples", "loops", "threads")

#: Envelope fields and the JSON types they may hold (null is always allowed).
ENVELOPE_TYPES = {"created": (str,), "seed": (int,), "machine": (dict,), "versions": (dict,), "note": (str,),
                  "commit": (str,), "complete": (bool,), "regressed": (bool,), "backends": (dict,),
                  "yardstick": (dict,)}

_JSON_TYPE_NAMES = {dict: "an object", list: "an array", str: "a string", bool: "true/false", int: "an integer",
                    float: "a number", type(None): "null"}


def _type_name(value: Any) -> str:
    return _JSON_TYPE_NAMES.get(type(value), type(value).__name__)


def read_results_text(path: str) -> str:
    """Return the text of the results file at ``path``: a regular file of at most
    :data:`MAX_RESULTS_BYTES`, in UTF-8.

    Raises
    ------
    UsageError
        When the path does not exist, is not a regular file (a directory, a device such as
        /dev/zero, a pipe; links are followed), is larger than the cap, cannot be read, or is
        not UTF-8.
    """
    import stat

    try:
        info = os.stat(path)
    except FileNotFoundError:
        raise UsageError(f"results file {path!r} does not exist; check the path") from None
    except OSError as exc:
        raise UsageError(f"results file {path!r} cannot be read: {exc.strerror}") from None
    if not stat.S_ISREG(info.st_mode):
        what = "a directory" if stat.S_ISDIR(info.st_mode) else "a device, pipe or socket"
        raise UsageError(f"results file {path!r} is {what}, not a regular file; pass a results file written by "
                         f"fftgauge")
    try:
        with open(path, "rb") as fh:
            if not stat.S_ISREG(os.fstat(fh.fileno()).st_mode):
                raise UsageError(f"results file {path!r} is not a regular file; pass a results file written by "
                                 f"fftgauge")
            data = fh.read(MAX_RESULTS_BYTES + 1)
    except OSError as exc:
        raise UsageError(f"results file {path!r} cannot be read: {exc.strerror}") from None
    if len(data) > MAX_RESULTS_BYTES:
        raise UsageError(f"results file {path!r} is larger than {MAX_RESULTS_BYTES:,} bytes, more than any "
                         f"fftgauge run writes; pass a results file written by fftgauge")
    try:
        return data.decode("utf-8")
    except UnicodeDecodeError as exc:
        raise UsageError(f"results file {path!r} is not valid JSON ({exc}); it may be truncated or corrupt: "
                         f"rerun the command that wrote it") from None


def json_depth(text: str, limit: int = MAX_JSON_DEPTH) -> int:
    """Return the nesting depth of arrays and objects in the JSON ``text`` (0 for a scalar),
    counting at most to ``limit + 1`` (the scan stops there).

    Brackets inside strings do not count. Malformed text gives some depth; the parser
    reports what is wrong with it.
    """
    import re

    brackets = re.sub(r"[^\[\]{}]+", "", re.sub(r'"[^"\\]*(?:\\.[^"\\]*)*"', '""', text))
    depth = deepest = 0
    for char in brackets:
        if char in "[{":
            depth += 1
            if depth > deepest:
                deepest = depth
                if deepest > limit:
                    break
        else:
            depth -= 1
    return deepest


def _row_problem(row: dict[str, Any], schema: str) -> tuple[str, str] | None:
    """Return (field, what is wrong) for the first impossible field of ``row``, or None."""
    from fftgauge.harness.cases import DTYPES, KINDS, NORMS

    missing = [f for f in REQUIRED_ROW_FIELDS[schema] if f not in row]
    if missing:
        return missing[0], f"is missing (the row lacks {', '.join(missing)})"
    for name in TEXT_FIELDS:
        if row.get(name) is not None and not isinstance(row[name], str):
            return name, f"is {_type_name(row[name])}, not text"
    if not row["backend"]:
        return "backend", "is empty"
    from fftgauge.harness.shapes.case import SHAPE_KINDS  # rows of shaped cases (fftn, ...)

    if row["kind"] not in KINDS and not (row.get("shape") and row["kind"] in SHAPE_KINDS):
        return "kind", f"is {row['kind']!r}, not one of {', '.join(KINDS)}"
    if row["dtype"] not in DTYPES:
        return "dtype", f"is {row['dtype']!r}, not one of {', '.join(DTYPES)}"
    if (row.get("norm") or "backward") not in NORMS:
        return "norm", f"is {row['norm']!r}, not one of {', '.join(NORMS)}"
    n = row["n"]
    if not isinstance(n, int) or isinstance(n, bool) or n < 1:
        return "n", f"is {n!r}; a transform length is a positive integer"
    statuses = ROW_STATUSES.get(schema)
    if statuses and row.get("status") is not None and row["status"] not in statuses:
        return "status", f"is {row['status']!r}, not one of {', '.join(statuses)}"
    for name in COUNT_FIELDS:
        value = row.get(name)
        if value is not None and (not isinstance(value, int) or isinstance(value, bool)
                                  or value < (1 if name == "threads" else 0)):
            return name, f"is {value!r}; a count is a non-negative integer"
    for name in NONNEGATIVE_FIELDS + NUMBER_FIELDS:
        value = row.get(name)
        if value is None:
            continue
        if not isinstance(value, (int, float)) or isinstance(value, bool):
            return name, f"is {_type_name(value)}, not a number"
        if value != value or value in (float("inf"), float("-inf")):
            return name, f"is {value!r}; fftgauge writes only finite numbers (null where there is none)"
        if name in NONNEGATIVE_FIELDS and value < 0:
            return name, f"is {value!r}; it cannot be negative"
    return None


def validate_results(path: str, doc: Any, schemas: tuple[str, ...]) -> None:
    """Check that ``doc``, read from ``path``, is a results document of one of ``schemas``
    whose envelope fields and rows have the types and values fftgauge writes.

    Raises
    ------
    UsageError
        Naming the file and the field: not an envelope, another schema, an envelope field
        of the wrong type (``machine`` a string), a row that is not an object, lacks a
        field or holds an impossible value (``n`` not a positive integer, a negative or
        non-finite time, an unknown kind, precision, norm or status).
    """
    if not isinstance(doc, dict) or not isinstance(doc.get("rows"), list) or "schema" not in doc:
        raise UsageError(f"results file {path!r} is not an fftgauge results file (no schema/rows)")
    if doc["schema"] not in schemas:
        raise UsageError(f"results file {path!r} has schema {doc['schema']!r}; this command reads "
                         f"{' or '.join(schemas)}")
    for name, types in ENVELOPE_TYPES.items():
        value = doc.get(name)
        if value is not None and (not isinstance(value, types) or (bool not in types and isinstance(value, bool))):
            wanted = " or ".join(_JSON_TYPE_NAMES[t] for t in types)
            raise UsageError(f"results file {path!r}: field {name!r} is {_type_name(value)}, expected {wanted}; "
                             f"the file is corrupt or was edited")
    machine = doc.get("machine") or {}
    for name, types in (("cpu", (str,)), ("cores", (int,)), ("caches", (dict,))):
        value = machine.get(name)
        if value is not None and (not isinstance(value, types) or isinstance(value, bool)):
            raise UsageError(f"results file {path!r}: field 'machine.{name}' is {_type_name(value)}, expected "
                             f"{_JSON_TYPE_NAMES[types[0]]}; the file is corrupt or was edited")
    schema = doc["schema"]
    if schema not in REQUIRED_ROW_FIELDS:
        return
    for i, row in enumerate(doc["rows"]):
        if not isinstance(row, dict):
            raise UsageError(f"results file {path!r}: row {i} is {_type_name(row)}, not an object; the file is "
                             f"corrupt")
        problem = _row_problem(row, schema)
        if problem:
            raise UsageError(f"results file {path!r}: row {i} field {problem[0]!r} {problem[1]}; the file is "
                             f"corrupt or was edited")


def load_results(path: str, schema: str | tuple[str, ...]) -> dict[str, Any]:
    """Return the results document at ``path`` after checking the file and its content.

    The one loader of results files (``report``, ``gate --baseline``): a regular file
    (:func:`read_results_text`), nested at most :data:`MAX_JSON_DEPTH` deep, of one of the
    schemas ``schema``, with the field types :func:`validate_results` checks.

    Raises
    ------
    UsageError
        One line naming the file (and the field, where one is wrong): missing, not a
        regular file, too large, unreadable, not JSON, nested too deeply, not a results
        envelope, another schema, or a field of the wrong type or an impossible value.
    """
    schemas = (schema,) if isinstance(schema, str) else tuple(schema)
    text = read_results_text(path)
    if json_depth(text) > MAX_JSON_DEPTH:
        raise UsageError(f"results file {path!r} nests arrays or objects more than {MAX_JSON_DEPTH} levels deep; "
                         f"fftgauge writes no such file: pass a results file written by fftgauge")
    try:
        doc = json.loads(text)
    except json.JSONDecodeError as exc:
        raise UsageError(f"results file {path!r} is not valid JSON ({exc}); it may be truncated or "
                         f"corrupt: rerun the command that wrote it") from None
    except RecursionError:
        raise UsageError(f"results file {path!r} nests too deeply to read; pass a results file written by "
                         f"fftgauge") from None
    validate_results(path, doc, schemas)
    return doc


def incomplete_note(path: str, doc: dict[str, Any]) -> str | None:
    """Return a one-line note when the envelope of ``doc`` (read from ``path``) says the run did
    not complete (``"complete": false``: interrupted or stopped), else None."""
    if doc.get("complete") is False:
        return (f"{path} is from a run that did not complete (it was interrupted): it holds only the cases "
                f"that finished")
    return None
