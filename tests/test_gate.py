"""The gate's statistics and decision rule on synthetic sample sets, its adaptive loop and its
run on a fake sampler (no processes, no real clock), its outputs, and one slow end-to-end run
per mode (A/B, stored, referenced) in real worker processes. Statistics are checked against
scipy.stats and against Holm 1979 ("A simple sequentially rejective multiple test procedure",
Scand. J. Statist. 6 65-70) by hand."""

import json
import re
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
    # 40 evenly spaced values: the 10th percentile is the 4th (rank ceil(0.1 * 40)), the median
    # the mean of the 20th and 21st (numpy.median's convention)
    assert yard["seconds_p10"] == pytest.approx(1e-3 * 1.003) and yard["seconds"] == pytest.approx(1e-3 * 1.0195)
    runs = [_stored_run(f"r{i}", 13e-6, 10e-6, yard) for i in range(2)]
    raw, corrected, _ = baseline_for(runs, "numpy", Case("fft", "float64", 1024), 0.95)
    assert corrected.statistic == "p10" and corrected.yardstick_statistic == "p10"
    # the machine is now uniformly 20% slower: case and yardstick alike; the corrected ratio stays 1
    slower_yard = summarise([1.2e-3 * (1 + 0.001 * k) for k in range(40)])
    samples = list(np.linspace(12e-6, 15e-6, 50))
    est = estimate_stored(corrected, samples, slower_yard)
    assert est.corrected and est.ratio == pytest.approx(est.ratio_raw / 1.2, rel=0.02)


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




def _ab(tmp_path, new, sizes="1024", extra=(), budget="2"):
    md, xml_path, js = tmp_path / "g.md", tmp_path / "g.xml", tmp_path / "g.json"
    code = cli.main(["gate", "--old", "numpy", "--new", new, "--kinds", "fft", "--dtypes", "float64",
                     "--sizes", sizes, "--budget", budget, "--quiet", "--markdown", str(md), "--junit", str(xml_path),
                     "--json", str(js), *extra])
    return code, md, xml_path, js


def test_a_crashing_backend_still_writes_the_summary_and_exits_1(tmp_path):
    code, md, xml_path, js = _ab(tmp_path, "tests/data/misbehaving.py:abort_fft", sizes="64")
    assert code == 1
    doc = json.loads(js.read_text())
    assert doc["rows"] and doc["rows"][0]["status"] == "error" and "SIGABRT" in doc["rows"][0]["message"]
    assert doc["outcome"] == "error" and "FAIL" in md.read_text()
    (case,) = ET.parse(xml_path).getroot().iter("testcase")
    assert case.find("error") is not None and "SIGABRT" in case.find("error").get("message")


# -- a fake sampler: the gate's run without processes and without a real clock ----------------

class FakeClock:
    """Seconds that pass only when the fake sampler says so."""

    def __init__(self):
        self.now = 0.0

    def __call__(self):
        return self.now


class FakeSampler:
    """Stands in for WorkerSampler: each side's per-call seconds drawn from a seeded lognormal
    (``times`` maps a worker key, or a (key, n) pair, to its median seconds, ``spread`` the
    log-scale sigma, or a dict of it by the same keys), each
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

    def _block(self, key, n):
        sigma = self.spread.get((key, n), self.spread.get(key)) if isinstance(self.spread, dict) else self.spread
        median = self.times.get((key, n), self.times.get(key))
        return list(median * np.exp(self.rng.normal(0.0, sigma, self.samples_per_block)))

    def sample(self, item, pairs):
        from fftgauge.harness.gate.sampling import Draw

        self.calls.append((item.case.n, pairs))
        draw = Draw()
        for _ in range(pairs):
            draw.new.extend(self._block(item.new_key, item.case.n))
            self.given.setdefault(item.case.n, []).extend(draw.new[-self.samples_per_block:])
            if item.old_key:
                draw.old.extend(self._block(item.old_key, item.case.n))
        draw.yardstick.extend(list(self.yardstick_seconds * np.exp(self.rng.normal(0.0, 0.001, 5))))
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


# -- the adaptive loop on a fake sampler and a fake clock -------------------------------------

def _items(*keys):
    from fftgauge.harness.cases import Case
    from fftgauge.harness.gate.adaptive import GateItem

    return [GateItem(backend=k, case=Case("fft", "float64", 64 * (i + 1)), new_key=f"{k}-new", old_key=f"{k}-old")
            for i, k in enumerate(keys)]


def _times(**ratios):
    out = {}
    for key, ratio in ratios.items():
        out[f"{key}-old"], out[f"{key}-new"] = 1e-5, 1e-5 * ratio
    return out


def test_first_round_gives_every_case_its_pairs_in_turns_whatever_the_budget():
    from fftgauge.harness.gate.adaptive import PAIRS_PER_VISIT, collect
    from fftgauge.harness.gate.request import GateSettings

    clock = FakeClock()
    sampler = FakeSampler(_times(a=1.0, b=1.0, c=1.0), clock, spread=0.001, pair_seconds=0.5)
    items = _items("a", "b", "c")
    done = []
    settings = GateSettings(budget_seconds=1e-9, initial_pairs=8)
    used = collect(items, sampler, settings, [], clock=clock, on_done=done.append)
    assert used == pytest.approx(3 * 8 * 0.5)  # the first round is not cut by the budget
    assert all(pairs == PAIRS_PER_VISIT for _, pairs in sampler.calls) and len(sampler.calls) == 12
    # turns: each stretch of three visits holds each case once
    for k in range(0, 12, 3):
        assert sorted(n for n, _ in sampler.calls[k:k + 3]) == [64, 128, 192]
    assert sorted(it.backend for it in done) == ["a", "b", "c"]
    assert all(len(it.new_samples) == len(it.old_samples) == 8 * settings.samples_per_block for it in items)


def test_inconclusive_cases_get_doubling_rounds_up_to_their_most_samples():
    """Case b sits on the threshold with 20% noise: it stays inconclusive and gets 8, 8, 16,
    then the 8 pairs left below max_samples = 200 (40 pairs of 5); case a (no change, 0.1%
    noise) is decided after the first round."""
    from fftgauge.harness.gate.adaptive import collect, evaluate
    from fftgauge.harness.gate.decision import is_conclusive
    from fftgauge.harness.gate.request import GateSettings

    clock = FakeClock()
    spreads = {"a-old": 0.001, "a-new": 0.001, "b-old": 0.2, "b-new": 0.2}
    sampler = FakeSampler(_times(a=1.0, b=1.05), clock, spread=spreads, pair_seconds=0.01)
    a, b = _items("a", "b")
    settings = GateSettings(budget_seconds=100.0, initial_pairs=8, max_samples=200)
    done = []
    collect([a, b], sampler, settings, [], clock=clock, on_done=done.append)
    per_case = {}
    for n, pairs in sampler.calls:
        per_case[n] = per_case.get(n, 0) + pairs
    assert per_case == {64: 8, 128: 40} and len(b.new_samples) == settings.max_samples
    assert is_conclusive(evaluate(a, settings, None, 100), settings.threshold)
    assert not is_conclusive(evaluate(b, settings, None, 100), settings.threshold)
    assert done == [a, b] or done == [b, a]


def test_budget_is_shared_by_the_inconclusive_cases_and_stops_the_rounds():
    from fftgauge.harness.gate.adaptive import collect
    from fftgauge.harness.gate.request import GateSettings

    settings = GateSettings(budget_seconds=30.0, initial_pairs=8, max_samples=10_000)
    clock = FakeClock()
    sampler = FakeSampler(_times(a=1.05, b=1.05), clock, spread=0.3, pair_seconds=1.0)
    a, b = _items("a", "b")
    used = collect([a, b], sampler, settings, [], clock=clock)
    # round 1: 16 pairs (16 s); then 14 s left, 7 s each at 1 s per pair: 7 pairs each
    assert used == pytest.approx(30.0)
    assert a.pairs_taken == b.pairs_taken == 15

    clock, short = FakeClock(), GateSettings(budget_seconds=5.0, initial_pairs=8)
    sampler = FakeSampler(_times(a=1.05, b=1.05), clock, spread=0.3, pair_seconds=1.0)
    a, b = _items("a", "b")
    assert collect([a, b], sampler, short, [], clock=clock) == pytest.approx(16.0)
    assert a.pairs_taken == b.pairs_taken == 8


def test_a_failing_case_becomes_an_error_and_the_others_go_on():
    from fftgauge.harness.errors import BackendFailure
    from fftgauge.harness.gate.adaptive import collect
    from fftgauge.harness.gate.request import GateSettings

    clock = FakeClock()
    sampler = FakeSampler(_times(a=1.0, b=1.0), clock, spread=0.001)
    a, b = _items("a", "b")
    real = sampler.sample

    def sample(item, pairs):
        if item is b:
            raise BackendFailure("worker died (SIGSEGV)")
        return real(item, pairs)

    sampler.sample = sample
    collect([a, b], sampler, GateSettings(budget_seconds=1.0), [], clock=clock)
    assert b.status == "error" and "failed while being timed: worker died (SIGSEGV)" in b.message
    assert a.status == "ok" and a.pairs_taken == 8


# -- the whole run on the fake sampler: verdicts, outcome, outputs ------------------------------

def _ab_request(sizes=(256, 1024), **settings):
    from fftgauge.harness.gate.request import GateRequest, GateSettings

    return GateRequest(mode="ab", old_spec="numpy", new_spec="mine.py:fft", kinds=("fft",), dtypes=("float64",),
                       sizes=sizes, settings=GateSettings(**{"budget_seconds": 2.0, **settings}))


def test_fake_ab_run_finds_a_50_percent_slowdown_and_its_outputs_say_so():
    from fftgauge.harness.gate.outputs import headline, junit_xml, markdown_summary

    clock = FakeClock()
    sampler = FakeSampler({"old": 1e-5, "new": 1.5e-5}, clock, labels={"old": "numpy", "new": "mine"})
    doc = _fake_run(_ab_request(), sampler, clock)
    assert doc["complete"] and doc["outcome"] == "regression" and doc["regressed"] is True
    assert [r["verdict"] for r in doc["rows"]] == ["slower", "slower"]
    assert all(r["ratio"] == pytest.approx(1.5, rel=0.02) and r["ratio_low"] > 1.05 for r in doc["rows"])
    assert headline(doc) == "FAIL: 2 slower of 2 case(s)"
    md = markdown_summary(doc)
    assert md.count("**slower**") == 2 and len(re.findall(r"\| \+(?:49|50)\.\d% \|", md)) == 2, md
    suite = ET.fromstring(junit_xml(doc)).find("testsuite")
    failures = [c.find("failure") for c in suite.iter("testcase")]
    assert suite.get("failures") == "2" and all(f is not None and f.get("type") == "slower" for f in failures)
    assert sorted(sampler.released) == [256, 1024]


def test_fake_ab_run_of_equal_sides_passes():
    from fftgauge.harness.gate.outputs import headline

    clock = FakeClock()
    sampler = FakeSampler({"old": 1e-5, "new": 1e-5}, clock, spread=0.005, labels={"old": "numpy", "new": "mine"})
    doc = _fake_run(_ab_request(), sampler, clock)
    assert doc["outcome"] == "pass" and doc["regressed"] is False
    assert all(r["verdict"] == "same" and r["conclusive"] and not r["inconclusive"] for r in doc["rows"])
    assert headline(doc) == "PASS: no regression in 2 case(s)"


def test_referenced_mode_needs_stored_ratios_of_the_pair():
    from fftgauge.harness.errors import UsageError
    from fftgauge.harness.gate.history import StoredRun
    from fftgauge.harness.gate.request import GateRequest

    row = {"backend": "mine", "baseline_backend": "numpy", "kind": "fft", "dtype": "float64", "n": 1024,
           "seconds": 1e-5, "ab_ratio": 1.0, "ab_ratio_low": 0.99, "ab_ratio_high": 1.01}
    run = StoredRun(path="h/a.json", created="2026-12-01T00:00:00Z", schema="fftgauge-gate/1", machine={},
                    yardstick=None, rows=(row,), backends={})
    req = GateRequest(mode="referenced", old_spec="numpy", new_spec="mine.py:fft", kinds=("fft",),
                      dtypes=("float64",), sizes=(1024,), stored_runs=(run,), baseline_label="nothing")
    clock = FakeClock()
    with pytest.raises(UsageError, match="holds no A/B ratio of nothing against numpy"):
        _fake_run(req, FakeSampler({"old": 1e-5, "new": 1e-5}, clock, labels={"old": "numpy", "new": "mine"}), clock)


# -- one slow end-to-end run per mode, in real worker processes --------------------------------

@pytest.mark.slow
def test_ab_mode_end_to_end_finds_a_50_percent_slowdown(tmp_path):
    code, md, xml_path, js = _ab(tmp_path, "slowed[percent=50]")
    doc = json.loads(js.read_text())
    assert doc["schema"] == "fftgauge-gate/1" and code == 1 and doc["regressed"] is True
    (row,) = doc["rows"]
    assert {"backend", "kind", "dtype", "n", "ratio", "ratio_low", "ratio_high", "p_value", "verdict"} <= set(row)
    assert row["verdict"] == "slower" and row["ratio"] > 1.2, row
    suite = ET.parse(xml_path).getroot()
    assert len(list(suite.iter("testcase"))) == 1 and len(list(suite.iter("failure"))) == 1
    assert md.read_text().startswith("## fftgauge gate: FAIL")


@pytest.mark.slow
def test_stored_mode_end_to_end_finds_a_threefold_slowdown(tmp_path):
    """A recorded run of numpy seeds a history; a candidate three times as slow fails against
    it. The threshold is 50% so that the machine's run-to-run swings cannot make it flaky."""
    history = tmp_path / "history"
    assert cli.main(["gate", "--backend", "numpy", "--kinds", "fft", "--sizes", "1024", "--budget", "1",
                     "--quiet", "--save", str(history), "--json", str(tmp_path / "r.json")]) == 0
    js = tmp_path / "s.json"
    code = cli.main(["gate", "--backend", "slowed[percent=200]", "--baseline-backend", "numpy", "--baseline",
                     str(history), "--threshold", "50%", "--budget", "1", "--quiet", "--json", str(js)])
    doc = json.loads(js.read_text())
    assert code == 1 and doc["mode"] == "stored"
    (row,) = doc["rows"]
    assert row["verdict"] == "slower" and row["ratio"] > 2 and row["compared_statistic"] == "p10"
    assert doc["yardstick"]["ratio_statistic"] == "p10"


@pytest.mark.slow
def test_referenced_mode_end_to_end_finds_a_50_percent_slowdown(tmp_path):
    """A saved A/B run of numpy against numpy seeds the history; a candidate 50% slower than
    the reference fails against it (the stored candidate's label named with --baseline-backend)."""
    history = tmp_path / "history"
    code, *_ = _ab(tmp_path, "numpy", extra=("--save", str(history)), budget="1")
    assert code in (0, 1) and len(list(history.glob("gate-*.json"))) == 1  # its verdict does not matter here
    code, md, xml_path, js = _ab(tmp_path, "slowed[percent=50]", budget="1",
                                 extra=("--baseline", str(history), "--baseline-backend", "numpy"))
    doc = json.loads(js.read_text())
    assert code == 1 and doc["mode"] == "referenced"
    (row,) = doc["rows"]
    assert row["verdict"] == "slower" and row["ratio"] > 1.2 and row["baseline_runs"] == 1
    assert "stored A/B ratios" in md.read_text()


# -- inconclusive runs, the stored mode on a quiet machine, short accuracy rows ----------------

def test_an_inconclusive_case_makes_the_headline_inconclusive_and_the_policy_picks_the_exit_code():
    """Case 128 sits on the threshold with 10% noise and a budget too small to decide it."""
    from fftgauge.harness.gate.decision import exit_code
    from fftgauge.harness.gate.outputs import headline, summary_text

    clock = FakeClock()
    spread = {"old": 0.001, "new": 0.001, ("old", 128): 0.1, ("new", 128): 0.1}
    sampler = FakeSampler({"old": 1e-5, "new": 1e-5, ("new", 128): 1.05e-5}, clock, spread=spread,
                          labels={"old": "numpy", "new": "mine"})
    doc = _fake_run(_ab_request(sizes=(64, 128), inconclusive="fail", budget_seconds=0.01), sampler, clock)
    rows = {r["n"]: r for r in doc["rows"]}
    assert rows[64]["verdict"] == "same" and not rows[64]["inconclusive"]
    assert rows[128]["verdict"] == "same" and rows[128]["inconclusive"] and rows[128]["ratio_high"] > 1.05
    assert doc["outcome"] == "inconclusive" and doc["regressed"] is False
    text = headline(doc)
    assert text.startswith("INCONCLUSIVE: 1 of 2 case(s)") and "exit 1" in text, text
    assert "same (inconclusive)" in summary_text(doc)
    assert exit_code(doc["outcome"], "fail") == 1 and exit_code(doc["outcome"], "pass") == 0
    assert exit_code("pass", "fail") == 0 and exit_code("regression") == 1 and exit_code("incomplete", "pass", 15) == 143


def _quiet_history(seconds=1e-5, spread=0.01, runs=3, yardstick_seconds=1e-3, sizes=(64, 128)):
    """Stored runs of a quiet machine, every figure computed by fftgauge's own summaries from
    samples of the distribution the fake sampler draws from: the same code, the same machine."""
    from fftgauge.harness.gate.history import StoredRun
    from fftgauge.harness.gate.yardstick import summarise
    from fftgauge.harness.stats import LOW_QUANTILE, median_ci, quantile_ci

    rng = np.random.default_rng(77)
    out = []
    for i in range(runs):
        rows = []
        for n in sizes:
            x = seconds * np.exp(rng.normal(0.0, spread, 100))
            med, lo, hi = median_ci(x)
            p10, p10_lo, p10_hi = quantile_ci(x, LOW_QUANTILE)
            rows.append({"backend": "numpy", "kind": "fft", "dtype": "float64", "n": n, "norm": "backward",
                         "seconds": med, "seconds_low": lo, "seconds_high": hi, "seconds_p10": p10,
                         "seconds_p10_low": p10_lo, "seconds_p10_high": p10_hi})
        yard = summarise(list(yardstick_seconds * np.exp(rng.normal(0.0, 0.001, 60))))
        out.append(StoredRun(path=f"h/{i}.json", created=f"2026-12-0{i + 1}T00:00:00Z", schema="fftgauge-gate/1",
                             machine={}, yardstick=yard, rows=tuple(rows), backends={"numpy": "numpy"}))
    return tuple(out)


def test_stored_mode_reads_the_same_code_on_the_same_machine_as_the_same():
    """The same distribution stored and measured now (yardstick included): every ratio within
    1.5% of 1 and every verdict ``same``; the printed yardstick figure is the 10th percentile
    its percentage is computed from."""
    from fftgauge.harness.gate.outputs import summary_text
    from fftgauge.harness.gate.request import GateRequest, GateSettings

    req = GateRequest(mode="stored", specs=("numpy",), stored_runs=_quiet_history(), baseline_path="h",
                      settings=GateSettings(budget_seconds=1.0))
    clock = FakeClock()
    doc = _fake_run(req, FakeSampler({"numpy": 1e-5}, clock, spread=0.01), clock)
    assert doc["outcome"] == "pass"
    for row in doc["rows"]:
        assert row["yardstick_corrected"] and row["compared_statistic"] == "p10"
        assert abs(row["ratio"] - 1.0) < 0.015 and row["verdict"] == "same", row
    y = doc["yardstick"]
    assert y["ratio_statistic"] == "p10" and abs(y["ratio"] - 1.0) < 0.005
    assert y["ratio"] == pytest.approx(y["seconds_p10"] / y["baseline_seconds"])
    assert f"yardstick p10 {y['seconds_p10'] * 1e3:.3f} ms" in summary_text(doc)


def test_an_incomplete_run_does_not_say_it_regressed():
    from fftgauge.harness.gate.decision import outcome_of

    rows = [{"status": "ok", "verdict": "same"}, {"status": "incomplete", "verdict": None}]
    assert outcome_of(rows, complete=False) == ("incomplete", False)
    assert outcome_of(rows + [{"status": "ok", "verdict": "slower"}], complete=False) == ("regression", True)


def test_accuracy_rows_are_one_short_line_and_keep_the_timing_apart():
    from fftgauge.harness.cases import Case
    from fftgauge.harness.gate.decision import compare_accuracy
    from fftgauge.harness.gate.outputs import summary_text

    long = "x[k] differs from the reference " * 60  # about 2,000 characters
    new_rows = [{"check": "accuracy", "status": "fail", "diagnosis": "sign", "eps_units": 900.0, "message": long},
                {"check": "inverse", "status": "fail", "diagnosis": "sign", "message": long},
                {"check": "parseval", "status": "pass", "eps_units": 0.5, "message": "ok"}]
    old_rows = [{"check": "accuracy", "status": "pass", "eps_units": 0.8, "message": "ok"}]
    acc = compare_accuracy(Case("fft", "float64", 64), new_rows, old_rows, None, 2.0)
    assert acc["regressed"] and acc["new_battery_failures"] == ["accuracy", "inverse"]
    assert acc["message"].startswith("new battery failure(s): accuracy (sign), inverse (sign)")
    assert len(acc["message"]) < 200 and long.strip() in acc["detail"]
    row = {"backend": "mine", "kind": "fft", "dtype": "float64", "n": 64, "status": "ok", "verdict": "accuracy",
           "timing_verdict": "same", "conclusive": False, "inconclusive": True, "ratio": 1.01, "ratio_low": 0.9,
           "ratio_high": 1.2, "p_holm": 0.5, "message": acc["message"]}
    line = summary_text({"mode": "ab", "rows": [row]}).splitlines()[-1]
    assert "accuracy; timing same" in line and "inconclusive" not in line and len(line) < 300, line


def test_markdown_and_junit_escape_what_they_quote():
    """A backend label with a table pipe, inline HTML and an ampersand, a message with a
    control character: the Markdown shows them (CommonMark backslash escapes and entities), the
    JUnit XML parses and holds the label unchanged in an attribute."""
    from fftgauge.harness.gate.outputs import junit_classname, junit_xml, markdown_summary

    label = 'a|b <img src=x onerror="alert(1)"> & c'
    doc = {"mode": "ab", "outcome": "error", "threshold": 0.05, "old": {"spec": "numpy"}, "new": {"spec": label},
           "warnings": ["<script>x</script>"], "notes": [], "rows": [
               {"backend": label, "kind": "fft", "dtype": "float64", "n": 64, "status": "error", "verdict": None,
                "message": "crashed \x07 with <b>bold</b> | pipe", "sampling_seconds": 0.0}]}
    md = markdown_summary(doc)
    assert "<img" not in md and "<script>" not in md and "<b>" not in md
    assert "a\\|b &lt;img src=x onerror=\"alert(1)\"&gt; &amp; c" in md
    table_row = next(line for line in md.splitlines() if line.startswith("| a"))
    assert table_row.count(" | ") == 6  # seven cells: no cell split by the label's pipe (unescaped ones)
    root = ET.fromstring(junit_xml(doc))
    (case,) = root.iter("testcase")
    assert case.get("classname") == junit_classname(label) == "fftgauge.gate.a_b__img_src_x_onerror__alert_1______c"
    assert case.find("error").get("message") == "crashed \ufffd with <b>bold</b> | pipe"
