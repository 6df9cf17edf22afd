"""``fftgauge count``: operation-count tables, direct DFT against radix-2, models against counts.

For every size: the direct DFT model (N^2 complex multiplications, N(N-1) additions), the
radix-2 model ((N/2) log2 N and N log2 N, powers of two only), the counts the instrumented
reference backends actually perform (radix-2 up to its ``max_n``, direct up to
:data:`fftgauge.harness.timing.opcount.DIRECT_COUNT_MAX_N`), and how many times more multiplications the
direct DFT needs.
"""

from __future__ import annotations

import argparse
import math
import sys
from typing import Any

from fftgauge.harness import dft
from fftgauge.harness.cli import add_common_options
from fftgauge.harness.cluster.target import add_cluster_option, cluster_from_args
from fftgauge.harness.timing.opcount import DEFAULT_COUNTING_SPECS, DIRECT_COUNT_MAX_N, count_table
from fftgauge.harness.results import dumps, envelope, is_stdout, write_output, write_text_atomic
from fftgauge.harness.sizes import parse_sizes

DEFAULT_SIZES = "2^1..2^16"
SCHEMA = "fftgauge-count/1"

#: Table columns: (row key, group, heading).
_COLUMNS = [
    ("n", "", "n"),
    ("direct_mults_model", "direct model", "mults"),
    ("direct_adds_model", "direct model", "adds"),
    ("radix2_mults_model", "radix-2 model", "mults"),
    ("radix2_adds_model", "radix-2 model", "adds"),
    ("radix2_mults_counted", "radix-2 counted", "mults"),
    ("radix2_adds_counted", "radix-2 counted", "adds"),
    ("direct_mults_counted", "direct counted", "mults"),
    ("direct_adds_counted", "direct counted", "adds"),
    ("direct_to_radix2_mults", "direct/radix-2", "mults"),
]


def add_arguments(parser: argparse.ArgumentParser) -> None:
    """Add this sub-command's options to ``parser``."""
    add_common_options(parser, "sizes", "json", "csv", "quiet")
    parser.set_defaults(sizes=DEFAULT_SIZES)
    parser.epilog = (f"default sizes: {DEFAULT_SIZES}. Counted columns come from the instrumented "
                     f"radix2-dit (up to its max_n) and direct (up to n = {DIRECT_COUNT_MAX_N}) backends.")
    parser.add_argument("--trivial-twiddles", action=argparse.BooleanOptionalAction, default=True,
                        help="count the multiplications by the twiddle W^0 = 1 in the instrumented "
                             "counts (default: yes; --no-trivial-twiddles skips them)")
    add_cluster_option(parser, "the counts of the sizes")


def size_label(n: int) -> str:
    """Return ``2^k`` for a power of two ``n`` >= 2, else the number itself."""
    return dft.size_label(n)


def ratio_words(ratio: float) -> str:
    """Return a ratio in words: ``4.0`` below 1000, else ``2.0 x 10^5``."""
    if ratio < 1000:
        return f"{ratio:.1f}"
    exponent = int(math.floor(math.log10(ratio)))
    mantissa = ratio / 10**exponent
    if round(mantissa, 1) >= 10:
        mantissa, exponent = mantissa / 10, exponent + 1
    return f"{mantissa:.1f} x 10^{exponent}"


def summary_line(rows: list[dict[str, Any]]) -> str:
    """Return the one-sentence comparison for the largest size that has a radix-2 model."""
    compared = [r for r in rows if r["direct_to_radix2_mults"] is not None]
    if not compared:
        return "no power of two of at least 2 among the sizes: no radix-2 comparison"
    row = max(compared, key=lambda r: r["n"])
    return (f"a {size_label(row['n'])}-point direct DFT needs about {ratio_words(row['direct_to_radix2_mults'])} "
            f"times the complex multiplications of radix-2")


#: Digits after the point of the direct/radix-2 ratio column: one format down the column.
RATIO_DECIMALS = 1


def _cell(value: Any, key: str) -> str:
    """Return one table cell: ``-`` for None, the ratio column with :data:`RATIO_DECIMALS`
    decimals whatever its size, counts as integers."""
    if value is None:
        return "-"
    if key == "direct_to_radix2_mults":
        return f"{value:.{RATIO_DECIMALS}f}"
    return str(value)


def table_text(rows: list[dict[str, Any]]) -> str:
    """Return the rows as a terminal table (``-``: not applicable or not counted)."""
    import pandas as pd

    columns = pd.MultiIndex.from_tuples([(group, heading) for _, group, heading in _COLUMNS])
    data = [[_cell(r[key], key) for key, _, _ in _COLUMNS] for r in rows]
    return pd.DataFrame(data, columns=columns).to_string(index=False)


def run(args: argparse.Namespace) -> int:
    """Print the count table and the summary sentence (write JSON/CSV when asked); return 0.

    ``--json -`` writes the JSON to standard output and the table and sentence to standard
    error, so that standard output holds the JSON alone.

    Raises
    ------
    UsageError
        For a malformed size list or an unwritable output path.
    """
    sizes = parse_sizes(args.sizes)
    count_trivial = args.trivial_twiddles
    cluster = cluster_from_args(args)
    cluster_record = None
    if cluster is not None:
        from fftgauge.harness.cluster.opcounts import count_on_cluster
        rows, cluster_record = count_on_cluster(sizes, count_trivial, cluster, quiet=args.quiet)
    else:
        rows = count_table(sizes, count_trivial=count_trivial)
    if args.json:
        doc = envelope(SCHEMA, seed=None, extra={
            **({"cluster": cluster_record} if cluster_record else {}),
            "trivial_twiddles_counted": count_trivial,
            "counting_backends": dict(DEFAULT_COUNTING_SPECS),
            "direct_count_max_n": DIRECT_COUNT_MAX_N,
        })
        doc["rows"] = rows
        write_output(args.json, dumps(doc))
    if args.csv:
        import pandas as pd

        write_text_atomic(args.csv, pd.DataFrame(rows, dtype=object).to_csv(index=False))
    out = sys.stderr if is_stdout(args.json) else sys.stdout
    if not args.quiet:
        trivial = "counting" if count_trivial else "skipping"
        print(f"complex operations of one complex fft per size (models count every twiddle; "
              f"counted columns run {DEFAULT_COUNTING_SPECS['radix2']} and {DEFAULT_COUNTING_SPECS['direct']}, "
              f"{trivial} W^0 multiplications; - : not a power of two, or above the counting limit):", file=out)
        print(table_text(rows), file=out)
    print(summary_line(rows), file=out)
    return 0
