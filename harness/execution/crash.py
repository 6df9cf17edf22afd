"""Why a job failed, in one line: exception reasons, death reasons, and where the code was.

A worker's child writes :mod:`faulthandler` stacks to a private log file (its standard
error). This module reads that log (:func:`read_log_tail`), parses the dumps
(:func:`crash_stack`, :func:`thread_stack`), names the innermost frame in the user's code
(:func:`user_location`), and turns an exception (:func:`job_failure_reason`) or an exit
status (:func:`death_reason`) into the reason a
:class:`~fftgauge.harness.errors.BackendFailure` carries.
"""

from __future__ import annotations

import os
import re
import signal
import sysconfig
import traceback

#: Longest job exception message kept in a reason, in characters.
MESSAGE_CHARS = 300
#: Signals that mean the backend's code crashed (rather than being killed or aborting).
CRASH_SIGNALS = frozenset({"SIGSEGV", "SIGBUS", "SIGILL", "SIGFPE"})

_STACK_HEADER = re.compile(r"^(?:(?:Current thread|Thread) (?P<ident>0x[0-9a-fA-F]+)|Stack) "
                           r"\(most recent call first\):\s*$")
_STACK_FRAME = re.compile(r'^\s*File "(?P<file>.*)", line (?P<line>\d+) in (?P<name>.*?)\s*$')

Frame = tuple[str, int, str]

#: The user's folder, which file names in reasons are shown relative to by default (set in a
#: worker's child, whose working folder is its scratch folder; None: the working folder).
_USER_FOLDER: list[str | None] = [None]


def set_user_folder(folder: str | None) -> None:
    """Show file names in reasons relative to ``folder`` from now on (None: the working folder)."""
    _USER_FOLDER[0] = folder


# -- text --------------------------------------------------------------------------------------
def one_line(text: object, limit: int = MESSAGE_CHARS) -> str:
    """Return ``text`` with its white space collapsed, cut to ``limit`` characters (``...``)."""
    text = " ".join(str(text).split())
    return text if len(text) <= limit else text[: limit - 3] + "..."


def safe_str(exc: BaseException) -> str:
    """Return ``str(exc)``, or a placeholder when the exception's ``__str__`` itself raises."""
    try:
        return str(exc)
    except Exception:  # noqa: BLE001 - a broken __str__ must not hide the failure
        return f"<{type(exc).__name__} whose message cannot be shown>"


def describe_exception(exc: BaseException) -> str:
    """Return ``"TypeName: message"`` on one line (just the name when the message is empty)."""
    message = one_line(safe_str(exc))
    return f"{type(exc).__name__}: {message}" if message else type(exc).__name__


def gib(nbytes: int) -> str:
    """Return ``nbytes`` in GiB for a reason: ``"0.5 GiB"``, ``"12 GiB"`` (3 significant digits)."""
    return f"{nbytes / 2**30:.3g} GiB"


def memory_cap_text(limit_bytes: int) -> str:
    """Return the reason for a job stopped by the worker's memory cap of ``limit_bytes``."""
    return f"exceeded the memory cap of {gib(limit_bytes)}"


def processes_text(count: int) -> str:
    """Return ``"1 process"`` or ``"N processes"``."""
    return f"{count} process" + ("" if count == 1 else "es")


def leftover_text(count: int) -> str:
    """Return the note for a job that left ``count`` processes it started running."""
    return f"it left {processes_text(count)} running (ended with its worker)"


def ended_text(count: int) -> str:
    """Return the note for a worker that had to end ``count`` processes its backend started."""
    return f"{processes_text(count)} it had started {'was' if count == 1 else 'were'} ended with it"


# -- where the code was ------------------------------------------------------------------------
def engine_dirs() -> tuple[str, ...]:
    """Return the folders whose frames are never 'the user's code': the standard library,
    site-packages and this package's engine (each ending in a path separator)."""
    paths = sysconfig.get_paths()
    dirs = {paths.get(k) for k in ("stdlib", "platstdlib", "purelib", "platlib")}
    dirs.add(os.path.dirname(os.path.dirname(os.path.abspath(__file__))))  # fftgauge.harness
    return tuple(os.path.join(os.path.realpath(d), "") for d in dirs if d)


def show_path(path: str, folder: str | None = None) -> str:
    """Return ``path`` relative to ``folder`` (default: the current folder) when inside it."""
    full = os.path.abspath(path)
    here = os.path.join(folder or _USER_FOLDER[0] or os.getcwd(), "")
    return os.path.relpath(full, here) if full.startswith(here) else path


def user_location(frames: list[Frame], folder: str | None = None) -> str | None:
    """Return ``"file:line in name"`` of the innermost frame in the user's code, or None.

    ``frames`` run from outermost to innermost. The user's code is anything outside the
    standard library, site-packages and :mod:`fftgauge.harness`; when every frame is there,
    the innermost frame is named. Files inside ``folder`` (the user's folder) are shown
    relative to it.
    """
    if not frames:
        return None
    skip = engine_dirs()
    chosen = frames[-1]
    for frame in reversed(frames):
        if not os.path.realpath(frame[0]).startswith(skip) and not frame[0].startswith("<"):
            chosen = frame
            break
    file, line, name = chosen
    return f"{show_path(file, folder)}:{line} in {name}"


def traceback_frames(exc: BaseException) -> list[Frame]:
    """Return the frames of ``exc``'s traceback, outermost first."""
    return [(f.filename, f.lineno or 0, f.name) for f in traceback.extract_tb(exc.__traceback__)]


# -- reasons -----------------------------------------------------------------------------------
def job_failure_reason(exc: BaseException, memory_limit_bytes: int | None = None,
                       folder: str | None = None) -> str:
    """Return the one-line reason for an exception a job raised, with its location.

    A :class:`MemoryError` under a memory cap reads ``"exceeded the memory cap of 0.5 GiB
    (MemoryError: ...) (at file.py:12 in fn)"``; without a cap, ``"ran out of memory
    (MemoryError: ...) ..."``; any other exception ``"ValueError: message (at ...)"``.
    """
    if not isinstance(exc, MemoryError):
        return exception_text(exc, folder)
    where = user_location(traceback_frames(exc), folder)
    message = one_line(safe_str(exc))
    what = memory_cap_text(memory_limit_bytes) if memory_limit_bytes else "ran out of memory"
    return f"{what} (MemoryError{': ' + message if message else ''})" + (f" (at {where})" if where else "")


def exception_text(exc: BaseException, folder: str | None = None) -> str:
    """Return ``"TypeName: message (at file.py:12 in fn)"``: the exception on one line and the
    innermost frame of its traceback in the user's code (no location when it has none).

    For rows and reasons made where a backend's exception is caught (the battery's checks),
    so they name the line as the worker's own reasons do.
    """
    where = user_location(traceback_frames(exc), folder)
    return describe_exception(exc) + (f" (at {where})" if where else "")


def signal_name(number: int) -> str:
    """Return the name of signal ``number`` (``"SIGSEGV"``), or ``"signal N"`` when unknown."""
    try:
        return signal.Signals(number).name
    except ValueError:
        return f"signal {number}"


def death_reason(exitcode: int | None, log: str, during: str, memory_limit_bytes: int | None,
                 cpu_limit_seconds: float | None = None, folder: str | None = None) -> str:
    """Return the one-line reason for a child that died with ``exitcode`` (negative: a signal).

    ``log`` is the child's standard error (faulthandler's crash stack is looked for there),
    ``during`` a phrase such as ``" while loading"`` (or ``""``), ``memory_limit_bytes`` and
    ``cpu_limit_seconds`` the caps in force (None: none).
    """
    if exitcode is not None and exitcode < 0:
        number = -exitcode
        name = signal_name(number)
        if name == "SIGXCPU" and cpu_limit_seconds is not None:
            return (f"used more than its CPU-time limit of {cpu_limit_seconds:g} s{during} "
                    f"(signal {number}, SIGXCPU); killed")
        how = (f"crashed (signal {number}, {name})" if name in CRASH_SIGNALS
               else f"aborted (signal {number}, {name})" if name == "SIGABRT"
               else f"was killed (signal {number}, {name})" if name == "SIGKILL"
               else f"died (signal {number}, {name})")
        frames = crash_stack(log)
        where = user_location(frames, folder) if frames else None
        reason = f"the backend {how}{during}" + (f" at {where}" if where else "")
        if name == "SIGKILL":
            reason += ", perhaps by the system's out-of-memory killer"
        if memory_limit_bytes is not None and name in CRASH_SIGNALS | {"SIGABRT", "SIGKILL"}:
            reason += f" (memory cap {gib(memory_limit_bytes)} in force)"
        return reason
    if exitcode == 0:
        return f"the backend exited (code 0){during or ' in the middle of a job'}"
    reason = f"the backend exited with code {exitcode}{during}"
    last = last_line(log)
    return reason + (f"; its last message: {last}" if last else "")


# -- the child's log ---------------------------------------------------------------------------
def stack_blocks(log: str) -> list[tuple[int | None, list[Frame]]]:
    """Parse faulthandler dumps in ``log``: ``(thread ident or None, frames outermost first)``."""
    blocks: list[tuple[int | None, list[Frame]]] = []
    current: list[Frame] | None = None
    for line in log.splitlines():
        header = _STACK_HEADER.match(line)
        if header:
            ident = int(header.group("ident"), 16) if header.group("ident") else None
            current = []
            blocks.append((ident, current))
            continue
        frame = _STACK_FRAME.match(line) if current is not None else None
        if frame:
            current.append((frame.group("file"), int(frame.group("line")), frame.group("name")))
        else:
            current = None
    return [(ident, list(reversed(frames))) for ident, frames in blocks]


def crash_stack(log: str) -> list[Frame]:
    """Return the frames of the last fatal-error dump (``Stack (most recent call first)``)."""
    stacks = [frames for ident, frames in stack_blocks(log) if ident is None]
    return stacks[-1] if stacks else []


def thread_stack(log: str, ident: int | None) -> list[Frame]:
    """Return the frames of thread ``ident`` in the last all-threads dump in ``log``."""
    for block_ident, frames in reversed(stack_blocks(log)):
        if block_ident is not None and block_ident == ident:
            return frames
    return []


def last_line(log: str) -> str | None:
    """Return the last non-blank line of ``log`` (cut to 200 characters), or None."""
    lines = [line for line in log.splitlines() if line.strip()]
    return one_line(lines[-1], 200) if lines else None


def read_log_tail(path: str | None, nbytes: int = 65536) -> str:
    """Return the last ``nbytes`` of the log at ``path`` as text ("" when unreadable or None)."""
    if path is None:
        return ""
    try:
        with open(path, "rb") as fh:
            fh.seek(0, os.SEEK_END)
            fh.seek(max(0, fh.tell() - nbytes))
            return fh.read().decode("utf-8", "replace")
    except OSError:
        return ""


def truncate_log(path: str | None) -> None:
    """Empty the log at ``path`` (nothing when None or unwritable)."""
    if path is not None:
        try:
            os.truncate(path, 0)
        except OSError:
            pass


def remove_file(path: str) -> None:
    """Remove the file at ``path``, if it is still there. Never raises."""
    try:
        os.unlink(path)
    except OSError:
        pass
