"""The pytest plugin: fixtures and parametrised battery, run in a nested pytest (pytester)."""

import pytest

pytest_plugins = ["pytester"]


def test_plugin_checks_and_times_a_user_fft(pytester):
    pytester.makepyfile(my_fft="""
import numpy as np
def fft(x):
    return np.fft.fft(x)
def wrong_sign(x):
    return np.fft.ifft(x) * len(x)
""")
    pytester.makepyfile(test_user="""
import pytest
from fftgauge.harness.pytest_plugin import battery_params

@pytest.mark.parametrize("case", battery_params("my_fft.py:fft", sizes="1..4,16", dtypes=["float64"]))
def test_good(fftgauge_check, case):
    rows = fftgauge_check("my_fft.py:fft", case)
    assert any(r.check == "accuracy" and r.status == "pass" for r in rows)

@pytest.mark.parametrize("case", battery_params("my_fft.py:wrong_sign", sizes="8", dtypes=["float64"]))
def test_bad(fftgauge_check, case):
    fftgauge_check("my_fft.py:wrong_sign", case, checks=["accuracy"])

def test_time(fftgauge_timer):
    y = fftgauge_timer("my_fft.py:fft", n=64)
    assert y.shape == (64,)
""")
    result = pytester.runpytest_subprocess("-p", "no:cacheprovider", "--benchmark-disable")
    result.assert_outcomes(passed=6, failed=1)
    result.stdout.fnmatch_lines(["*accuracy: fail*[[]sign[]]*"])
