"""The external-program backend (``exec:``): the C protocol server of examples/c_radix2 and
the misbehaving Python servers of tests/data/protocol_servers.py.

The C server is built with the system C compiler into a temporary folder (skipped, with the
reason, when there is none). Outside checks, with their sources:

- results against numpy.fft (check-values.md: numpy.fft, "an independent double-precision
  implementation (not ground truth)") within twice ``fftgauge.harness.battery.bounds.accuracy_limit`` (both
  are within the limit of the exact transform: Higham, Accuracy and Stability of Numerical
  Algorithms, 2nd ed., SIAM 2002, Theorem 24.2 (from memory); triangle inequality);
- the broken server's output equals numpy's in bit-reversed order (common practice: the
  definition of bit reversal);
- the protocol's byte layout: the Python test servers are written from the specification
  in docs/external-fftgauge.backends.md with their own struct layouts, and the request header is
  checked here byte by byte against that specification.

Every misbehaviour runs under short timeouts; pytest-timeout stops a test that hangs, and
each test checks that no child process (or zombie) of ours is left behind (psutil).
"""

from __future__ import annotations

import math
import pickle
import shutil
import stat
import subprocess
import sys
import time
import uuid
from pathlib import Path

import numpy as np
import psutil
import pytest

from fftgauge.harness.execution import jobs
from fftgauge.backends.external_program import ExternalProgramBackend
from fftgauge.backends.pipe_protocol import (ProgramExited, ProgramStatus, ProgramTimeout, ProtocolError,
                                             check_response_start, decode_hello, decode_response_header, encode_hello,
                                             encode_transform, status_failure)
from fftgauge.backends.registry import load_backend
from fftgauge.harness.cases import Case
from fftgauge.harness.errors import BackendFailure, UsageError

ROOT = Path(__file__).resolve().parent.parent
EXAMPLE = ROOT / "examples" / "c_radix2"
SERVERS = Path(__file__).resolve().parent / "data" / "protocol_servers.py"
TARGETS = ("radix2_server", "radix2_server_broken")


@pytest.fixture(scope="session")
def c_servers(c_example_build: Path) -> Path:
    """The folder holding the C example's build (tests/conftest.py builds it once)."""
    return c_example_build


def our_leftovers() -> list[str]:
    """Return our child processes that are zombies or still-running protocol servers."""
    left = []
    for child in psutil.Process().children(recursive=True):
        try:
            status = child.status()
            cmdline = " ".join(child.cmdline()) if status != psutil.STATUS_ZOMBIE else ""
        except psutil.NoSuchProcess:
            continue
        if status == psutil.STATUS_ZOMBIE or "protocol_servers.py" in cmdline or "radix2_server" in cmdline:
            left.append(f"{child.pid} {status} {cmdline}")
    return left


@pytest.fixture
def no_leftovers():
    """Fail the test when a program of ours, or a zombie, outlives it."""
    yield
    deadline = time.monotonic() + 5.0
    while our_leftovers() and time.monotonic() < deadline:
        time.sleep(0.05)
    assert our_leftovers() == []


def server_spec(mode: str, options: str = "timeout=2,start_timeout=10") -> str:
    return f"exec:{sys.executable} {SERVERS} {mode}[{options}]"


def signal_for(case: Case, seed: int = 11) -> np.ndarray:
    rng = np.random.default_rng([seed, case.n])
    re = rng.standard_normal(case.input_length)
    if case.kind == "rfft":
        return re.astype(case.input_dtype)
    return (re + 1j * rng.standard_normal(case.input_length)).astype(case.input_dtype)


def numpy_result(case: Case, x: np.ndarray) -> np.ndarray:
    wide = x.astype(np.float64 if case.kind == "rfft" else np.complex128)
    fn = getattr(np.fft, case.kind)
    return fn(wide, n=case.n) if case.kind == "irfft" else fn(wide)


def relative_error(y: np.ndarray, ref: np.ndarray) -> float:
    scale = np.linalg.norm(ref)
    return float(np.linalg.norm(y.astype(ref.dtype) - ref) / (scale if scale else 1.0))


def accuracy_limit(case: Case) -> float:
    from fftgauge.harness.battery.bounds import accuracy_limit as limit
    return limit(case)


def bit_reversal(n: int) -> np.ndarray:
    bits = int(math.log2(n))
    return np.array([int(format(i, f"0{bits}b")[::-1], 2) if bits else 0 for i in range(n)])


# -- the protocol's bytes ----------------------------------------------------------------------

def test_request_headers_match_the_specification() -> None:
    # docs/external-backends.md: magic "FGRQ", u16 version 1, u16 op, u8 kind, u8 precision,
    # u8 norm, u8 reserved, u32 count, u64 n, u64 payload bytes; little-endian, 32 bytes.
    assert encode_hello() == b"FGRQ" + bytes([1, 0, 1, 0]) + bytes(24)
    header = encode_transform(Case("irfft", "float32", 1024, "ortho"), 3, 3 * 513 * 8)
    assert len(header) == 32
    assert header[:8] == b"FGRQ\x01\x00\x02\x00"
    assert header[8:12] == bytes([3, 4, 1, 0])                  # irfft, 4-byte reals, ortho
    assert int.from_bytes(header[12:16], "little") == 3
    assert int.from_bytes(header[16:24], "little") == 1024
    assert int.from_bytes(header[24:32], "little") == 3 * 513 * 8


def _response(status: int = 0, flags: int = 0, elapsed_ns: int = 0, size: int = 0, version: int = 1) -> bytes:
    """A response header written byte by byte from the table in docs/external-backends.md."""
    return (b"FGRS" + version.to_bytes(2, "little") + status.to_bytes(2, "little") + flags.to_bytes(4, "little")
            + bytes(4) + elapsed_ns.to_bytes(8, "little") + size.to_bytes(8, "little"))


def test_response_headers_decode_without_a_process() -> None:
    # The codec alone (no program): docs/external-backends.md, "Response header".
    assert decode_response_header(_response(flags=1, elapsed_ns=1234, size=64), "x", 64) == (0, 1234, 64)
    assert decode_response_header(_response(flags=0, elapsed_ns=99, size=64), "x", 64) == (0, None, 64)
    assert decode_response_header(_response(status=3, size=12), "x", 64) == (3, None, 12)  # a message
    with pytest.raises(ProtocolError, match="63-byte payload; 64 bytes were expected"):
        decode_response_header(_response(size=63), "x", 64)
    with pytest.raises(ProtocolError, match="protocol version 2; fftgauge speaks version 1"):
        decode_response_header(_response(version=2), "x", 0)
    with pytest.raises(ProtocolError, match="at most 65536"):
        decode_response_header(_response(status=1, size=65537), "x", 64)
    check_response_start(b"FG", "x")                               # a prefix of the magic is fine
    with pytest.raises(ProtocolError, match="is it printing text to stdout"):
        check_response_start(b"Hello", "x")


def test_hello_payload_decodes_without_a_process() -> None:
    # docs/external-backends.md, "Hello": kinds fft+rfft (bits 0, 2), float64 (bit 1), norms 0
    # (read as backward), flags pow2 + self-timed, largest n 4096, then the identity text.
    payload = bytes([0b0101, 0b10, 0, 0b11]) + bytes(4) + (4096).to_bytes(8, "little") + b"board fft 2.1"
    hello = decode_hello(payload)
    assert (hello.kinds, hello.dtypes, hello.norms) == (("fft", "rfft"), ("float64",), ("backward",))
    assert hello.pow2_only and hello.self_timed and hello.max_n == 4096 and hello.identity == "board fft 2.1"
    with pytest.raises(ProtocolError, match="fewer than the 16"):
        decode_hello(payload[:3])
    with pytest.raises(ProtocolError, match="no transform kind"):
        decode_hello(bytes(16))


def test_status_answers_become_the_right_failures() -> None:
    version = status_failure(4, b"speaks 7 only", "the hello")
    assert isinstance(version, ProtocolError) and "speaks 7 only" in str(version)
    failed = status_failure(3, b"overflow\nin stage 2", "the request")
    assert isinstance(failed, ProgramStatus) and failed.status == 3
    assert str(failed) == "program answered the request with status 3 (transform failed): overflow in stage 2"


# -- the C server ------------------------------------------------------------------------------

@pytest.mark.timeout(60)
def test_c_server_agrees_with_numpy_and_times_itself(c_servers: Path, no_leftovers) -> None:
    backend = load_backend(f"exec:{c_servers / 'radix2_server'}")
    try:
        assert backend.reports_own_timing and backend.version == "radix2_server 1.0"
        caps = backend.capabilities()
        assert caps.kinds == ("fft", "ifft", "rfft", "irfft") and caps.sizes == "pow2"
        for dtype in ("float32", "float64"):
            for kind in caps.kinds:
                for n in (1, 2, 8, 1024, 4096):
                    case = Case(kind, dtype, n)
                    plan = backend.plan(case)
                    x = signal_for(case)
                    y = plan.execute(plan.prepare(x))
                    assert y.dtype == case.output_dtype and y.shape == (case.output_length,)
                    err = relative_error(y, numpy_result(case, x))
                    assert err <= 2 * accuracy_limit(case), f"{case.label()}: {err:.3g}"
                    assert plan.last_self_seconds is not None and plan.last_self_seconds >= 0
                    assert plan.last_round_trip_seconds > 0
        d = backend.describe().as_dict()
        assert d["timing_source"] == "program" and d["protocol_version"] == 1
        assert d["round_trip_overhead_seconds"] > 0
    finally:
        backend.close()


@pytest.mark.timeout(60)
def test_c_server_answers_a_batch_in_one_request(c_servers: Path, no_leftovers) -> None:
    backend = load_backend(f"exec:{c_servers / 'radix2_server'}")
    try:
        case = Case("rfft", "float64", 64)
        xs = np.stack([signal_for(case, seed) for seed in range(3)])
        ys = backend.plan(case).execute_batch(xs)
        assert ys.shape == (3, 33)
        for x, y in zip(xs, ys):
            assert relative_error(y, numpy_result(case, x)) <= 2 * accuracy_limit(case)
    finally:
        backend.close()


@pytest.mark.timeout(60)
def test_c_server_refuses_unsupported_requests_and_stays_up(c_servers: Path, no_leftovers) -> None:
    backend = load_backend(f"exec:{c_servers / 'radix2_server'}")
    try:
        pid = backend.connection.pid
        with pytest.raises(ProgramStatus, match="status 1 .*power of two"):
            backend.plan(Case("fft", "float64", 12)).execute(np.zeros(12, complex))
        case = Case("fft", "float64", 16)
        x = signal_for(case)
        assert relative_error(backend.plan(case).execute(x), numpy_result(case, x)) <= 2 * accuracy_limit(case)
        assert backend.connection.pid == pid and backend.connection.restarts == 0
    finally:
        backend.close()


@pytest.mark.timeout(120)
def test_c_server_passes_the_battery(c_servers: Path, no_leftovers) -> None:
    checks = pytest.importorskip("fftgauge.harness.battery.checks")
    backend = load_backend(f"exec:{c_servers / 'radix2_server'}")
    try:
        for kind in ("fft", "ifft", "rfft", "irfft"):
            for dtype, n in (("float64", 1024), ("float32", 16), ("float64", 1)):
                rows = checks.check_case(backend, Case(kind, dtype, n), seed=1234)
                bad = [(r.check, r.status, r.message) for r in rows if r.status not in ("pass", "skip")]
                assert rows and not bad, f"{kind} {dtype} n={n}: {bad}"
    finally:
        backend.close()


@pytest.mark.timeout(60)
def test_broken_c_server_is_caught(c_servers: Path, no_leftovers) -> None:
    backend = load_backend(f"exec:{c_servers / 'radix2_server_broken'}")
    try:
        case = Case("fft", "float64", 1024)
        x = signal_for(case)
        y = backend.plan(case).execute(x)
        ref = numpy_result(case, x)
        assert relative_error(y, ref) > 1e6 * accuracy_limit(case)
        assert relative_error(y, ref[bit_reversal(case.n)]) <= 2 * accuracy_limit(case)
    finally:
        backend.close()


@pytest.mark.timeout(60)
def test_the_battery_diagnoses_the_broken_server_as_bit_reversed(c_servers: Path, no_leftovers) -> None:
    checks = pytest.importorskip("fftgauge.harness.battery.checks")
    backend = load_backend(f"exec:{c_servers / 'radix2_server_broken'}")
    try:
        rows = checks.run_case_checks(backend, ("fft", "float64", 1024, "backward"), 1234, ["accuracy"])
        assert [(r["check"], r["status"], r["diagnosis"]) for r in rows] == [("accuracy", "fail", "bit-reversed")]
    finally:
        backend.close()


@pytest.mark.timeout(120)
def test_runs_in_a_worker_process(c_servers: Path, no_leftovers) -> None:
    worker_mod = pytest.importorskip("fftgauge.harness.execution.worker")
    case = Case("ifft", "float32", 256)
    x = signal_for(case)
    worker = worker_mod.Worker(f"exec:{c_servers / 'radix2_server'}")
    try:
        y = worker.call(jobs.plan_and_execute, case, x, timeout_seconds=60)
        d = worker.call(jobs.describe_backend, timeout_seconds=60)
    finally:
        worker.close()
    assert relative_error(y, numpy_result(case, x)) <= 2 * accuracy_limit(case)
    assert d["reports_own_timing"] is True


# -- a well-behaved Python server ---------------------------------------------------------------

@pytest.mark.timeout(60)
def test_python_server_all_norms_and_untimed_flag(no_leftovers) -> None:
    for mode, timed in (("ok", True), ("ok-untimed", False)):
        backend = load_backend(server_spec(mode))
        try:
            assert backend.reports_own_timing is timed
            assert backend.capabilities().norms == ("backward", "ortho", "forward")
            case = Case("fft", "float64", 32, "ortho")
            plan = backend.plan(case)
            x = signal_for(case)
            y = plan.execute(x)
            assert relative_error(y, np.fft.fft(x, norm="ortho")) <= 2 * accuracy_limit(case)
            assert (plan.last_self_seconds is not None) is timed
            assert backend.describe().details["timing_source"] == ("program" if timed else "adapter")
        finally:
            backend.close()


@pytest.mark.timeout(60)
def test_pickles_as_its_spec(no_leftovers) -> None:
    backend = load_backend(server_spec("ok"))
    copy = pickle.loads(pickle.dumps(backend))
    try:
        assert isinstance(copy, ExternalProgramBackend) and copy.label == backend.label
        assert copy.connection.pid != backend.connection.pid
    finally:
        copy.close()
        backend.close()


# -- misbehaviours at start: usage errors, never a hang ---------------------------------------

@pytest.mark.timeout(30)
@pytest.mark.parametrize("mode,options,message", [
    ("exit-at-once", "start_timeout=10", r"exited with code 3 before answering the hello; its stderr ends: "
                                         r"protocol test server: exiting at once"),
    ("garbage-hello", "start_timeout=10", r"not a protocol response \(it began b'Starting FFT ser'\)"),
    ("silent", "start_timeout=1.5", r"no complete answer to the hello within 1.5 s; it was killed"),
    ("wrong-version", "start_timeout=10", r"protocol version 2; fftgauge speaks version 1"),
    ("version-status", "start_timeout=10", r"does not speak protocol version 1 .*speaks protocol version 7"),
    ("short-hello", "start_timeout=10", r"holds 3 bytes, fewer than the 16 of its record"),
])
def test_start_misbehaviour_is_a_usage_error(mode: str, options: str, message: str, no_leftovers) -> None:
    with pytest.raises(UsageError, match=message):
        load_backend(server_spec(mode, options))


# -- misbehaviours during a run: failures (error rows), never a hang ----------------------------

@pytest.mark.timeout(30)
@pytest.mark.parametrize("mode,error,message", [
    ("garbage-response", ProtocolError, r"not a protocol response \(it began b'Result: 0.0 0.0 '\)"),
    ("wrong-length", ProtocolError, r"1016-byte payload; 1024 bytes were expected \(wrong length\)"),
    ("short-payload", ProgramTimeout, r"no complete answer .* within 1 s; it was killed"),
    ("hang", ProgramTimeout, r"no complete answer .* within 1 s; it was killed"),
    ("error-status", ProgramStatus, r"status 3 \(transform failed\): DSP bridge not ready"),
])
def test_run_misbehaviour_raises_a_clear_failure(mode: str, error: type, message: str, no_leftovers) -> None:
    backend = load_backend(server_spec(mode, "timeout=1,start_timeout=10"))
    try:
        pid = backend.connection.pid
        plan = backend.plan(Case("fft", "float64", 64))
        with pytest.raises(error, match=message):
            plan.execute(np.zeros(64, complex))
        if error is ProgramStatus:  # a status is an answer: the program stays up
            assert backend.connection.pid == pid and psutil.pid_exists(pid)
        else:  # anything else: the program was killed and reaped
            assert backend.connection.pid is None
            assert not psutil.pid_exists(pid)
    finally:
        backend.close()


@pytest.mark.timeout(30)
def test_a_timed_out_plan_fails_at_once_afterwards(no_leftovers) -> None:
    backend = load_backend(server_spec("hang", "timeout=1,start_timeout=10"))
    try:
        plan = backend.plan(Case("fft", "float64", 8))
        with pytest.raises(ProgramTimeout):
            plan.execute(np.zeros(8, complex))
        with pytest.raises(ProgramTimeout, match="not sent: this plan's program already timed out"):
            plan.execute(np.zeros(8, complex))
        assert backend.connection.restarts == 0  # the second call started nothing
    finally:
        backend.close()


@pytest.mark.timeout(30)
def test_a_crash_mid_run_is_reported_and_the_program_restarted(no_leftovers) -> None:
    backend = load_backend(server_spec("crash-mid-run", "timeout=2,start_timeout=10"))
    try:
        case = Case("fft", "float64", 16)
        x = signal_for(case)
        plan = backend.plan(case)
        for _ in range(2):
            assert relative_error(plan.execute(x), np.fft.fft(x)) <= 2 * accuracy_limit(case)
        with pytest.raises(ProgramExited, match="was killed by SIGABRT before answering"):
            plan.execute(x)
        plan = backend.plan(case)  # planning restarts the program
        assert backend.connection.restarts == 1
        assert relative_error(plan.execute(x), np.fft.fft(x)) <= 2 * accuracy_limit(case)
    finally:
        backend.close()


@pytest.mark.timeout(30)
def test_a_timeout_kills_the_programs_own_children(no_leftovers) -> None:
    backend = load_backend(server_spec("grandchild-hang", "timeout=1,start_timeout=10"))
    try:
        program = psutil.Process(backend.connection.pid)
        deadline = time.monotonic() + 10
        while not program.children() and time.monotonic() < deadline:
            time.sleep(0.05)
        grandchild = program.children()[0]
        with pytest.raises(ProgramTimeout):
            backend.plan(Case("fft", "float64", 8)).execute(np.zeros(8, complex))
        try:
            grandchild.wait(timeout=5)
        except psutil.NoSuchProcess:
            pass
        assert not grandchild.is_running() or grandchild.status() == psutil.STATUS_ZOMBIE
    finally:
        backend.close()


@pytest.mark.timeout(60)
def test_misbehaviour_in_a_worker_becomes_error_rows(no_leftovers) -> None:
    battery = pytest.importorskip("fftgauge.harness.battery.run")
    pytest.importorskip("fftgauge.harness.execution.worker")
    req = battery.BatteryRequest(specs=(server_spec("wrong-length", "timeout=1,start_timeout=20"),),
                                 kinds=("fft",), dtypes=("float64",), sizes=(8,), checks=("accuracy", "shape"),
                                 timeout_seconds=60)
    doc = battery.run_battery(req, quiet=True)
    assert [r["status"] for r in doc["rows"]] == ["error", "error"]
    assert all("wrong length" in r["message"] for r in doc["rows"])


def processes_with(marker: str) -> list[psutil.Process]:
    """Return the running (not zombie) processes anywhere whose command line holds ``marker``."""
    found = []
    for proc in psutil.process_iter(["cmdline", "status"]):
        if proc.info["status"] != psutil.STATUS_ZOMBIE and marker in " ".join(proc.info["cmdline"] or ()):
            found.append(proc)
    return found


@pytest.mark.timeout(60)
def test_a_hung_program_does_not_outlive_a_killed_worker(no_leftovers) -> None:
    worker_mod = pytest.importorskip("fftgauge.harness.execution.worker")
    marker = f"fftgauge-test-{uuid.uuid4().hex}"  # an extra argument the server ignores
    worker = worker_mod.Worker(server_spec(f"hang {marker}", "timeout=60,start_timeout=20"))
    try:
        with pytest.raises(BackendFailure, match="did not finish within 3 s"):
            worker.call(jobs.plan_and_execute, Case("fft", "float64", 8), np.zeros(8, complex),
                        timeout_seconds=3)
    finally:
        worker.close()
    # the worker was killed without a chance to stop its program: the watchdog does it
    deadline = time.monotonic() + 10
    while processes_with(marker) and time.monotonic() < deadline:
        time.sleep(0.1)
    assert processes_with(marker) == []


# -- bad SPECs: usage errors at load time --------------------------------------------------------

@pytest.mark.timeout(30)
def test_missing_or_not_executable_programs_are_usage_errors(tmp_path: Path, no_leftovers) -> None:
    script = tmp_path / "server.sh"
    script.write_text("#!/bin/sh\nexit 0\n")
    script.chmod(0o644)
    junk = tmp_path / "junk.bin"
    junk.write_bytes(b"\x00\x01 not a program")
    junk.chmod(junk.stat().st_mode | stat.S_IXUSR)
    cases = {
        f"exec:{tmp_path / 'nope'}": "no program file",
        f"exec:{script}": r"is not executable; run chmod \+x",
        "exec:no-such-program-fftgauge-test --flag": "no program 'no-such-program-fftgauge-test' on PATH",
        f"exec:{junk}": "cannot start",
        f"exec:{tmp_path}": "no program file",
        "exec:prog 'unbalanced": "cannot split the command line",
        server_spec("ok", "timeout=0"): "timeout=0.0 must be above 0",
        server_spec("ok", "timeout=soon"): "must be float",
        server_spec("ok", "retries=3"): "unknown option 'retries'",
        "exec:   ": "nothing after exec:",
    }
    for text, message in cases.items():
        with pytest.raises(UsageError, match=message):
            load_backend(text)


def test_cli_bad_exec_spec_exits_2_with_one_line(tmp_path: Path) -> None:
    proc = subprocess.run([sys.executable, "-m", "fftgauge", "check", "--backend",
                           f"exec:{tmp_path / 'nope'} --fast", "--sizes", "8", "--quiet"],
                          capture_output=True, text=True, timeout=120, cwd=ROOT)
    assert proc.returncode == 2
    lines = proc.stderr.strip().splitlines()
    assert len(lines) == 1 and "no program file" in lines[0]


def test_program_is_never_run_through_a_shell(tmp_path: Path, no_leftovers) -> None:
    # A shell would run the second command and expand $HOME; the argument list keeps both as text.
    marker = tmp_path / "marker"
    backend = load_backend(f"exec:{sys.executable} {SERVERS} ok '; touch {marker}' $HOME[start_timeout=10]")
    try:
        assert backend.argv == [sys.executable, str(SERVERS), "ok", f"; touch {marker}", "$HOME"]
        assert not marker.exists()
    finally:
        backend.close()


def test_the_timer_uses_the_programs_own_time_when_it_reports_one():
    """A program that reports its own elapsed time is timed by that time, and the row says so."""
    from fftgauge.harness.timing.case_job import time_case

    backend = load_backend(server_spec("ok"))
    try:
        row = time_case(backend, ("fft", "float64", 256, "backward"),
                        {"samples": 7, "budget_seconds": 2.0, "measure_memory": False})
    finally:
        backend.close()
    assert row["timing_source"] == "program" and "program itself" in row["message"]
    assert row["loops"] == 1 and 0 < row["seconds"] < 0.01
