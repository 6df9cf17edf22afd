"""What a backend can claim (sizes as rules, a companion inverse, labels) and how the SPEC
states it. Transform values are checked against numpy.fft, whose conventions the contract
adopts (forward X[k] = sum x[n] exp(-2j pi k n / N), inverse with 1/N)."""

from __future__ import annotations

import json
import subprocess
import sys
from pathlib import Path

import pytest

from fftgauge.backends.claims import Capabilities, Conventions, SizeRule
from fftgauge.backends.registry import load_backend
from fftgauge.harness.battery.checks import check_case
from fftgauge.harness.cases import Case
from fftgauge.harness.errors import UsageError

ROOT = Path(__file__).resolve().parent.parent
SAMPLES = ROOT / "tests" / "data" / "sample_adapters.py"


def _reason(backend, kind: str, dtype: str, n: int) -> str | None:
    return backend.unsupported_reason(Case(kind, dtype, n))


# -- sizes as a rule ----------------------------------------------------------------------------

def test_an_embedded_librarys_size_rules_per_kind_and_precision():
    # The claims of issue 12's example library: complex pow2 16..4096, real pow2 32..4096,
    # and (to exercise the most specific key) a float32 rfft at 32, 64 and 128 only.
    backend = load_backend(f"{SAMPLES}:RangedLibraryBackend")
    assert "n >= 16 only" in _reason(backend, "fft", "float64", 8)
    assert _reason(backend, "fft", "float64", 16) is None
    assert _reason(backend, "ifft", "float32", 4096) is None
    assert "n <= 4096 only" in _reason(backend, "fft", "float64", 8192)
    assert "powers of two only" in _reason(backend, "fft", "float64", 48)
    assert "n >= 32 only" in _reason(backend, "rfft", "float64", 16)
    assert _reason(backend, "irfft", "float64", 32) is None
    assert "n in {32, 64, 128} only" in _reason(backend, "rfft", "float32", 256)
    assert _reason(backend, "rfft", "float32", 64) is None
    assert _reason(backend, "irfft", "float32", 256) is None      # the pair key names rfft only


def test_size_rules_serialise_and_refuse_nonsense():
    caps = Capabilities(sizes=SizeRule("pow2", 16, 4096), size_rules={"rfft": SizeRule(min_n=32)})
    d = json.loads(json.dumps(caps.as_dict()))
    assert (d["sizes"], d["min_n"], d["max_n"]) == ("pow2", 16, 4096)
    assert d["size_rules"] == [{"key": "rfft", "form": "any", "min_n": 32, "max_n": None, "only": None}]
    for bad in (lambda: SizeRule("odd"), lambda: SizeRule(min_n=0), lambda: SizeRule(min_n=64, max_n=32),
                lambda: SizeRule(only=()), lambda: Capabilities(size_rules={"dct": SizeRule()}),
                lambda: Capabilities(sizes=SizeRule(), max_n=8), lambda: Capabilities(kinds=("dct",))):
        with pytest.raises(ValueError):
            bad()


def test_min_n_on_a_plain_callable_makes_skip_rows_not_errors():
    backend = load_backend(f"{SAMPLES}:pow2_only_forward[sizes=pow2,min_n=16]")
    assert backend.capabilities().min_n == 16
    small = check_case(backend, Case("fft", "float64", 8), 1234, ["accuracy"])
    assert small and all(r.status == "skip" and "n >= 16 only" in r.message for r in small)
    rows = check_case(backend, Case("fft", "float64", 16), 1234, ["accuracy"])
    assert [r.status for r in rows] == ["pass"]


def test_min_n_and_max_n_are_checked_once_in_the_registry():
    with pytest.raises(UsageError, match=r"min_n=0 must be at least 1"):
        load_backend(f"{SAMPLES}:numpy_forward[min_n=0]")
    with pytest.raises(UsageError, match=r"max_n \(8\) is below min_n \(16\)"):
        load_backend(f"{SAMPLES}:numpy_forward[min_n=16,max_n=8]")


# -- a companion inverse ------------------------------------------------------------------------

def test_a_companion_inverse_claims_both_kinds_and_pairs_the_round_trip():
    backend = load_backend(f"{SAMPLES}:numpy_forward+numpy_inverse")
    assert backend.capabilities().kinds == ("fft", "ifft")
    assert backend.label == "sample_adapters:numpy_forward+numpy_inverse"
    (row,) = check_case(backend, Case("fft", "float64", 64), 1234, ["round-trip"])
    assert row.status == "pass", row.message
    (row,) = check_case(backend, Case("ifft", "float64", 64), 1234, ["accuracy"])
    assert row.status == "pass", row.message


def test_a_wrongly_scaled_companion_fails_the_round_trip_as_scale():
    # ifft without its 1/N: the trip gives N x (numpy's inverse has the 1/N).
    backend = load_backend(f"{SAMPLES}:numpy_forward+unscaled_inverse")
    (row,) = check_case(backend, Case("fft", "float64", 64), 1234, ["round-trip"])
    assert row.status == "fail" and row.diagnosis == "scale", row.message


def test_a_real_companion_is_the_inverse_real_kind():
    backend = load_backend(f"{SAMPLES}:numpy_rfft+numpy_irfft[kind=rfft]")
    assert backend.capabilities().kinds == ("rfft", "irfft")
    for kind in ("rfft", "irfft"):
        (row,) = check_case(backend, Case(kind, "float64", 30), 1234, ["round-trip"])
        assert row.status == "pass", row.message


def test_a_companion_must_be_a_function():
    with pytest.raises(UsageError, match="pairs two plain functions"):
        load_backend(f"{SAMPLES}:ScaledNumpyBackend+numpy_inverse")
    with pytest.raises(UsageError, match="has no attribute 'nothing_here'"):
        load_backend(f"{SAMPLES}:numpy_forward+nothing_here")


# -- labels -------------------------------------------------------------------------------------

@pytest.mark.parametrize("spec, label", [
    (f"{SAMPLES}:numpy_forward", "sample_adapters:numpy_forward"),
    (f"{SAMPLES}:numpy_forward[sizes=pow2]", "sample_adapters:numpy_forward[sizes=pow2]"),
    (f"{SAMPLES}:numpy_forward[label=mine]", "mine"),
    ("numpy[label=np-baseline]", "np-baseline"),
    ("scipy[workers=2,label=sp2]", "sp2"),
])
def test_labels_are_short_and_never_a_path(spec, label):
    backend = load_backend(spec)
    assert backend.label == label and "/" not in backend.label
    assert backend.describe().name == label


def test_a_bad_label_is_a_usage_error():
    for bad in ("has space", "a/b", "x" * 41):
        with pytest.raises(UsageError, match="label="):
            load_backend(f"numpy[label={bad}]")


def test_two_backends_with_one_label_exit_2_naming_it(tmp_path):
    done = subprocess.run([sys.executable, "-m", "fftgauge", "check", "--backend", "numpy[label=same]",
                           "--backend", "scipy[label=same]", "--sizes", "8", "--quiet"],
                          cwd=tmp_path, capture_output=True, text=True, timeout=120)
    assert done.returncode == 2
    lines = done.stderr.strip().splitlines()
    assert len(lines) == 1 and "same label 'same'" in lines[0] and "Traceback" not in done.stderr


# -- declared conventions (SPEC side) -----------------------------------------------------------

def test_declared_conventions_travel_with_the_claims():
    from fftgauge.harness.execution import jobs

    spec = f"{SAMPLES}:numpy_forward[sign=+1,forward_scale=1/n,order=bit-reversed,label=firmware]"
    backend = load_backend(spec)
    assert backend.conventions == Conventions(sign=1, forward_scale="1/n", order="bit-reversed")
    claims = jobs.backend_claims(backend, [("fft", "float64", 8, "backward")], None)
    assert claims.label == "firmware" and claims.capabilities.conventions == backend.conventions
    d = json.loads(json.dumps(claims.record(spec)))
    assert d["capabilities"]["conventions"] == {"sign": 1, "forward_scale": "1/n", "inverse_scale": None,
                                                "order": "bit-reversed", "packing": None}


def test_a_spec_declaration_overrides_the_adapters_own_field_by_field():
    backend = load_backend(f"{SAMPLES}:PackedRealBackend[order=centred]")
    assert backend.capabilities().conventions == Conventions(packing="dc-nyquist", inverse_scale="1")
    assert backend.conventions == Conventions(packing="dc-nyquist", inverse_scale="1", order="centred")
    assert backend.describe().capabilities.conventions == backend.conventions
    assert load_backend("numpy").conventions == Conventions()    # numpy's own convention: nothing declared


@pytest.mark.parametrize("option, fragment", [
    ("sign=1", "option sign='1' must be one of -1, +1"),
    ("order=reversed", "option order='reversed' must be one of natural, bit-reversed, centred"),
    ("forward_scale=n", "must be one of 1, 1/n, 1/sqrt(n)"),
    ("packing=perm", "must be one of complex, dc-nyquist, halfcomplex"),
])
def test_an_unknown_convention_value_is_one_line_naming_it(option, fragment):
    with pytest.raises(UsageError) as info:
        load_backend(f"numpy[{option}]")
    assert fragment in str(info.value) and "\n" not in str(info.value)


def test_the_claims_say_which_kinds_a_plain_callable_never_claimed():
    from fftgauge.harness.execution import jobs

    backend = load_backend(f"{SAMPLES}:numpy_forward+numpy_inverse")
    claims = jobs.backend_claims(backend, [(k, "float64", 8, "backward") for k in ("fft", "ifft", "rfft")], None)
    assert [claims.claims_kind(k) for k in ("fft", "ifft", "rfft", "irfft")] == [True, True, False, False]
    assert claims.reasons[:2] == (None, None) and "does not compute rfft" in claims.reasons[2]


def test_two_gate_backends_with_one_label_exit_2_naming_it(tmp_path):
    done = subprocess.run([sys.executable, "-m", "fftgauge", "gate", "--backend", "numpy[label=x]",
                           "--backend", "scipy[label=x]", "--sizes", "8", "--kinds", "fft", "--dtypes", "float64",
                           "--save", str(tmp_path / "saved"), "--quiet"],
                          cwd=tmp_path, capture_output=True, text=True, timeout=300)
    assert done.returncode == 2 and "Traceback" not in done.stderr
    assert "have the same label 'x'" in done.stderr.strip().splitlines()[-1]
