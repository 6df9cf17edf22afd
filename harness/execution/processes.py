"""Finding and ending every process a backend started, so none outlives its worker.

A worker's child leads a session (and so a process group) of its own, marks itself a *child
subreaper* on Linux (:func:`become_subreaper`: an orphaned descendant, a daemon that forked
twice and called ``setsid`` included, is re-parented to it instead of to init), and puts a
token in its environment that every descendant inherits (:data:`TOKEN_VARIABLE`). The parent
finds them all with :func:`worker_processes` (the child's descendants, then any process
still carrying the token: those the child could no longer hold after it died) and ends them
with :func:`end_processes`.
"""

from __future__ import annotations

import ctypes
import ctypes.util
import os
import signal
import sys
import time

import psutil

#: Environment variable holding the worker's token in its child and every descendant.
TOKEN_VARIABLE = "FFTGAUGE_WORKER_TOKEN"
#: ``prctl`` option that makes the calling process a child subreaper (linux/prctl.h).
PR_SET_CHILD_SUBREAPER = 36
#: Seconds :func:`end_processes` waits for the processes it killed to be gone.
REAP_WAIT_SECONDS = 2.0


def become_subreaper() -> bool:
    """Make this process a child subreaper (Linux ``prctl(PR_SET_CHILD_SUBREAPER, 1)``).

    Returns True when it worked, False elsewhere (not Linux, no libc, the call refused).
    """
    if not sys.platform.startswith("linux"):
        return False
    try:
        libc = ctypes.CDLL(ctypes.util.find_library("c") or "libc.so.6", use_errno=True)
        return libc.prctl(PR_SET_CHILD_SUBREAPER, 1, 0, 0, 0) == 0
    except (OSError, AttributeError):
        return False


def _children_from_proc(pid: int) -> list[int] | None:
    """Return ``pid``'s children from ``/proc/PID/task/*/children``, or None where unreadable."""
    try:
        tasks = os.listdir(f"/proc/{pid}/task")
    except OSError:
        return None
    out: list[int] = []
    for tid in tasks:
        try:
            with open(f"/proc/{pid}/task/{tid}/children") as fh:
                out.extend(int(p) for p in fh.read().split())
        except FileNotFoundError:  # the thread ended meanwhile
            continue
        except OSError:
            return None
    return out


def _is_zombie(pid: int) -> bool:
    try:
        return psutil.Process(pid).status() == psutil.STATUS_ZOMBIE
    except psutil.Error:
        return True  # gone: nothing running


def descendant_pids(pid: int, running_only: bool = True) -> set[int]:
    """Return the pids of every process below ``pid`` (children, their children, ...).

    On Linux this reads ``/proc`` (a few files, no scan of every process); elsewhere it asks
    psutil. With ``running_only``, zombies (ended, not yet reaped) are left out. A process
    that has gone has no descendants (an empty set).
    """
    found: set[int] = set()
    todo = [pid]
    while todo:
        parent = todo.pop()
        kids = _children_from_proc(parent)
        if kids is None:
            try:
                kids = [p.pid for p in psutil.Process(parent).children()]
            except psutil.Error:
                kids = []
        for kid in kids:
            if kid not in found:
                found.add(kid)
                todo.append(kid)
    if running_only:
        found = {p for p in found if not _is_zombie(p)}
    return found


def tagged_processes(token: str) -> list[psutil.Process]:
    """Return this user's running processes whose environment holds ``TOKEN_VARIABLE=token``."""
    out = []
    me = os.getuid() if hasattr(os, "getuid") else None
    for proc in psutil.process_iter(["uids"]):
        try:
            uids = proc.info.get("uids")
            if me is not None and uids is not None and uids.real != me:
                continue
            if proc.environ().get(TOKEN_VARIABLE) == token and proc.status() != psutil.STATUS_ZOMBIE:
                out.append(proc)
        except (psutil.Error, OSError):
            continue
    return out


def worker_processes(child_pid: int | None, token: str | None, known: set[int] = frozenset()
                     ) -> list[psutil.Process]:
    """Return the processes a worker's child started that are still running (never the child).

    ``child_pid`` is the child (alive or not; None: no child), ``token`` the worker's
    environment token (None: not looked for), ``known`` pids the child reported earlier.
    Found as: the child's descendants, ``known`` pids still running with the token, and any
    process of this user carrying the token (only searched when the child has died, when its
    orphans may have gone to init). Whether it died is asked again after its descendants were
    read: a child that ends meanwhile hands its orphans to init, out of the tree just read.
    """
    procs: dict[int, psutil.Process] = {}
    child_alive = _running(child_pid)
    pids = descendant_pids(child_pid) if child_alive else set()
    child_alive = child_alive and _running(child_pid)
    for pid in pids | set(known):
        try:
            proc = psutil.Process(pid)
            if pid in pids or (token is not None and proc.environ().get(TOKEN_VARIABLE) == token):
                procs[pid] = proc
        except (psutil.Error, OSError):
            continue
    if token is not None and not child_alive:
        for proc in tagged_processes(token):
            procs.setdefault(proc.pid, proc)
    procs.pop(child_pid, None)
    procs.pop(os.getpid(), None)
    return list(procs.values())


def _running(pid: int | None) -> bool:
    """Return True when process ``pid`` exists and is no zombie (False for None)."""
    return pid is not None and psutil.pid_exists(pid) and not _is_zombie(pid)


def end_processes(procs: list[psutil.Process]) -> int:
    """Send SIGKILL to every process in ``procs`` that still runs; do not wait.

    Returns how many were still running and were sent the signal. Never raises.
    """
    killed = 0
    for proc in procs:
        try:
            if proc.is_running() and proc.status() != psutil.STATUS_ZOMBIE:
                proc.send_signal(signal.SIGKILL)
                killed += 1
        except (psutil.Error, OSError):
            continue
    return killed


def end_descendants(pid: int) -> int:
    """Send SIGKILL to every running descendant of ``pid``; return how many. Never raises."""
    procs = []
    for kid in descendant_pids(pid):
        try:
            procs.append(psutil.Process(kid))
        except psutil.Error:
            continue
    return end_processes(procs)


def wait_gone(procs: list[psutil.Process], timeout_seconds: float = REAP_WAIT_SECONDS) -> bool:
    """Wait up to ``timeout_seconds`` until every process in ``procs`` has gone (a zombie
    counts as gone: it runs nothing). Returns True when all have. Never raises."""
    deadline = time.monotonic() + timeout_seconds
    left = list(procs)
    while left:
        left = [p for p in left if p.pid != os.getpid() and not _gone(p)]
        if not left or time.monotonic() >= deadline:
            break
        time.sleep(0.02)
    return not left


def _gone(proc: psutil.Process) -> bool:
    try:
        return not proc.is_running() or proc.status() == psutil.STATUS_ZOMBIE
    except (psutil.Error, OSError):
        return True


def kill_group(pgid: int | None) -> None:
    """Send SIGKILL to process group ``pgid`` (nothing when None, gone, or not ours). Never raises."""
    if pgid is None or not hasattr(os, "killpg"):
        return
    try:
        os.killpg(pgid, signal.SIGKILL)
    except (ProcessLookupError, PermissionError, OSError):
        pass
