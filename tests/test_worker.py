"""Tests for fftgauge.harness.execution.worker: untrusted backends run in a child process.

Every misbehaving backend (tests/data/misbehaving.py, loaded in the child only) must come
back as a BackendFailure with a reason that says what happened, and the worker must go on
running good jobs afterwards. Every test also checks that it leaves no worker process
behind (the ``no_leftover_children`` fixture, with psutil). Timeouts are short (2 s) and
their timing is never asserted, only that the call returns with the right reason.
"""

from __future__ import annotations

import multiprocessing
import os
import re
import signal
import subprocess
import sys
import textwrap
import threading
import time

import numpy as np
import psutil
import pytest

from fftgauge.harness.execution import jobs
from fftgauge.harness.cases import Case
from fftgauge.harness.errors import BackendFailure, UnsupportedCase, UsageError
from fftgauge.harness.execution.worker import Worker, run_jobs

HERE = os.path.dirname(os.path.abspath(__file__))
ROOT = os.path.dirname(HERE)
MISBEHAVING = os.path.join(HERE, "data", "misbehaving.py")
PLAN = jobs.plan_and_execute
DESCRIBE = jobs.describe_backend
REASON = jobs.unsupported_reason
TIMEOUT_SECONDS = 30.0
SHORT_TIMEOUT_SECONDS = 2.0
FFT8 = Case("fft", "float64", 8)


def spec(attr: str) -> str:
    """The file SPEC of one misbehaving backend."""
    return f"{MISBEHAVING}:{attr}"


def signal_x(n: int) -> np.ndarray:
    """A reproducible complex test signal of length n."""
    rng = np.random.default_rng(n)
    return rng.standard_normal(n) + 1j * rng.standard_normal(n)


def as_dict(described) -> dict:
    """A backend's description as a dict (``describe()`` returns a dataclass with ``as_dict``)."""
    return described.as_dict() if hasattr(described, "as_dict") else described


def worker_children() -> set[int]:
    """Pids of every process below this one (zombies included), except multiprocessing's
    long-lived helpers: the resource tracker and the fork server (direct children that
    live until the test session ends; the fork server's own children are counted)."""
    me = os.getpid()
    pids = set()
    for child in psutil.Process().children(recursive=True):
        try:
            helper = child.ppid() == me and any("resource_tracker" in part or "forkserver" in part
                                                for part in child.cmdline())
            if not helper:
                pids.add(child.pid)
        except psutil.ZombieProcess:
            pids.add(child.pid)
        except psutil.NoSuchProcess:
            pass
    return pids


@pytest.fixture(autouse=True)
def no_leftover_children():
    """Fail a test that leaves a worker process (or a zombie) behind."""
    before = worker_children()
    yield
    left = worker_children() - before
    assert not left, f"worker processes left behind: {sorted(left)}"


@pytest.fixture(scope="module")
def numpy_worker():
    """One worker on the numpy backend, shared by the tests that only run good jobs."""
    worker = Worker("numpy")
    worker.call(DESCRIBE, timeout_seconds=TIMEOUT_SECONDS)  # start it before any test's check
    yield worker
    worker.close()


# -- good jobs -----------------------------------------------------------------------------
@pytest.mark.parametrize("kind", ["fft", "ifft", "rfft", "irfft"])
@pytest.mark.parametrize("dtype", ["float32", "float64"])
def test_jobs_return_numpy_arrays(numpy_worker, kind, dtype):
    """The output crosses the pipe bit for bit. Reference: numpy.fft (the reference library
    check-values.md lists as an independent double-precision implementation), run here in
    the test process on the same input."""
    case = Case(kind, dtype, 12)
    x = signal_x(case.input_length).astype(case.complex_dtype)
    if kind == "rfft":
        x = x.real.astype(case.real_dtype)
    y = numpy_worker.call(PLAN, case, x, timeout_seconds=TIMEOUT_SECONDS)
    expected = getattr(np.fft, kind)(x, n=12)
    assert isinstance(y, np.ndarray)
    assert y.dtype == expected.dtype and y.shape == expected.shape
    np.testing.assert_array_equal(y, expected)


def test_backend_is_loaded_once_per_child(numpy_worker):
    """Many jobs, one child: same pid, one start, and a case given as a tuple works too."""
    pid = numpy_worker.pid
    for n in (1, 2, 5, 64):
        y = numpy_worker.call(PLAN, ("fft", "float64", n), signal_x(n), timeout_seconds=TIMEOUT_SECONDS)
        np.testing.assert_array_equal(y, np.fft.fft(signal_x(n)))
    assert numpy_worker.pid == pid and numpy_worker.starts == 1


def test_describe_and_unsupported_reason_jobs():
    with Worker(spec("SelectiveBackend")) as worker:
        described = as_dict(worker.call(DESCRIBE, timeout_seconds=TIMEOUT_SECONDS))
        assert described["name"] == "selective"
        assert described["capabilities"]["kinds"] == ["fft"]
        assert worker.call(REASON, FFT8, timeout_seconds=TIMEOUT_SECONDS) is None
        why = worker.call(REASON, Case("rfft", "float64", 8), timeout_seconds=TIMEOUT_SECONDS)
        assert "does not compute rfft" in why


# -- misbehaving backends ------------------------------------------------------------------
LOCATION = r"misbehaving\.py:\d+ in "

#: (callable in tests/data/misbehaving.py, reason pattern, the child must be replaced, Worker kwargs)
MISBEHAVIOURS = [
    ("abort_fft", r"^the backend aborted \(signal 6, SIGABRT\) at .*" + LOCATION + "abort_fft$", True, {}),
    ("segfault_fft", r"^the backend crashed \(signal 11, SIGSEGV\) at .*" + LOCATION + "segfault_fft$",
     True, {}),
    ("hang_fft", r"^did not finish within 2 s; killed \(it was at .*" + LOCATION + r"hang_fft\)$", True, {}),
    ("busy_fft", r"^did not finish within 2 s; killed", True, {}),
    ("exit_fft", r"^the backend exited with code 3$", True, {}),
    ("raise_fft", r"^ValueError: this backend refuses every input \(at .*" + LOCATION + r"raise_fft\)$",
     False, {}),
    ("hog_fft", r"^exceeded the memory cap of 4 GiB \(MemoryError: .*\) \(at .*" + LOCATION + r"hog_fft\)$",
     False, {"memory_limit_bytes": 4 * 2**30}),
    ("hog_fft", r"^ran out of memory \(MemoryError: .*\) \(at .*" + LOCATION + r"hog_fft\)$",
     False, {"memory_limit_bytes": None}),
    ("none_fft", r"^the backend returned None, not an array$", False, {}),
    ("objects_fft", r"^the backend returned (a list|an array) of dtype <U7, not an array of numbers$", False, {}),
    ("unpicklable_error_fft", r"^_Unpicklable: code 17: an error that cannot be pickled \(at .*"
     + LOCATION + r"unpicklable_error_fft\)$", False, {}),
    ("unprintable_error_fft", r"^_Unprintable: <_Unprintable whose message cannot be shown>", False, {}),
]


@pytest.mark.parametrize("attr, pattern, replaced, kwargs", MISBEHAVIOURS,
                         ids=[m[0] + ("-uncapped" if m[3].get("memory_limit_bytes", 0) is None else "")
                              for m in MISBEHAVIOURS])
def test_misbehaving_backend_gives_reason_and_worker_goes_on(attr, pattern, replaced, kwargs):
    with Worker(spec(attr), **kwargs) as worker:
        with pytest.raises(BackendFailure, match=pattern) as info:
            worker.call(PLAN, FFT8, signal_x(8), timeout_seconds=SHORT_TIMEOUT_SECONDS)
        assert "\n" not in str(info.value)
        failed_pid = worker.pid
        # A good job after the bad one: runs in the same child, or in a fresh one.
        described = as_dict(worker.call(DESCRIBE, timeout_seconds=TIMEOUT_SECONDS))
        assert described["name"].endswith(attr)  # the backend the SPEC names
        assert worker.starts == (2 if replaced else 1)
        assert (failed_pid is None) == replaced
        last_pid = worker.pid
    assert worker.pid is None and not psutil.pid_exists(last_pid)


def test_wrong_shape_comes_back_as_returned():
    """Judging the shape is the checks' job: the worker returns what the backend gave.
    Reference: numpy.fft (check-values.md), truncated as the backend truncates."""
    x = signal_x(8)
    with Worker(spec("wrong_shape_fft")) as worker:
        y = worker.call(PLAN, FFT8, x, timeout_seconds=TIMEOUT_SECONDS)
    np.testing.assert_array_equal(y, np.fft.fft(x)[:4])


def test_chatty_backend_does_not_reach_parents_output(capfd):
    """Millions of characters printed in the child (Python and C level) do not reach the
    parent's file descriptors 1 or 2; the result is still right (reference: numpy.fft)."""
    marker = "CHATTY-BACKEND-OUTPUT"  # tests/data/misbehaving.py: CHATTER_MARKER
    x = signal_x(8)
    with Worker(spec("chatty_fft")) as worker:
        y = worker.call(PLAN, FFT8, x, timeout_seconds=TIMEOUT_SECONDS)
    np.testing.assert_array_equal(y, np.fft.fft(x))
    out, err = capfd.readouterr()
    assert marker not in out and marker not in err


def test_one_worker_carries_on_through_a_mixed_batch():
    """run_jobs over good and bad sizes of one adapter: every bad job is a failure in its
    place, every good job after it succeeds (reference: numpy.fft)."""
    sizes = [8, 3, 8, 5, 8, 11, 13, 16]
    with Worker(spec("SelectiveBackend")) as worker:
        jobs = [(Case("fft", "float64", n), signal_x(n)) for n in sizes]
        outcomes = [outcome for _, outcome in run_jobs(worker, PLAN, jobs, TIMEOUT_SECONDS)]
        assert worker.starts == 3  # the first child, then one after SIGSEGV, one after exit(3)
    assert len(outcomes) == len(sizes)
    for n, outcome in zip(sizes, outcomes):
        if n in (8, 16):
            np.testing.assert_array_equal(outcome, np.fft.fft(signal_x(n)))
    assert isinstance(outcomes[1], BackendFailure) and str(outcomes[1]).startswith("ValueError:")
    assert isinstance(outcomes[3], BackendFailure) and "SIGSEGV" in str(outcomes[3])
    assert isinstance(outcomes[5], BackendFailure) and "exited with code 3" in str(outcomes[5])
    assert isinstance(outcomes[6], UnsupportedCase) and "refuses n = 13" in str(outcomes[6])


@pytest.mark.parametrize("start_method", ["fork", "forkserver"])
def test_other_start_methods(start_method):
    """The default is spawn; fork and forkserver work too (under forkserver the child's
    parent is the fork server, which the child's watch on its owner must allow for)."""
    if start_method not in multiprocessing.get_all_start_methods():
        pytest.skip(f"{start_method} is not available on this platform")
    sizes = [8, 5, 8]
    with Worker(spec("SelectiveBackend"), start_method=start_method) as worker:
        jobs = [(Case("fft", "float64", n), signal_x(n)) for n in sizes]
        outcomes = [outcome for _, outcome in run_jobs(worker, PLAN, jobs, TIMEOUT_SECONDS)]
        assert worker.starts == 2
    np.testing.assert_array_equal(outcomes[0], np.fft.fft(signal_x(8)))
    assert isinstance(outcomes[1], BackendFailure) and "SIGSEGV" in str(outcomes[1])
    np.testing.assert_array_equal(outcomes[2], np.fft.fft(signal_x(8)))


def test_result_that_cannot_be_pickled_is_a_failure():
    with Worker(spec("UnsendableBackend")) as worker:
        with pytest.raises(BackendFailure, match=r"^the job's result cannot be sent back to the main "
                                                 r"process: .*Error"):
            worker.call(DESCRIBE, timeout_seconds=TIMEOUT_SECONDS)
        pid = worker.pid
        y = worker.call(PLAN, FFT8, signal_x(8), timeout_seconds=TIMEOUT_SECONDS)
        np.testing.assert_array_equal(y, np.fft.fft(signal_x(8)))
        assert worker.pid == pid


def test_crash_while_loading_is_a_failure():
    with Worker(spec("CrashOnLoadBackend")) as worker:
        with pytest.raises(BackendFailure, match=r"^the backend aborted \(signal 6, SIGABRT\) while loading"):
            worker.call(DESCRIBE, timeout_seconds=TIMEOUT_SECONDS)
        assert worker.pid is None


# -- SPECs that cannot be loaded -----------------------------------------------------------
def test_spec_that_fails_to_load_is_a_usage_error():
    with Worker(spec("no_such_function")) as worker:
        with pytest.raises(UsageError, match=r"has no attribute 'no_such_function'$"):
            worker.call(PLAN, FFT8, signal_x(8), timeout_seconds=TIMEOUT_SECONDS)
        # Remembered: raised again at once, without starting another child.
        with pytest.raises(UsageError, match="no_such_function"):
            worker.call(DESCRIBE, timeout_seconds=TIMEOUT_SECONDS)
        assert worker.starts == 1 and worker.pid is None
    with Worker(os.path.join(HERE, "data", "no_such_file.py") + ":fft") as worker:
        with pytest.raises(UsageError, match="no file") as info:
            worker.call(DESCRIBE, timeout_seconds=TIMEOUT_SECONDS)
        assert "\n" not in str(info.value)


@pytest.mark.parametrize("kwargs", [{"threads": 0}, {"memory_limit_bytes": -1}, {"memory_limit_bytes": "big"},
                                    {"concurrency": 0}, {"cpu_limit_seconds": 0},
                                    {"start_method": "teleport"}, {"start_timeout_seconds": 0}])
def test_bad_worker_settings_are_usage_errors(kwargs):
    with pytest.raises(UsageError):
        Worker("numpy", **kwargs)


def test_bad_job_requests(numpy_worker):
    with pytest.raises(ValueError, match="is not a job of fftgauge.harness.execution.jobs"):
        numpy_worker.call("fftgauge.harness.execution.jobs:plan_and_execute", FFT8, signal_x(8),
                          timeout_seconds=TIMEOUT_SECONDS)
    with pytest.raises(ValueError, match="is not a job"):
        numpy_worker.call(signal_x, 8, timeout_seconds=TIMEOUT_SECONDS)
    with pytest.raises(ValueError, match="is not a job"):
        numpy_worker.call(jobs.resolve, "plan_and_execute", timeout_seconds=TIMEOUT_SECONDS)
    with pytest.raises(ValueError, match="timeout_seconds"):
        numpy_worker.call(PLAN, FFT8, signal_x(8), timeout_seconds=0)
    pid = numpy_worker.pid
    numpy_worker.call(PLAN, FFT8, signal_x(8), timeout_seconds=TIMEOUT_SECONDS)
    assert numpy_worker.pid == pid


# -- no process left behind ----------------------------------------------------------------
def test_close_stops_the_child_and_is_idempotent():
    worker = Worker(spec("SelectiveBackend"))
    worker.call(DESCRIBE, timeout_seconds=TIMEOUT_SECONDS)
    pid = worker.pid
    assert pid in worker_children()
    worker.close()
    worker.close()
    assert pid not in worker_children() and not psutil.pid_exists(pid)
    with pytest.raises(RuntimeError, match="closed"):
        worker.call(DESCRIBE, timeout_seconds=TIMEOUT_SECONDS)


def test_keyboard_interrupt_in_parent_stops_the_child():
    """Ctrl-C (SIGINT to this process) while a job hangs: the interrupt propagates and the
    child is stopped, not left running. Python's own SIGINT handler is installed for the
    test: a process started in the background by a non-interactive shell inherits SIGINT
    ignored, and Python then never raises KeyboardInterrupt."""
    previous = signal.signal(signal.SIGINT, signal.default_int_handler)
    try:
        _interrupt_a_hanging_job()
    finally:
        signal.signal(signal.SIGINT, previous)


def _interrupt_a_hanging_job():
    with Worker(spec("hang_fft")) as worker:
        worker.call(DESCRIBE, timeout_seconds=TIMEOUT_SECONDS)
        pid = worker.pid
        timer = threading.Timer(0.5, os.kill, (os.getpid(), signal.SIGINT))
        timer.start()
        try:
            with pytest.raises(KeyboardInterrupt):
                worker.call(PLAN, FFT8, signal_x(8), timeout_seconds=60)
        finally:
            timer.cancel()
        assert worker.pid is None and not psutil.pid_exists(pid)


PARENT_SCRIPT = """
import os, sys, time
from fftgauge.harness.execution import jobs
from fftgauge.harness.execution.worker import Worker

if __name__ == "__main__":
    worker = Worker({spec!r})
    worker.call(jobs.describe_backend, timeout_seconds=60)
    print(worker.pid, flush=True)
    if sys.argv[1] == "exit":
        sys.exit(0)                      # no close(): the atexit hook must stop the child
    worker.call(jobs.plan_and_execute, ("fft", "float64", 8), [0j] * 8,
                timeout_seconds=600)     # hangs until this process is killed
"""


def _run_parent(tmp_path, mode: str) -> tuple[subprocess.Popen, int]:
    script = tmp_path / "parent.py"
    script.write_text(textwrap.dedent(PARENT_SCRIPT.format(spec=spec("hang_fft"))))
    env = {**os.environ, "PYTHONPATH": ROOT + os.pathsep + os.environ.get("PYTHONPATH", ""),
           "TMPDIR": str(tmp_path)}  # where the worker's log goes
    proc = subprocess.Popen([sys.executable, str(script), mode], stdout=subprocess.PIPE, text=True,
                            env=env, cwd=ROOT)
    line = proc.stdout.readline()
    assert line.strip().isdigit(), f"parent script printed {line!r}"
    return proc, int(line)


def _gone(pid: int, within_seconds: float) -> bool:
    deadline = time.monotonic() + within_seconds
    while time.monotonic() < deadline:
        try:
            if psutil.Process(pid).status() == psutil.STATUS_ZOMBIE:
                return True
        except psutil.NoSuchProcess:
            return True
        time.sleep(0.1)
    return False


def test_exit_without_close_stops_the_child(tmp_path):
    proc, child = _run_parent(tmp_path, "exit")
    assert proc.wait(timeout=60) == 0
    assert _gone(child, within_seconds=5)
    assert not list(tmp_path.glob("fftgauge-worker-*.log"))
    assert not list(tmp_path.glob("fftgauge-scratch-*")), "the worker left its scratch folder"


def test_killed_parent_does_not_leave_a_hanging_child(tmp_path):
    proc, child = _run_parent(tmp_path, "hang")
    time.sleep(0.5)  # let the hanging job start
    proc.kill()
    proc.wait(timeout=30)
    try:
        assert _gone(child, within_seconds=10), "the orphaned worker kept running"
        assert not list(tmp_path.glob("fftgauge-worker-*.log")), "the orphaned worker left its log"
        assert not list(tmp_path.glob("fftgauge-scratch-*")), "the orphaned worker left its scratch folder"
    finally:
        if psutil.pid_exists(child):
            try:
                psutil.Process(child).kill()
            except psutil.NoSuchProcess:
                pass


# -- processes a backend starts ------------------------------------------------------------
LEFTOVER_SLEEP = os.environ["FFTGAUGE_TEST_SLEEP_SECONDS"]  # tests/conftest.py; misbehaving.py sleeps it


def sleepers() -> set[int]:
    """Pids of the running (not zombie) ``sleep LEFTOVER_SLEEP`` processes on this machine,
    wherever they were re-parented."""
    found = set()
    for proc in psutil.process_iter(["cmdline", "status"]):
        if proc.info["cmdline"] == ["sleep", LEFTOVER_SLEEP] and proc.info["status"] != psutil.STATUS_ZOMBIE:
            found.add(proc.pid)
    return found


def _wait_for_sleepers(count: int, within_seconds: float = 30.0) -> set[int]:
    deadline = time.monotonic() + within_seconds
    while time.monotonic() < deadline:
        found = sleepers()
        if len(found) >= count:
            return found
        time.sleep(0.05)
    return sleepers()


@pytest.mark.parametrize("attr", ["sleeper_fft", "session_sleeper_fft", "daemon_sleeper_fft"])
def test_processes_a_backend_starts_end_with_its_worker(attr):
    """A backend that starts ``sleep`` on every call (a plain child, one in a new session, a
    daemon re-parented away from it): the sleepers run while the worker lives, the worker
    says how many each job left running, and none is left after close (counted with psutil
    before and after)."""
    before = sleepers()
    x = signal_x(8)
    with Worker(spec(attr)) as worker:
        for _ in range(2):
            y = worker.call(PLAN, FFT8, x, timeout_seconds=TIMEOUT_SECONDS)
            np.testing.assert_array_equal(y, np.fft.fft(x))  # reference: numpy.fft
            assert worker.left_running == 1
        assert len(_wait_for_sleepers(len(before) + 2) - before) == 2
        y = worker.call(DESCRIBE, timeout_seconds=TIMEOUT_SECONDS)
        assert worker.left_running == 0
    assert worker.processes_ended == 2
    assert _gone_all(sleepers() - before), f"{attr} left sleepers behind"


def _gone_all(pids: set[int], within_seconds: float = 30.0) -> bool:
    return all(_gone(pid, within_seconds) for pid in pids)


@pytest.mark.parametrize("attr, pattern", [
    ("daemon_then_abort_fft", r"^the backend aborted \(signal 6, SIGABRT\) .*; 1 process it had started "
                              r"was ended with it$"),
    ("daemon_then_hang_fft", r"^did not finish within 2 s; killed .*; 1 process it had started was ended "
                             r"with it$"),
])
def test_processes_of_a_dead_or_stopped_child_are_ended(attr, pattern):
    """A backend that daemonises a sleeper and then aborts (its orphans go to init: they are
    found by the token they inherited) or hangs until the timeout: the reason says a process
    was ended, and no sleeper is left."""
    before = sleepers()
    with Worker(spec(attr)) as worker:
        with pytest.raises(BackendFailure, match=pattern):
            worker.call(PLAN, FFT8, signal_x(8), timeout_seconds=SHORT_TIMEOUT_SECONDS)
        assert worker.processes_ended == 1
    assert _gone_all(sleepers() - before), f"{attr} left a sleeper behind"


def test_a_child_that_dies_while_its_tree_is_read_leaves_its_orphans_to_the_token_search(monkeypatch):
    """The race behind a leftover sleeper: the child is alive when asked, dies while its tree
    is read (its orphans go to init, out of the tree), and the search for the worker's token
    must still run. Here a real child is killed inside the tree's read, and an orphan carrying
    the token (a daemonised sleeper, never in the child's tree) must be found."""
    from fftgauge.harness.execution import processes

    token = f"race-{os.getpid()}-{time.monotonic_ns()}"
    env = dict(os.environ, **{processes.TOKEN_VARIABLE: token})
    child = subprocess.Popen([sys.executable, "-c", "import time; time.sleep(120)"], env=env)
    done = subprocess.run(["sh", "-c", f"setsid sleep {LEFTOVER_SLEEP} >/dev/null 2>&1 & echo $!"], env=env,
                          capture_output=True, text=True, check=True, timeout=TIMEOUT_SECONDS)
    orphan = int(done.stdout.split()[-1])
    try:
        deadline = time.monotonic() + TIMEOUT_SECONDS  # until its fork and exec are done, however loaded
        while orphan not in sleepers() and time.monotonic() < deadline:
            time.sleep(0.02)
        assert orphan in sleepers()
        read_tree = processes.descendant_pids

        def dies_while_read(pid, running_only=True):
            found = read_tree(pid, running_only)
            child.kill()
            child.wait(timeout=TIMEOUT_SECONDS)
            return found

        monkeypatch.setattr(processes, "descendant_pids", dies_while_read)
        found = {proc.pid for proc in processes.worker_processes(child.pid, token)}
        assert orphan in found and child.pid not in found
    finally:
        child.kill()
        child.wait(timeout=TIMEOUT_SECONDS)
        try:
            psutil.Process(orphan).kill()
        except psutil.Error:
            pass


# -- resource limits -----------------------------------------------------------------------
CAP_512_MIB = 512 * 2**20


def test_allocation_past_the_cap_is_an_error_reason():
    """A backend allocating 2 GiB under a 512 MiB cap: the job fails at once with the cap
    named (never the system's out-of-memory killer), even under a short timeout, and the
    same child goes on (reference for the good job: numpy.fft)."""
    with Worker(spec("hog_2gib_fft"), memory_limit_bytes=CAP_512_MIB) as worker:
        with pytest.raises(BackendFailure, match=r"^exceeded the memory cap of 0\.5 GiB \(MemoryError: "
                                                 r".*\) \(at .*" + LOCATION + r"hog_2gib_fft\)$"):
            worker.call(PLAN, FFT8, signal_x(8), timeout_seconds=SHORT_TIMEOUT_SECONDS)
        assert worker.starts == 1 and worker.pid is not None
        assert as_dict(worker.call(DESCRIBE, timeout_seconds=TIMEOUT_SECONDS))["name"].endswith("hog_2gib_fft")


def test_hog_stopped_by_the_timeout_at_its_cap_is_reported_as_memory():
    """A backend that takes memory step by step and, at the cap, swallows the MemoryError and
    waits: the short timeout stops it, and the reason says memory first, not only time."""
    with Worker(spec("slow_hog_fft"), memory_limit_bytes=CAP_512_MIB) as worker:
        with pytest.raises(BackendFailure, match=r"^exceeded the memory cap of 0\.5 GiB and did not "
                                                 r"finish within 2 s; killed"):
            worker.call(PLAN, FFT8, signal_x(8), timeout_seconds=SHORT_TIMEOUT_SECONDS)


def test_cpu_time_limit_ends_a_spinning_job():
    """A job that spins with SIGTERM ignored under a 1 s CPU-time limit and a long wall-clock
    timeout: the kernel ends it (SIGXCPU) and the reason names the CPU-time limit."""
    with Worker(spec("busy_fft"), cpu_limit_seconds=1) as worker:
        with pytest.raises(BackendFailure, match=r"^used more than its CPU-time limit of 1 s "
                                                 r"\(signal 24, SIGXCPU\); killed$"):
            worker.call(PLAN, FFT8, signal_x(8), timeout_seconds=60)
        assert worker.pid is None


def test_default_memory_cap():
    """Half of the physical memory over the workers running at once, at least 2 GiB
    (limits.default_memory_limit_bytes; this machine's memory from psutil)."""
    from fftgauge.harness.execution.limits import default_memory_limit_bytes, physical_memory_bytes

    assert default_memory_limit_bytes(4, physical_bytes=64 * 2**30) == 8 * 2**30
    assert default_memory_limit_bytes(1, physical_bytes=3 * 2**30) == 2 * 2**30
    expected = max(2 * 2**30, physical_memory_bytes() // 2 // 2**20 * 2**20)
    assert Worker("numpy").memory_limit_bytes == expected
    assert Worker("numpy", memory_limit_bytes=None).memory_limit_bytes is None
    with pytest.raises(ValueError):
        default_memory_limit_bytes(0)


# -- the working folder --------------------------------------------------------------------
def test_jobs_run_in_a_scratch_folder_removed_afterwards(tmp_path, monkeypatch):
    """A backend that deletes every file in its working folder: the user's folder (this
    process's working folder) keeps its files; the worker's scratch folder took the damage
    and is removed when the worker closes."""
    monkeypatch.chdir(tmp_path)
    (tmp_path / "precious.txt").write_text("the user's data\n")
    x = signal_x(8)
    with Worker(spec("scrub_cwd_fft")) as worker:
        y = worker.call(PLAN, FFT8, x, timeout_seconds=TIMEOUT_SECONDS)
        np.testing.assert_array_equal(y, np.fft.fft(x))  # reference: numpy.fft
        scratch = worker.scratch_dir
        assert scratch and os.path.isfile(os.path.join(scratch, "left-by-scrubber.txt"))
        assert os.path.realpath(scratch) != os.path.realpath(tmp_path)
    assert (tmp_path / "precious.txt").read_text() == "the user's data\n"
    assert not (tmp_path / "left-by-scrubber.txt").exists()
    assert not os.path.exists(scratch) and worker.scratch_dir is None


USER_BACKEND = """
import numpy as np
from {helper} import scale

def fft(x):
    return scale(np.fft.fft(x))

def broken(x):
    raise ArithmeticError("the user's own bug")
"""


def test_users_folder_stays_on_the_import_path(tmp_path, monkeypatch):
    """From the user's folder: a module SPEC finds their module, a relative file SPEC finds
    its file and the module beside it, although jobs run in the scratch folder; an exception
    in their code names it relative to their folder. Reference: numpy.fft times 1."""
    monkeypatch.chdir(tmp_path)
    (tmp_path / "users_helper.py").write_text("def scale(y):\n    return 1 * y\n")
    (tmp_path / "users_fft.py").write_text(USER_BACKEND.format(helper="users_helper"))
    sub = tmp_path / "lib"
    sub.mkdir()
    (sub / "lib_helper.py").write_text("def scale(y):\n    return 1 * y\n")
    (sub / "lib_fft.py").write_text(USER_BACKEND.format(helper="lib_helper"))
    x = signal_x(8)
    for user_spec in ("users_fft:fft", "lib/lib_fft.py:fft"):
        with Worker(user_spec) as worker:
            np.testing.assert_array_equal(worker.call(PLAN, FFT8, x, timeout_seconds=TIMEOUT_SECONDS),
                                          np.fft.fft(x))
    with Worker("lib/lib_fft.py:broken") as worker:
        with pytest.raises(BackendFailure, match=r"^ArithmeticError: the user's own bug "
                                                 r"\(at lib/lib_fft\.py:9 in broken\)$"):
            worker.call(PLAN, FFT8, x, timeout_seconds=TIMEOUT_SECONDS)


def test_exception_text_names_the_users_line():
    """crash.exception_text, for rows made where a backend's exception is caught: type,
    message and the innermost frame outside the engine, relative to the user's folder."""
    from fftgauge.harness.execution.crash import exception_text

    def users_fft():
        raise ZeroDivisionError("n = 0")

    try:
        users_fft()
    except ZeroDivisionError as exc:
        text = exception_text(exc, folder=ROOT)
    assert re.match(r"^ZeroDivisionError: n = 0 \(at tests/test_worker\.py:\d+ in users_fft\)$", text), text


# -- starting workers from the user's own script -------------------------------------------
PLAIN_SCRIPT = """
import fftgauge
print("TOP-LEVEL RAN", flush=True)
rows = fftgauge.check(["numpy"], sizes="1..8", kinds=["fft"], dtypes=["float64"])
print("STATUSES", sorted(set(rows["status"])), flush=True)
"""


def test_python_api_from_a_plain_script_without_a_main_guard(tmp_path):
    """The README's Python API call pasted into a plain script (no ``if __name__ ==
    "__main__":``): it succeeds, and its top level runs once (workers never re-import the
    user's script)."""
    script = tmp_path / "plain.py"
    script.write_text(PLAIN_SCRIPT)
    env = {**os.environ, "PYTHONPATH": ROOT + os.pathsep + os.environ.get("PYTHONPATH", "")}
    done = subprocess.run([sys.executable, str(script)], capture_output=True, text=True, cwd=tmp_path,
                          env=env, timeout=300)
    assert done.returncode == 0, done.stderr[-2000:]
    assert done.stdout.count("TOP-LEVEL RAN") == 1, done.stdout
    assert "STATUSES ['pass', 'skip']" in done.stdout or "STATUSES ['pass']" in done.stdout, done.stdout
    assert "Traceback" not in done.stderr


def test_good_backends_load_and_run_under_a_small_cap():
    """The cap counts memory mapped writable, not address space only reserved: scipy.fft
    (OpenBLAS underneath, which reserves address space in bulk) loads and runs under a
    512 MiB cap. Reference: numpy.fft (check-values.md), same input."""
    x = signal_x(64)
    with Worker("scipy", memory_limit_bytes=CAP_512_MIB) as worker:
        y = worker.call(PLAN, Case("fft", "float64", 64), x, timeout_seconds=TIMEOUT_SECONDS)
    np.testing.assert_allclose(y, np.fft.fft(x), rtol=0, atol=1e-12 * np.abs(x).sum())


def test_abort_from_another_thread_stops_a_running_job_at_once():
    """A shutdown path calls abort() from another thread while a job hangs with a daemonised
    sleeper: the waiting call raises 'stopped: the run was interrupted' (not a crash), no
    sleeper and no child is left, and close() still works."""
    before = sleepers()
    with Worker(spec("daemon_then_hang_fft")) as worker:
        worker.call(DESCRIBE, timeout_seconds=TIMEOUT_SECONDS)
        pid = worker.pid
        _wait = threading.Timer(1.0, worker.abort)
        _wait.start()
        try:
            with pytest.raises(BackendFailure, match=r"^stopped: the run was interrupted$"):
                worker.call(PLAN, FFT8, signal_x(8), timeout_seconds=60)
        finally:
            _wait.cancel()
    assert _gone(pid, within_seconds=5)
    assert _gone_all(sleepers() - before), "abort left a sleeper behind"
