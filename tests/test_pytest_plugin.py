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


def test_sizes_a_users_fft_raises_on_are_skipped_with_the_option_that_claims_them(pytester):
    """A power-of-two-only FFT with nothing declared: battery_params on 1..8,16 runs the
    powers of two and marks the other sizes skip, saying why and naming [sizes=pow2]; with
    [sizes=pow2] declared those sizes are not parametrised at all (its claims)."""
    pytester.makepyfile(pow2_fft="""
import numpy as np
def fft(x):
    n = len(x)
    if n & (n - 1):
        raise ValueError(f"size must be a power of two, got {n}")
    return np.fft.fft(x)
""")
    pytester.makepyfile(test_user="""
import pytest
from fftgauge.harness.pytest_plugin import battery_params

@pytest.mark.parametrize("case", battery_params("pow2_fft.py:fft", sizes="1..8,16", dtypes=["float64"]))
def test_found(fftgauge_check, case):
    fftgauge_check("pow2_fft.py:fft", case, checks=["accuracy"])

@pytest.mark.parametrize("case", battery_params("pow2_fft.py:fft[sizes=pow2]", sizes="1..8,16", dtypes=["float64"]))
def test_declared(fftgauge_check, case):
    fftgauge_check("pow2_fft.py:fft[sizes=pow2]", case, checks=["accuracy"])
""")
    result = pytester.runpytest_subprocess("-p", "no:cacheprovider", "-rs")
    # found: 1, 2, 4, 8, 16 pass, 3, 5, 6, 7 skip; declared: the five powers of two only
    result.assert_outcomes(passed=10, skipped=4)
    result.stdout.fnmatch_lines(["*raised the same error on every size that is not a power of two*"
                                 "claim it with --backend 'pow2_fft.py:fft[[]sizes=pow2[]]'*"])


def test_sizes_a_declared_order_cannot_be_given_at_are_not_parametrised():
    """order=bit-reversed needs a power of two: of 1..16 only 1, 2, 4, 8, 16 are cases."""
    from pathlib import Path

    from fftgauge.harness.pytest_plugin import battery_params

    spec = f"{Path(__file__).parent / 'data' / 'convention_ffts.py'}:bitreversed_dit[order=bit-reversed]"
    params = battery_params(spec, sizes="1..16", dtypes=["float64"])
    assert [p.id for p in params] == [f"fft-float64-{n}" for n in (1, 2, 4, 8, 16)]
    assert not any(p.marks for p in params)
