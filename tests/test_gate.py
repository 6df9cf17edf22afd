"""The gate's statistics and decision rule on synthetic sample sets, its outputs, and small
real A/B runs. Statistics are checked against scipy.stats and against Holm 1979 ("A simple
sequentially rejective multiple test procedure", Scand. J. Statist. 6 65-70) by hand."""

import json
import xml.etree.ElementTree as ET

import numpy as np
import pytest
from scipy import stats as sps

from harness import cli
from harness.gate import decide, estimate_ab, holm_adjusted, is_conclusive, timing_verdict
from harness.stats import holm_bonferroni, mann_whitney_p

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
