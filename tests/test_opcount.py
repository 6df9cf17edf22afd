"""Operation-count models, the count table and the ``fftgauge count`` command.

Sources, as /work/shared/reference/check-values.md names them:

- direct DFT N^2 complex multiplications, N(N-1) complex additions: common practice
  (textbook derivation);
- radix-2 (N/2) log2 N complex multiplications, N log2 N complex additions: Cooley & Tukey,
  "An algorithm for the machine calculation of complex Fourier series", Math. Comp. 19
  (1965) 297-301; common practice;
- 5 N log2 N / 2.5 N log2 N pseudo-flops: common practice in FFT benchmarking;
- split-radix 4 N log2 N - 6 N + 8: Yavne 1968; Duhamel & Hollmann, Electronics Letters 20
  (1984) 14-16 (from memory: verified here against the split-radix recurrence);
- the 2^21 ratio about 2^22/21, about 2 x 10^5: follows from the rows above.
"""

from __future__ import annotations

import argparse
import json
import math
import pathlib

import pandas as pd
import pytest

import fftgauge.harness.cli.count as cmd_count
import fftgauge.harness.timing.opcount as opcount
from fftgauge.harness.errors import UsageError
from fftgauge.harness.timing.opcount import (count_table, direct_complex_adds, direct_complex_mults, gflops, nlogn,
                                             ns_per_nlogn, pseudo_flops, radix2_complex_adds, radix2_complex_mults,
                                             radix2_unit_twiddle_butterflies, real_equivalents, split_radix_real_ops)

ROOT = pathlib.Path(__file__).resolve().parent.parent


# -- the formulas against hand-computed values -----------------------------------------------

def test_rate_formulas_hand_values():
    """GFLOP/s = flops / seconds / 1e9 (definition of the unit); ns per N log2 N =
    1e9 seconds / (N log2 N) (common practice); by hand: 4 log2 4 = 8, 1024 log2 1024 = 10240."""
    assert nlogn(1) == 0.0 and nlogn(4) == 8.0 and nlogn(1024) == 10240.0
    assert nlogn(3) == pytest.approx(3 * math.log2(3))
    assert ns_per_nlogn(1e-6, 1) is None
    assert ns_per_nlogn(2e-6, 4) == pytest.approx(2e3 / 8)
    assert ns_per_nlogn(1e-5, 1024) == pytest.approx(0.9765625)
    assert gflops(1e9, 0.5) == pytest.approx(2.0)
    assert gflops(51200, 1e-5) == pytest.approx(5.12)
    assert gflops(1e9, 0.0) == 0.0 and gflops(1e9, -1e-9) == 0.0


def test_direct_model_hand_values():
    """N = 4: 16 and 12; N = 16: 256 and 240 (common practice)."""
    assert (direct_complex_mults(4), direct_complex_adds(4)) == (16, 12)
    assert (direct_complex_mults(16), direct_complex_adds(16)) == (256, 240)
    assert (direct_complex_mults(1), direct_complex_adds(1)) == (1, 0)


def test_radix2_model_hand_values():
    """N = 8: 3 stages of 4 butterflies, 12 mults and 24 adds; N = 1024: 5120 and 10240
    (Cooley & Tukey 1965)."""
    assert (radix2_complex_mults(8), radix2_complex_adds(8)) == (12, 24)
    assert (radix2_complex_mults(1024), radix2_complex_adds(1024)) == (5120, 10240)
    assert (radix2_complex_mults(1), radix2_complex_adds(1)) == (0, 0)
    assert radix2_unit_twiddle_butterflies(8) == 7
    with pytest.raises(ValueError, match="power of two"):
        radix2_complex_mults(12)
    with pytest.raises(ValueError, match="power of two"):
        radix2_unit_twiddle_butterflies(6)


def test_pseudo_flops_hand_values():
    """5 N log2 N complex, 2.5 N log2 N real (common practice in FFT benchmarking):
    1024 -> 5 * 1024 * 10 = 51200 and 25600; N = 1 -> 0; 1000 uses log2 1000 = 9.9658."""
    assert pseudo_flops(1024, real_input=False) == 51200
    assert pseudo_flops(1024, real_input=True) == 25600
    assert pseudo_flops(1, real_input=False) == 0
    assert pseudo_flops(1000, real_input=False) == pytest.approx(49828.92, abs=0.01)


def test_the_2_21_ratio():
    """A 2^21-point direct DFT: 2^42 / (2^20 * 21) = 2^22 / 21 = 199728.76..., about 2 x 10^5
    times the radix-2 multiplications (follows from the two models)."""
    n = 2**21
    ratio = direct_complex_mults(n) / radix2_complex_mults(n)
    assert ratio == pytest.approx(2**22 / 21, rel=1e-15)
    assert ratio == pytest.approx(1.997e5, rel=1e-3)
    assert cmd_count.ratio_words(ratio) == "2.0 x 10^5"


def test_real_equivalents():
    """Schoolbook complex product: 4 real mults and 2 real adds; complex add: 2 real adds
    (common practice). The radix-2 FFT then costs 5 N log2 N real operations, which is
    where the pseudo-flop convention comes from (common practice)."""
    assert real_equivalents(1, 0) == (4, 2)
    assert real_equivalents(0, 1) == (0, 2)
    n = 2**10
    assert sum(real_equivalents(radix2_complex_mults(n), radix2_complex_adds(n))) == pseudo_flops(n, False)


def split_radix_by_recurrence(n: int) -> int:
    """Return the real operations of the split-radix FFT from its recursive structure.

    X[k] = E[k] + W^k U[k] + W^3k Z[k] with E the DFT of length n/2 of the even samples and
    U, Z those of length n/4 of samples 4m+1 and 4m+3. For each k < n/4: two twiddle
    products, then 6 complex additions (a + b, a - b, and the four outputs E +- s,
    E' -+ j d), 12 real additions. A twiddle product costs 0 for W^0, 4 real operations for
    W^(n/8) and W^(3n/8) = (+-1 - j)/sqrt(2) (2 mults, 2 adds), 6 otherwise (4 mults,
    2 adds). Base cases: 0 for n = 1, 4 (two complex additions) for n = 2.
    """
    if n == 1:
        return 0
    if n == 2:
        return 4
    total = split_radix_by_recurrence(n // 2) + 2 * split_radix_by_recurrence(n // 4)
    for k in range(n // 4):
        total += 12
        if k == 0:
            continue
        total += 2 * (4 if 8 * k == n else 6)
    return total


def test_split_radix_formula_against_its_recurrence():
    """4 N log2 N - 6 N + 8 (Yavne 1968; Duhamel & Hollmann 1984, from memory) equals the
    recurrence for N = 2 .. 2^16; hand values 4, 16, 56 (8 points: 4 mults + 52 adds), 168."""
    assert [split_radix_real_ops(2**t) for t in range(1, 5)] == [4, 16, 56, 168]
    for t in range(1, 17):
        assert split_radix_real_ops(2**t) == split_radix_by_recurrence(2**t), 2**t
    assert split_radix_real_ops(1024) < pseudo_flops(1024, False)
    with pytest.raises(ValueError):
        split_radix_real_ops(1)


# -- the table -------------------------------------------------------------------------------

def test_count_table_rows():
    """Models everywhere, counts where the backends take the size, ratio where radix-2 applies;
    the counted values equal the models (common practice; Cooley & Tukey 1965)."""
    rows = {r["n"]: r for r in count_table([1, 2, 12, 16, 2**15])}
    assert rows[16]["direct_mults_model"] == 256 and rows[16]["direct_adds_model"] == 240
    assert (rows[16]["radix2_mults_model"], rows[16]["radix2_adds_model"]) == (32, 64)
    assert (rows[16]["radix2_mults_counted"], rows[16]["radix2_adds_counted"]) == (32, 64)
    assert (rows[16]["direct_mults_counted"], rows[16]["direct_adds_counted"]) == (256, 240)
    assert rows[16]["direct_to_radix2_mults"] == 8.0
    assert rows[16]["pseudo_flops"] == 320 and rows[16]["split_radix_real_ops"] == 168
    assert rows[12]["radix2_mults_model"] is None and rows[12]["radix2_mults_counted"] is None
    assert rows[12]["direct_mults_counted"] == 144 and rows[12]["direct_to_radix2_mults"] is None
    assert rows[2**15]["radix2_mults_counted"] is None  # above radix2-dit's max_n
    assert rows[2**15]["direct_mults_counted"] is None
    assert rows[2**15]["radix2_mults_model"] == 2**14 * 15
    assert rows[1]["direct_to_radix2_mults"] is None and rows[1]["split_radix_real_ops"] is None


def test_count_table_without_trivial_twiddles_and_chosen_backends():
    """Skipping W^0: counted radix-2 mults are the model minus N - 1 (the W^0 butterflies);
    a role mapped to None is not counted; radix2-dif may be the counting backend."""
    from fftgauge.backends.registry import load_backend

    rows = count_table([8, 64], {"radix2": load_backend("radix2-dif"), "direct": None}, count_trivial=False)
    for row in rows:
        n = row["n"]
        assert row["radix2_mults_counted"] == radix2_complex_mults(n) - (n - 1)
        assert row["radix2_adds_counted"] == radix2_complex_adds(n)
        assert row["direct_mults_counted"] is None


# -- the command -----------------------------------------------------------------------------

def parse(argv: list[str]) -> argparse.Namespace:
    parser = argparse.ArgumentParser(prog="fftgauge count")
    cmd_count.add_arguments(parser)
    return parser.parse_args(argv)


def test_command_prints_table_and_sentence(capsys, tmp_path):
    json_path, csv_path = tmp_path / "count.json", tmp_path / "count.csv"
    code = cmd_count.run(parse(["--sizes", "2^1..2^6,12", "--json", str(json_path), "--csv", str(csv_path)]))
    assert code == 0
    out = capsys.readouterr().out
    assert "a 2^6-point direct DFT needs about 21.3 times the complex multiplications of radix-2" in out
    assert "radix-2 counted" in out and "direct model" in out
    doc = json.loads(json_path.read_text())
    assert doc["schema"] == "fftgauge-count/1" and doc["seed"] is None
    assert doc["trivial_twiddles_counted"] is True
    assert [r["n"] for r in doc["rows"]] == [2, 4, 8, 12, 16, 32, 64]
    row64 = doc["rows"][-1]
    assert (row64["radix2_mults_counted"], row64["radix2_adds_counted"]) == (192, 384)
    table = pd.read_csv(csv_path)
    assert list(table["n"]) == [2, 4, 8, 12, 16, 32, 64]
    assert table.loc[table["n"] == 64, "direct_mults_model"].item() == 4096


def test_command_default_sizes_and_quiet(capsys):
    args = parse(["--quiet"])
    assert args.sizes == "2^1..2^16" and args.trivial_twiddles is True
    assert cmd_count.run(args) == 0
    out = capsys.readouterr().out.strip().splitlines()
    assert out == ["a 2^16-point direct DFT needs about 8.2 x 10^3 times the complex multiplications of radix-2"]


def test_command_large_size_and_no_trivial(capsys, tmp_path):
    """2^21 is beyond every counting limit: models only, about 2.0 x 10^5 (check-values.md)."""
    path = tmp_path / "c.json"
    assert cmd_count.run(parse(["--sizes", "8,2^21", "--no-trivial-twiddles", "--json", str(path)])) == 0
    out = capsys.readouterr().out
    assert "a 2^21-point direct DFT needs about 2.0 x 10^5 times" in out
    doc = json.loads(path.read_text())
    assert doc["trivial_twiddles_counted"] is False
    small, large = doc["rows"]
    assert small["radix2_mults_counted"] == 12 - 7 and large["radix2_mults_counted"] is None


def test_command_bad_sizes_are_usage_errors():
    with pytest.raises(UsageError, match="2\\^x"):
        cmd_count.run(parse(["--sizes", "2^x"]))
    with pytest.raises(UsageError, match="5..3"):
        cmd_count.run(parse(["--sizes", "5..3"]))


def test_summary_without_a_power_of_two():
    rows = count_table([3, 5], {"radix2": None, "direct": None})
    assert cmd_count.summary_line(rows).startswith("no power of two")


def test_ratio_words():
    assert cmd_count.ratio_words(4.0) == "4.0"
    assert cmd_count.ratio_words(8192.0) == "8.2 x 10^3"
    assert cmd_count.ratio_words(99960.0) == "1.0 x 10^5"
