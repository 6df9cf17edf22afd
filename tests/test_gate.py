"""The gate's statistics and decision rule on synthetic sample sets, its outputs, and small
real A/B runs. Statistics are checked against scipy.stats and against Holm 1979 ("A simple
sequentially rejective multiple test procedure", Scand. J. Statist. 6 65-70) by hand."""

import json
import xml.etree.ElementTree as ET

import numpy as np
import pytest
from scipy import stats as sps

from fftgauge.harness import cli
from fftgauge.harness.gate.decision import decide, holm_adjusted, is_conclusive, timing_verdict
from fftgauge.harness.gate.estimates import estimate_ab
from fftgauge.harness.stats import holm_bonferroni, mann_whitney_p

RNG = np.random.default_rng(20261202)


def _samples(median, n=200, spread=0.02, rng=RNG):
    """Lognormal timing samples around ``median`` (relative spread ``spread``)."""
    return list(median * np.exp(rng.normal(0.0, spread, n)))


def test_clear_regression_is_slower():
    est = estimate_ab(_samples(1e-5), _samples(1.10e-5), seed=1)
    (verdict, significant, _), = decide([est], threshold=0.05, alpha=0.05)
    assert verdict == "slower" and significant and 1.08 < est.ratio < 1.12


def test_clear_improvement_is_faster():
    est = estimate_ab(_samples(1e-5), _samples(0.85e-5), seed=2)
    assert decide([est], 0.05, 0.05)[0][0] == "faster"


def test_pure_noise_is_same_over_many_trials():
    """No false alarm in 50 seeded trials of identical distributions."""
    rng = np.random.default_rng(7)
    verdicts = [decide([estimate_ab(_samples(1e-5, rng=rng), _samples(1e-5, rng=rng), seed=i)], 0.05, 0.05)[0][0]
                for i in range(50)]
    assert verdicts.count("same") == 50


def test_small_significant_change_below_threshold_is_same():
    """2% slower, clearly significant, but under the 5% threshold: not a regression."""
    est = estimate_ab(_samples(1e-5, spread=0.005), _samples(1.02e-5, spread=0.005), seed=3)
    assert est.p_value < 1e-6
    assert timing_verdict(est, True, 0.05) == "same"


def test_interval_straddling_the_threshold_is_inconclusive():
    est = estimate_ab(_samples(1e-5, n=10, spread=0.1), _samples(1.05e-5, n=10, spread=0.1), seed=4)
    assert est.ratio_low < 1.05 < est.ratio_high
    assert not is_conclusive(est, 0.05)


def test_mann_whitney_matches_scipy():
    old, new = _samples(1.0, 40), _samples(1.03, 40)
    expected = sps.mannwhitneyu(old, new, alternative="two-sided").pvalue
    assert mann_whitney_p(old, new) == pytest.approx(expected)
    assert estimate_ab(old, new, seed=5).p_value == pytest.approx(expected)


def test_holm_by_hand():
    """Holm 1979 worked by hand: p = (0.01, 0.04, 0.03, 0.005), m = 4, alpha = 0.05.
    Sorted: 0.005 <= 0.05/4 reject; 0.01 <= 0.05/3 reject; 0.03 > 0.05/2 stop."""
    p = [0.01, 0.04, 0.03, 0.005]
    assert holm_bonferroni(p, 0.05) == [True, False, False, True]
    adjusted = holm_adjusted(p)
    assert adjusted == pytest.approx([0.03, 0.06, 0.06, 0.02])
    assert [a <= 0.05 for a in adjusted] == holm_bonferroni(p, 0.05)


def _ab(tmp_path, new, sizes="256,2048", extra=()):
    md, xml_path, js = tmp_path / "g.md", tmp_path / "g.xml", tmp_path / "g.json"
    code = cli.main(["gate", "--old", "numpy", "--new", new, "--kinds", "fft", "--dtypes", "float64",
                     "--sizes", sizes, "--budget", "4", "--quiet", "--markdown", str(md), "--junit", str(xml_path),
                     "--json", str(js), *extra])
    return code, md, xml_path, js


def test_ab_numpy_against_itself_then_against_a_50_percent_slowdown(tmp_path):
    code, md, xml_path, js = _ab(tmp_path, "numpy")
    doc = json.loads(js.read_text())
    assert doc["schema"] == "fftgauge-gate/1" and doc["regressed"] is False and code == 0, doc["rows"]
    for row in doc["rows"]:
        assert {"backend", "kind", "dtype", "n", "ratio", "ratio_low", "ratio_high", "p_value", "verdict"} <= set(row)
        assert row["verdict"] in ("same", "faster", "slower", "accuracy")
    assert "PASS" in md.read_text()

    code, md, xml_path, js = _ab(tmp_path, "slowed[percent=50]")
    doc = json.loads(js.read_text())
    assert code == 1 and doc["regressed"] is True
    assert all(r["verdict"] == "slower" and r["ratio"] > 1.2 for r in doc["rows"]), doc["rows"]
    suite = ET.parse(xml_path).getroot()
    assert len(list(suite.iter("testcase"))) == 2 and len(list(suite.iter("failure"))) == 2
    assert "FAIL" in md.read_text()


def test_a_crashing_backend_still_writes_the_summary_and_exits_1(tmp_path):
    code, md, xml_path, js = _ab(tmp_path, "tests/data/misbehaving.py:abort_fft", sizes="64")
    assert code == 1
    doc = json.loads(js.read_text())
    assert doc["rows"] and doc["rows"][0]["status"] == "error" and "SIGABRT" in doc["rows"][0]["message"]
    assert md.exists() and ET.parse(xml_path).getroot() is not None


def _stored_run(path, seconds, p10, yard=None):
    from fftgauge.harness.gate.history import StoredRun

    row = {"backend": "numpy", "kind": "fft", "dtype": "float64", "n": 1024, "norm": "backward",
           "seconds": seconds, "seconds_low": seconds * 0.98, "seconds_high": seconds * 1.02}
    if p10 is not None:
        row.update(seconds_p10=p10, seconds_p10_low=p10 * 0.99, seconds_p10_high=p10 * 1.01)
    return StoredRun(path=path, created="2026-12-01T00:00:00Z", schema="fftgauge-time/1", machine={},
                     yardstick=yard, rows=(row,), backends={"numpy": "numpy"})


def test_stored_mode_compares_10th_percentiles_when_every_run_has_them():
    """A baseline recorded on a loaded machine (medians 30% above the fast samples) against a
    candidate measured on a quiet one: the medians would read 0.77, the 10th percentiles
    (what load moves least) read about 1."""
    from fftgauge.harness.cases import Case
    from fftgauge.harness.gate.estimates import estimate_stored
    from fftgauge.harness.gate.history import baseline_for

    case = Case("fft", "float64", 1024)
    runs = [_stored_run(f"r{i}", 13e-6 * (1 + 0.01 * i), 10e-6 * (1 + 0.005 * i)) for i in range(3)]
    raw, corrected, _ = baseline_for(runs, "numpy", case, 0.95)
    assert corrected is None and raw.statistic == "p10" and raw.runs == 3
    rng = np.random.default_rng(5)
    quiet = list(10.05e-6 * (1 + np.abs(rng.normal(0, 0.01, 60))) / 1.0)
    est = estimate_stored(raw, quiet, None)
    assert 0.97 < est.ratio < 1.05 and "p10 times" in est.method
    assert timing_verdict(est, True, 0.05) == "same"

    # one stored run without the percentile (an older file): medians for every run
    runs[1] = _stored_run("r1", 13e-6, None)
    raw, _, _ = baseline_for(runs, "numpy", case, 0.95)
    assert raw.statistic == "median"
    assert estimate_stored(raw, quiet, None).ratio < 0.85


def test_stored_mode_yardstick_statistic_follows_its_records():
    from fftgauge.harness.cases import Case
    from fftgauge.harness.gate.estimates import estimate_stored
    from fftgauge.harness.gate.history import baseline_for
    from fftgauge.harness.gate.yardstick import YARDSTICK_ROUNDS, YARDSTICK_VERSION, summarise

    yard = summarise([1e-3 * (1 + 0.001 * k) for k in range(40)])
    assert yard["version"] == YARDSTICK_VERSION and yard["rounds"] == YARDSTICK_ROUNDS
    assert yard["seconds_p10"] <= yard["seconds"]
    runs = [_stored_run(f"r{i}", 13e-6, 10e-6, yard) for i in range(2)]
    raw, corrected, _ = baseline_for(runs, "numpy", Case("fft", "float64", 1024), 0.95)
    assert corrected.statistic == "p10" and corrected.yardstick_statistic == "p10"
    # the machine is now uniformly 20% slower: case and yardstick alike; the corrected ratio stays 1
    slower_yard = summarise([1.2e-3 * (1 + 0.001 * k) for k in range(40)])
    samples = list(np.linspace(12e-6, 15e-6, 50))
    est = estimate_stored(corrected, samples, slower_yard)
    assert est.corrected and est.ratio == pytest.approx(est.ratio_raw / 1.2, rel=0.02)


# -- referenced mode: this run's A/B ratio against stored A/B ratios --------------------------

def test_referenced_mode_end_to_end(tmp_path):
    """Two saved A/B runs of numpy against numpy seed the history; the same comparison passes
    against it, and a candidate 50% slower than the reference fails (the stored candidate's
    label named with --baseline-backend)."""
    history = tmp_path / "history"
    for i in range(2):
        code, *_ = _ab(tmp_path, "numpy", sizes="1024", extra=("--save", str(history)))
        assert code == 0
    code, md, xml_path, js = _ab(tmp_path, "numpy", sizes="1024", extra=("--baseline", str(history)))
    doc = json.loads(js.read_text())
    assert code == 0 and doc["mode"] == "referenced" and doc["regressed"] is False
    (row,) = doc["rows"]
    assert row["baseline_runs"] == 2 and row["ab_ratio"] > 0 and row["verdict"] == "same"
    assert "stored A/B ratios" in md.read_text()

    code, md, xml_path, js = _ab(tmp_path, "slowed[percent=50]", sizes="1024",
                                 extra=("--baseline", str(history), "--baseline-backend", "numpy"))
    doc = json.loads(js.read_text())
    assert code == 1 and doc["rows"][0]["verdict"] == "slower" and doc["rows"][0]["ratio"] > 1.2


def test_referenced_mode_needs_stored_ratios(tmp_path, capsys):
    history = tmp_path / "history"
    _ab(tmp_path, "numpy", sizes="1024", extra=("--save", str(history)))
    code = cli.main(["gate", "--old", "numpy", "--new", "numpy", "--sizes", "1024", "--kinds", "fft", "--quiet",
                     "--baseline", str(history), "--baseline-backend", "nothing"])
    assert code == 2 and "holds no A/B ratio of nothing against numpy" in capsys.readouterr().err


def test_ratio_baseline_prefers_ab_ratio_and_reads_older_ab_rows():
    from fftgauge.harness.cases import Case
    from fftgauge.harness.gate.estimates import estimate_paired, estimate_referenced
    from fftgauge.harness.gate.history import StoredRun, ratio_baseline_for

    def run(path, **fields):
        row = {"backend": "mine", "baseline_backend": "numpy", "kind": "fft", "dtype": "float64", "n": 64,
               "seconds": 1e-6, **fields}
        return StoredRun(path=path, created="2026-12-01T00:00:00Z", schema="fftgauge-gate/1", machine={},
                         yardstick=None, rows=(row,), backends={})

    case = Case("fft", "float64", 64)
    runs = [run("a", ratio=1.5, ratio_low=1.4, ratio_high=1.6, baseline_runs=3, ab_ratio=1.02, ab_ratio_low=1.0,
                ab_ratio_high=1.04),
            run("b", ratio=0.98, ratio_low=0.97, ratio_high=0.99, baseline_runs=None)]
    base = ratio_baseline_for(runs, "mine", "numpy", case, 0.95)
    assert base.runs == 2 and base.value == pytest.approx(np.median([1.02, 0.98]))
    assert ratio_baseline_for(runs, "mine", "scipy", case, 0.95) is None
    # this run: the candidate 10% slower than the reference, in 40 block pairs
    rng = np.random.default_rng(9)
    old = list(1e-5 * np.exp(rng.normal(0, 0.01, 200)))
    new = list(1.1e-5 * np.exp(rng.normal(0, 0.01, 200)))
    ab = estimate_paired(old, new, 5)
    est = estimate_referenced(ab, base)
    assert est.ratio == pytest.approx(ab.ratio / base.value) and est.ratio_raw == ab.ratio
    assert est.ratio_low < est.ratio < est.ratio_high


def test_stored_mode_end_to_end_compares_10th_percentiles(tmp_path):
    """Two recorded runs of numpy seed a history; numpy against it passes, a candidate three
    times as slow fails. The threshold is 50% here so that the machine's own run-to-run
    swings (see README, measured performance) cannot make the test flaky."""
    history = tmp_path / "history"
    for _ in range(2):
        assert cli.main(["gate", "--backend", "numpy", "--kinds", "fft", "--sizes", "1024", "--budget", "2",
                         "--quiet", "--save", str(history), "--json", str(tmp_path / "r.json")]) == 0
    js = tmp_path / "s.json"
    code = cli.main(["gate", "--backend", "numpy", "--baseline", str(history), "--threshold", "50%", "--budget", "2",
                     "--quiet", "--json", str(js)])
    doc = json.loads(js.read_text())
    assert code == 0 and doc["mode"] == "stored"
    (row,) = doc["rows"]
    assert row["compared_statistic"] == "p10" and row["seconds_p10"] <= row["seconds"] and row["verdict"] == "same"
    assert doc["yardstick"]["ratio_statistic"] == "p10"
    code = cli.main(["gate", "--backend", "slowed[percent=200]", "--baseline-backend", "numpy", "--baseline",
                     str(history), "--threshold", "50%", "--budget", "2", "--quiet", "--json", str(js)])
    doc = json.loads(js.read_text())
    assert code == 1 and doc["rows"][0]["verdict"] == "slower" and doc["rows"][0]["ratio"] > 2


# -- a fake sampler: the gate's run without processes and without a real clock ----------------

class FakeClock:
    """Seconds that pass only when the fake sampler says so."""

    def __init__(self):
        self.now = 0.0

    def __call__(self):
        return self.now


class FakeSampler:
    """Stands in for WorkerSampler: each side's per-call seconds drawn from a seeded lognormal
    (``times`` maps a worker key to its median seconds, ``spread`` the log-scale sigma), each
    block pair advancing the fake clock by ``pair_seconds``; ``yardstick_seconds`` gives one
    yardstick block per sample() call."""

    def __init__(self, times, clock, spread=0.01, pair_seconds=0.01, yardstick_seconds=1e-3,
                 samples_per_block=5, seed=3, labels=None, low_tail=None):
        self.times, self.clock, self.spread = dict(times), clock, spread
        self.pair_seconds, self.yardstick_seconds = pair_seconds, yardstick_seconds
        self.samples_per_block = samples_per_block
        self.rng = np.random.default_rng(seed)
        self.labels = labels or {}
        self.low_tail = low_tail
        self.calls = []
        self.given = {}
        self.released = []
        self.yardstick_failure = None

    def __enter__(self):
        return self

    def __exit__(self, *exc):
        return None

    def claims(self, key, cases):
        from types import SimpleNamespace

        label = self.labels.get(key, key)
        return SimpleNamespace(label=label, reasons=(None,) * len(cases),
                               record=lambda spec: {"spec": spec, "name": label})

    def prepare(self, item):
        return {item.new_key: {"plan_seconds": 0.0, "loops": 1}}

    def _block(self, seconds):
        return list(seconds * np.exp(self.rng.normal(0.0, self.spread, self.samples_per_block)))

    def sample(self, item, pairs):
        from fftgauge.harness.gate.sampling import Draw

        self.calls.append((item.case.n, pairs))
        draw = Draw()
        for _ in range(pairs):
            draw.new.extend(self._block(self.times[item.new_key]))
            self.given.setdefault(item.case.n, []).extend(draw.new[-self.samples_per_block:])
            if item.old_key:
                draw.old.extend(self._block(self.times[item.old_key]))
        draw.yardstick.extend(self._block(self.yardstick_seconds))
        self.clock.now += pairs * self.pair_seconds
        return draw

    def release(self, item):
        self.released.append(item.case.n)


def _stored_row(n, seconds, p10, backend="numpy"):
    return {"backend": backend, "kind": "fft", "dtype": "float64", "n": n, "norm": "backward",
            "seconds": seconds, "seconds_low": seconds * 0.99, "seconds_high": seconds * 1.01,
            "seconds_p10": p10, "seconds_p10_low": p10 * 0.995, "seconds_p10_high": p10 * 1.005}


def _fake_run(req, sampler, clock):
    from fftgauge.harness.gate.run import run_gate

    return run_gate(req, sampler_factory=lambda _req: sampler, clock=clock)


def test_stored_mode_row_seconds_is_the_median_and_p10_has_its_own_field():
    """The schema says ``seconds`` is the median per-call time: in stored mode too, where the
    ratio compares 10th percentiles (those go to seconds_p10 and compared_statistic)."""
    from fftgauge.harness.gate.history import StoredRun
    from fftgauge.harness.gate.request import GateRequest, GateSettings

    runs = tuple(StoredRun(path=f"r{i}", created=f"2026-12-0{i + 1}T00:00:00Z", schema="fftgauge-time/1",
                           machine={}, yardstick=None, rows=(_stored_row(1024, 12e-6, 10e-6),),
                           backends={"numpy": "numpy"}) for i in range(3))
    req = GateRequest(mode="stored", specs=("numpy",), stored_runs=runs, baseline_path="h",
                      settings=GateSettings(budget_seconds=1.0))
    clock = FakeClock()
    sampler = FakeSampler({"numpy": 11e-6}, clock, spread=0.05)
    doc = _fake_run(req, sampler, clock)
    (row,) = doc["rows"]
    given = np.sort(sampler.given[1024])
    assert row["compared_statistic"] == "p10" and row["status"] == "ok" and row["samples"] == given.size
    # numpy's median of what the sampler gave; the 10th percentile as the order statistic of
    # rank ceil(0.1 n) (Conover 1999, the sample quantile fftgauge.harness.stats.quantile_ci uses)
    assert row["seconds"] == pytest.approx(float(np.median(given)), rel=1e-12)
    assert row["seconds_p10"] == pytest.approx(float(given[int(np.ceil(0.1 * given.size)) - 1]), rel=1e-12)
    assert row["seconds_p10"] < row["seconds"]  # 5% spread: distinct order statistics
    assert row["baseline_seconds"] == pytest.approx(12e-6) and row["baseline_seconds_p10"] == pytest.approx(10e-6)
    # no yardstick in the stored runs: the ratio is the plain ratio of 10th percentiles
    assert row["ratio"] == pytest.approx(row["seconds_p10"] / 10e-6, rel=1e-9)
