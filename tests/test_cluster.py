"""The Dask cluster executor (issue 17), on loopback only: the ``--cluster`` grammar, the
chunk rule, the workers' check, dask left unimported by local runs, and (slow) a LocalCluster
started here running a small battery and a small timing run, a segfaulting backend, a lost
worker, an unreachable scheduler, and no process left behind.

The comparisons are against the local run of the same request and seed (the same engine,
:func:`fftgauge.harness.battery.run.run_battery`): the cluster changes where cases run, never
what they give.
"""

from __future__ import annotations

import json
import os
import signal
import subprocess
import sys
import threading
import time
from pathlib import Path

import psutil
import pytest

from fftgauge import __version__
from fftgauge.harness.cli import main
from fftgauge.harness.cluster.chunks import MIN_TASK_SECONDS, OVERHEAD_SHARE, SpecQueue, chunk_cases, size_groups
from fftgauge.harness.cluster.session import worker_problems
from fftgauge.harness.cluster.target import parse_cluster
from fftgauge.harness.errors import UsageError

DATA = Path(__file__).parent / "data"
SEGFAULT = f"{DATA / 'misbehaving.py'}:segfault_fft"
SLOW = f"{DATA / 'slow_fft.py'}:fft"
REPO = Path(__file__).resolve().parent.parent


# -- the --cluster value --------------------------------------------------------------------
@pytest.mark.parametrize("text, address, local", [
    ("tcp://10.0.0.5:8786", "tcp://10.0.0.5:8786", 0),
    ("10.0.0.5:8786", "tcp://10.0.0.5:8786", 0),
    ("tls://scheduler.example:8786", "tls://scheduler.example:8786", 0),
    ("tcp://[::1]:8786", "tcp://[::1]:8786", 0),
    ("local:3", None, 3),
])
def test_cluster_values_that_are_addresses(text: str, address: str | None, local: int) -> None:
    target = parse_cluster(text)
    assert (target.address, target.local_processes) == (address, local)


@pytest.mark.parametrize("text, says", [
    ("foo", "is not an address"), ("local:0", "1 <= N"), ("local:x", "is not an address"),
    ("http://h:8786", "unknown scheme 'http'"), ("tcp://h:99999", "outside 1..65535"), ("tcp://h", "not an address"),
])
def test_cluster_values_that_are_not_addresses(text: str, says: str) -> None:
    with pytest.raises(UsageError, match=says):
        parse_cluster(text)


def test_a_bad_cluster_value_is_one_line_and_exit_2(capsys: pytest.CaptureFixture[str]) -> None:
    assert main(["check", "--backend", "numpy", "--sizes", "8", "--cluster", "not-an-address"]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and "not an address" in err[0] and "Traceback" not in err[0]


def test_gate_with_a_cluster_is_one_line_and_exit_2(capsys: pytest.CaptureFixture[str]) -> None:
    assert main(["gate", "--old", "numpy", "--new", "numpy", "--cluster", "local:2"]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and "on this machine only" in err[0] and "--cluster" in err[0]


# -- the chunk rule -------------------------------------------------------------------------
def test_a_chunk_makes_the_overhead_a_small_share_of_its_work() -> None:
    # 10 ms of overhead, 1 ms per case, plenty left: a task of overhead / share = 0.2 s = 200 cases,
    # so the overhead is 10 / (10 + 200) < 5 % of the task.
    cases = chunk_cases(0.010, 0.001, remaining_cases=100_000, workers=2)
    assert cases == round(0.010 / OVERHEAD_SHARE / 0.001)
    assert 0.010 / (0.010 + cases * 0.001) <= OVERHEAD_SHARE


def test_a_chunk_leaves_work_for_every_worker_at_the_end_and_never_drops_below_the_floor() -> None:
    # 1000 cases of 10 ms left on 8 threads: 10 s of work, 4 tasks per thread -> 0.31 s a task;
    # the overhead alone (1 s / 0.05 = 20 s) would ask for far more.
    assert chunk_cases(1.0, 0.010, remaining_cases=1000, workers=8) == 32
    # nearly done: the floor of MIN_TASK_SECONDS of work holds
    assert chunk_cases(0.01, 0.001, remaining_cases=30, workers=8) == min(30, round(MIN_TASK_SECONDS / 0.001))
    assert chunk_cases(0.01, 0.001, remaining_cases=0, workers=8) == 0


def test_a_queue_hands_out_whole_sizes_largest_first_and_learns_each_backends_cost() -> None:
    sizes = [8, 16, 8, 16, 32, 32]
    queue = SpecQueue("numpy", size_groups(list(range(6)), sizes))
    assert queue.take(None) == [4, 5]            # unknown cost: one size, the largest
    assert queue.take(3) == [1, 3]               # a size is never split: 2 + 2 > 3
    queue.learn(cases=4, seconds=2.0)
    assert queue.case_seconds == 0.5 and queue.left == 2


# -- the workers' check -----------------------------------------------------------------------
def test_every_worker_lacking_something_is_named_in_one_line() -> None:
    workers = {"tcp://10.0.0.5:1": "10.0.0.5", "tcp://10.0.0.6:1": "10.0.0.6", "tcp://10.0.0.7:1": "10.0.0.7"}
    answers = {"tcp://10.0.0.5:1": ModuleNotFoundError("No module named 'fftgauge'"),
               "tcp://10.0.0.6:1": {"fftgauge": "0.0.1", "missing": {"pyfftw": "no module named 'pyfftw'"}},
               "tcp://10.0.0.7:1": {"fftgauge": __version__, "missing": {}}}
    problems = worker_problems(answers, workers)
    assert len(problems) == 3
    assert "host 10.0.0.5" in problems[0] and "No module named 'fftgauge'" in problems[0]
    assert "host 10.0.0.6" in problems[1] and f"fftgauge 0.0.1, this machine {__version__}" in problems[1]
    assert "host 10.0.0.6" in problems[2] and "'pyfftw'" in problems[2]


# -- the worker processes' environment ---------------------------------------------------------
def test_the_variables_a_dask_nanny_forces_are_taken_out_of_the_worker_processes_environment() -> None:
    # distributed's own configuration (distributed.yaml, ``nanny.pre-spawn-environ``) names what a
    # nanny sets: MALLOC_TRIM_THRESHOLD_=65536 among them, which switches off glibc's dynamic mmap
    # threshold (mallopt(3)); a value the user chose that differs from the nanny's stays.
    import dask
    import distributed  # noqa: F401 - its import loads the ``distributed`` settings

    from fftgauge.harness.cluster.tasks import NANNY_HASH_SEED, clean_environ, nanny_environ

    forced = dask.config.get("distributed.nanny.pre-spawn-environ")
    assert str(forced["MALLOC_TRIM_THRESHOLD_"]) == nanny_environ()["MALLOC_TRIM_THRESHOLD_"]
    environ = {"MALLOC_TRIM_THRESHOLD_": str(forced["MALLOC_TRIM_THRESHOLD_"]), "OMP_NUM_THREADS": "4",
               NANNY_HASH_SEED[0]: NANNY_HASH_SEED[1], "PATH": "/usr/bin"}
    removed = clean_environ(environ)
    assert sorted(removed) == sorted(["MALLOC_TRIM_THRESHOLD_", NANNY_HASH_SEED[0]])
    assert environ == {"OMP_NUM_THREADS": "4", "PATH": "/usr/bin"}


# -- dask only with --cluster -----------------------------------------------------------------
def test_a_local_check_never_imports_dask(tmp_path: Path) -> None:
    code = ("import sys\nfrom fftgauge.harness.cli import main\n"
            f"code = main(['check', '--backend', 'numpy', '--sizes', '8', '--kinds', 'fft', '--dtypes', 'float64', "
            f"'--quiet', '--json', {str(tmp_path / 'run.json')!r}])\n"
            "loaded = sorted(m for m in sys.modules if m.split('.')[0] in ('dask', 'distributed'))\n"
            "print(code, loaded)\n")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, timeout=240, cwd=tmp_path)
    assert out.stdout.strip().splitlines()[-1] == "0 []", out.stderr[-2000:]


# -- on a LocalCluster started here (slow) -----------------------------------------------------
@pytest.fixture(scope="module")
def cluster():
    """A LocalCluster of two one-thread processes with a timing slot each (what
    ``dask worker --resources timing=1`` gives), a lost worker's task retried once."""
    import dask
    from distributed import Client, LocalCluster

    with dask.config.set({"distributed.scheduler.allowed-failures": 1}):
        local = LocalCluster(n_workers=2, threads_per_worker=1, processes=True, resources={"timing": 1},
                             dashboard_address=":0", host="127.0.0.1")
    client = Client(local, set_as_default=False)
    yield local, client
    client.close()
    local.close()


def rows_without_host(rows: list[dict]) -> list[dict]:
    return [{k: v for k, v in row.items() if k != "host"} for row in rows]


@pytest.mark.slow
def test_a_cluster_battery_gives_the_local_rows_field_for_field(cluster, tmp_path: Path) -> None:
    from fftgauge.harness.battery.request import build_request
    from fftgauge.harness.battery.run import run_battery
    from fftgauge.harness.cluster.battery import run_battery_on_cluster

    local, _ = cluster
    req = build_request(backends=["numpy"], sizes="1..12", dtypes="float64", seed=4321)
    here = run_battery(req)
    there = run_battery_on_cluster(req, parse_cluster(local.scheduler_address), json_path=str(tmp_path / "c.json"))
    assert there["complete"] and {r.get("host") for r in there["rows"] if r["check"] != "all"} == {"127.0.0.1"}
    assert rows_without_host(there["rows"]) == here["rows"]
    assert json.loads((tmp_path / "c.json").read_text())["rows"] == there["rows"]


@pytest.mark.slow
def test_a_cluster_timing_run_gives_one_row_per_case_with_its_host_and_fingerprint(cluster) -> None:
    from fftgauge.harness.cluster.timing import run_timing_on_cluster
    from fftgauge.harness.machine import machine_fingerprint
    from fftgauge.harness.timing.runner import TimingRequest

    local, _ = cluster
    req = TimingRequest(specs=("numpy",), kinds=("fft", "rfft"), dtypes=("float64",), sizes=(16, 64), samples=5,
                        budget_seconds=0.05, rounds=1, measure_memory=False)
    doc = run_timing_on_cluster(req, parse_cluster(local.scheduler_address), pin="off")
    assert doc["complete"]
    assert sorted((r["kind"], r["n"]) for r in doc["rows"]) == [("fft", 16), ("fft", 64), ("rfft", 16), ("rfft", 64)]
    assert all(r["status"] == "ok" and r["seconds"] > 0 for r in doc["rows"])
    assert {r["host"] for r in doc["rows"]} == {"127.0.0.1"}
    assert all(r["machine"] == machine_fingerprint() for r in doc["rows"])  # loopback: this machine


@pytest.mark.slow
def test_a_cluster_check_of_shapes_and_sizes_gives_the_local_rows_field_for_field(cluster, tmp_path: Path) -> None:
    # the local engine (shapes.battery.run_check_request: 1-D first, then the shaped cases) is the reference
    from fftgauge.harness.battery.request import build_request
    from fftgauge.harness.cluster.battery import run_battery_on_cluster
    from fftgauge.harness.shapes.battery import run_check_request

    local, _ = cluster
    req = build_request(backends=["numpy"], sizes="6,8", shapes="8x8,6x5,4x3x2 over 0+2", layouts="C,F",
                        dtypes="float64", seed=4321)
    here = run_check_request(req, json_path=str(tmp_path / "l.json"))
    there = run_battery_on_cluster(req, parse_cluster(local.scheduler_address), json_path=str(tmp_path / "c.json"))
    assert there["complete"] and sum(1 for r in there["rows"] if r.get("shape")) > 0
    assert {r["host"] for r in there["rows"]} == {"127.0.0.1"}
    assert rows_without_host(there["rows"]) == here["rows"]
    for key in ("request", "backends", "reference"):
        assert there[key] == here[key]
    assert there["cluster"]["shaped_chunks"]["tasks"] >= 1
    assert json.loads((tmp_path / "c.json").read_text())["rows"] == there["rows"]


#: The fields of a time row that name its case and outcome (the rest are measurements, which differ run to run).
TIME_CASE_FIELDS = ("backend", "kind", "dtype", "n", "norm", "threads", "status", "shape", "axes", "layout", "batch",
                    "points", "flops", "in_place")


@pytest.mark.slow
def test_a_cluster_timing_run_of_shapes_gives_the_local_cases_with_host_and_fingerprint(cluster) -> None:
    from fftgauge.harness.cluster.timing import run_timing_on_cluster
    from fftgauge.harness.machine import machine_fingerprint
    from fftgauge.harness.shapes.request import shaped_fields
    from fftgauge.harness.timing.runner import TimingRequest, run_timing

    local, _ = cluster
    cases = shaped_fields("8x8,6x5", "C,F", "fftn,rfftn", "float64", "backward", None)["shape_cases"]
    req = TimingRequest(specs=("numpy",), kinds=("fftn", "rfftn"), dtypes=("float64",), sizes=(), samples=5,
                        budget_seconds=0.05, rounds=1, measure_memory=False, shape_cases=tuple(cases))
    here = run_timing(req)
    there = run_timing_on_cluster(req, parse_cluster(local.scheduler_address), pin="off")
    assert there["complete"] and len(there["rows"]) == len(cases) == 8
    assert [{k: r.get(k) for k in TIME_CASE_FIELDS} for r in there["rows"]] == \
        [{k: r.get(k) for k in TIME_CASE_FIELDS} for r in here["rows"]]
    assert all(r["status"] == "ok" and r["seconds"] > 0 for r in there["rows"])
    assert {r["host"] for r in there["rows"]} == {"127.0.0.1"}
    assert all(r["machine"] == machine_fingerprint() for r in there["rows"])  # loopback: this machine
    assert there["request"]["shapes"] == here["request"]["shapes"]


@pytest.mark.slow
def test_killing_a_dask_worker_mid_run_loses_no_finished_row(cluster, tmp_path: Path) -> None:
    from fftgauge.harness.battery.request import build_request
    from fftgauge.harness.cluster.battery import run_battery_on_cluster

    local, client = cluster
    path = tmp_path / "kill.json"
    req = build_request(backends=[SLOW], sizes="1..24", kinds="fft", dtypes="float64")
    result: dict = {}
    run = threading.Thread(target=lambda: result.update(
        doc=run_battery_on_cluster(req, parse_cluster(local.scheduler_address), json_path=str(path))), daemon=True)
    run.start()
    seen: list[dict] = []
    deadline = time.monotonic() + 120
    while not seen and time.monotonic() < deadline:
        time.sleep(0.2)
        if path.exists():
            seen = [r for r in json.loads(path.read_text())["rows"] if r.get("host")]
    assert seen, "no row arrived"
    pids = client.run(os.getpid)
    os.kill(sorted(pids.values())[0], signal.SIGKILL)
    run.join(240)
    assert not run.is_alive()
    doc = result["doc"]
    assert doc["complete"]
    key = lambda r: (r["backend"], r["kind"], r["dtype"], r["norm"], r["n"], r["check"])  # noqa: E731
    final = {key(r): r for r in doc["rows"]}
    assert all(final[key(r)] == r for r in seen)                 # every row written before the kill is kept
    assert {r["n"] for r in doc["rows"]} == set(range(1, 25))  # and every case has its rows


@pytest.mark.slow
def test_a_segfaulting_backend_gives_error_rows_and_leaves_no_process(tmp_path: Path) -> None:
    path = tmp_path / "seg.json"
    cmd = [sys.executable, "-c", "import sys; from fftgauge.harness.cli import main; sys.exit(main(sys.argv[1:]))",
           "check", "--backend", SEGFAULT, "--sizes", "8,16",
           "--kinds", "fft", "--dtypes", "float64", "--cluster", "local:2", "--quiet", "--json", str(path)]
    proc = psutil.Popen(cmd, cwd=tmp_path, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
    seen: dict[int, psutil.Process] = {}
    while proc.poll() is None:
        try:
            seen.update({p.pid: p for p in proc.children(recursive=True)})
        except psutil.NoSuchProcess:
            pass
        time.sleep(0.1)
    out, err = proc.communicate(timeout=10)
    assert proc.returncode == 1, err[-2000:]
    doc = json.loads(path.read_text())
    case_rows = [r for r in doc["rows"] if r["check"] != "all"]
    assert case_rows and all(r["status"] == "error" and "SIGSEGV" in r["message"] for r in case_rows)
    assert {r["host"] for r in case_rows} == {"127.0.0.1"}
    assert seen, "the run started no process"
    _, alive = psutil.wait_procs(list(seen.values()), timeout=15)
    assert not alive, [p.cmdline() for p in alive]


@pytest.mark.slow
def test_an_unreachable_scheduler_is_one_line_and_exit_2_within_the_timeout(monkeypatch, capsys) -> None:
    import socket

    from fftgauge.harness.cluster import session

    monkeypatch.setattr(session, "CONNECT_TIMEOUT_SECONDS", 2.0)
    with socket.socket() as sock:  # a port nobody listens on
        sock.bind(("127.0.0.1", 0))
        port = sock.getsockname()[1]
    started = time.monotonic()
    assert main(["check", "--backend", "numpy", "--sizes", "8", "--cluster", f"tcp://127.0.0.1:{port}"]) == 2
    assert time.monotonic() - started < 30
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and "cannot reach the Dask scheduler" in err[0]


# -- a scheduler and workers started as `dask scheduler` / `dask worker` (slow) ------------------
def free_port() -> int:
    import socket

    with socket.socket() as sock:
        sock.bind(("127.0.0.1", 0))
        return sock.getsockname()[1]


def dask_command(*args: str) -> list[str]:
    """Return the ``dask`` command line of this environment (the console script beside Python)."""
    script = Path(sys.executable).parent / "dask"
    if not script.exists():
        pytest.skip("no dask console script beside this Python")
    return [str(script), *args]


def start_scheduler_and_workers(tmp_path: Path, hosts: tuple[str, ...],
                                extra: dict[str, list[str]] | None = None) -> tuple[str, list[subprocess.Popen]]:
    """Start ``dask scheduler`` and one ``dask worker --resources timing=1`` per loopback host
    (127.0.0.1, 127.0.0.2: two hosts as the scheduler sees them; ``extra``: more options of a
    host's worker); return (address, processes)."""
    port = free_port()
    address = f"tcp://127.0.0.1:{port}"
    log = open(tmp_path / "dask.log", "w")
    procs = [subprocess.Popen(dask_command("scheduler", "--host", "127.0.0.1", "--port", str(port), "--no-dashboard"),
                              stdout=log, stderr=log, start_new_session=True)]
    from distributed import Client

    deadline = time.monotonic() + 60
    for host in hosts:
        procs.append(subprocess.Popen(dask_command("worker", address, "--host", host, "--nthreads", "1",
                                                   "--resources", "timing=1", "--no-dashboard",
                                                   *(extra or {}).get(host, [])),
                                      stdout=log, stderr=log, start_new_session=True))
    while time.monotonic() < deadline:
        try:
            with Client(address, timeout=5, set_as_default=False) as client:
                if len(client.scheduler_info(n_workers=-1)["workers"]) == len(hosts):
                    return address, procs
        except OSError:
            pass
        time.sleep(0.5)
    stop_processes(procs)
    pytest.fail("the scheduler and workers did not come up: " + (tmp_path / "dask.log").read_text()[-2000:])


def stop_processes(procs: list[subprocess.Popen]) -> None:
    for proc in reversed(procs):
        if proc.poll() is None:
            os.killpg(proc.pid, signal.SIGTERM)
    for proc in procs:
        try:
            proc.wait(timeout=20)
        except subprocess.TimeoutExpired:
            os.killpg(proc.pid, signal.SIGKILL)
            proc.wait(timeout=10)


@pytest.mark.slow
def test_two_hosts_time_every_case_into_one_table_with_a_host_column(tmp_path: Path, capsys) -> None:
    address, procs = start_scheduler_and_workers(tmp_path, ("127.0.0.1", "127.0.0.2"))
    try:
        path = tmp_path / "t.json"
        code = main(["time", "--backend", "numpy", "--sizes", "16,64", "--kinds", "fft", "--samples", "5", "--rounds",
                     "1", "--budget", "0.05", "--no-memory", "--pin-cpu", "off", "--cluster", address,
                     "--json", str(path), "--quiet"])
    finally:
        stop_processes(procs)
    assert code == 0
    rows = json.loads(path.read_text())["rows"]
    assert sorted((r["host"], r["n"]) for r in rows) == [("127.0.0.1", 16), ("127.0.0.1", 64),
                                                         ("127.0.0.2", 16), ("127.0.0.2", 64)]
    out = capsys.readouterr().out
    assert "numpy @ 127.0.0.1" in out and "numpy @ 127.0.0.2" in out  # one table, a column per host


@pytest.mark.slow
def test_a_scheduler_that_vanishes_mid_run_keeps_the_rows_and_exits_2(tmp_path: Path) -> None:
    address, procs = start_scheduler_and_workers(tmp_path, ("127.0.0.1",))
    path = tmp_path / "v.json"
    cmd = [sys.executable, "-c", "import sys; from fftgauge.harness.cli import main; sys.exit(main(sys.argv[1:]))",
           "check", "--backend", SLOW, "--kinds", "fft", "--dtypes", "float64", "--sizes", "1..300",
           "--cluster", address, "--quiet", "--json", str(path)]
    run = subprocess.Popen(cmd, cwd=tmp_path, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
    try:
        deadline = time.monotonic() + 120
        while time.monotonic() < deadline and not (path.exists() and any(
                r.get("host") for r in json.loads(path.read_text())["rows"])):
            time.sleep(0.2)
        os.killpg(procs[0].pid, signal.SIGKILL)  # the scheduler
        killed = time.monotonic()
        out, err = run.communicate(timeout=90)
    finally:
        if run.poll() is None:
            run.kill()
        stop_processes(procs)
    assert run.returncode == 2 and time.monotonic() - killed < 60
    lines = [line for line in err.strip().splitlines() if line.startswith("fftgauge:")]
    assert len(lines) == 1 and "went away mid-run" in lines[0] and "Traceback" not in err
    doc = json.loads(path.read_text())
    assert doc["complete"] is False and doc["rows"]
    assert not [r for r in doc["rows"] if r["status"] == "error"]  # the lost chunks are no error rows


BLOCKER = '''import sys
class Blocker:
    """Make fftgauge unimportable here: a worker of a host where it is not installed."""
    def find_spec(self, name, path=None, target=None):
        if name.split(".")[0] == "fftgauge":
            raise ModuleNotFoundError(f"No module named {name!r}", name=name)
for name in [m for m in sys.modules if m.split(".")[0] == "fftgauge"]:
    del sys.modules[name]
sys.meta_path.insert(0, Blocker())
'''


@pytest.mark.slow
def test_a_worker_without_fftgauge_is_named_in_one_line_exit_2(tmp_path: Path, capsys) -> None:
    preload = tmp_path / "no_fftgauge_here.py"
    preload.write_text(BLOCKER)
    address, procs = start_scheduler_and_workers(tmp_path, ("127.0.0.1", "127.0.0.2"),
                                                 {"127.0.0.2": ["--preload", str(preload)]})
    try:
        code = main(["check", "--backend", "numpy", "--sizes", "8", "--cluster", address, "--quiet"])
    finally:
        stop_processes(procs)
    err = capsys.readouterr().err.strip().splitlines()
    assert code == 2 and len(err) == 1
    assert "host 127.0.0.2" in err[0] and "No module named 'fftgauge'" in err[0] and "127.0.0.1" not in err[0]


def test_a_wait_that_runs_out_is_one_line_not_a_traceback() -> None:
    from fftgauge.harness.cluster.session import ClusterLost, call_with_timeout

    with pytest.raises(ClusterLost, match="the probe got no answer within 0.1 s"):
        call_with_timeout(lambda: time.sleep(5), 0.1, "the probe")
    assert call_with_timeout(lambda: 42, 5.0, "an answer") == 42


@pytest.mark.slow
def test_workers_that_do_not_answer_the_check_in_time_are_exit_2(monkeypatch, capsys) -> None:
    from fftgauge.harness.cluster import session

    monkeypatch.setattr(session, "PROBE_TIMEOUT_SECONDS", 0.001)
    assert main(["check", "--backend", "numpy", "--sizes", "8", "--cluster", "local:1", "--quiet"]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and "the check of the workers got no answer within 0.001 s" in err[0], err
