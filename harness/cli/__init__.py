"""The ``fftgauge`` command line: one parser, one module per sub-command.

Each sub-command module exposes ``add_arguments(parser)`` and ``run(args) -> int``. This
module only builds the parser, dispatches, and turns a :class:`UsageError` into the
contract's exit code 2 with one line on stderr.
"""

from __future__ import annotations

import argparse
import importlib
import sys
from typing import Sequence

from fftgauge import __version__
from fftgauge.harness.cases import parse_choice_list  # noqa: F401 - re-exported for the command modules
from fftgauge.harness.errors import UsageError

#: (sub-command, module holding add_arguments/run, one-line help)
COMMANDS: list[tuple[str, str, str]] = [
    ("backends", "fftgauge.harness.cli.backends", "list every backend found, available or not, with its capabilities"),
    ("check", "fftgauge.harness.cli.check", "run the correctness battery and diagnose what is wrong"),
    ("time", "fftgauge.harness.cli.time", "time planning and execution, with rates, memory and scaling"),
    ("gate", "fftgauge.harness.cli.gate", "regression gate for CI: candidate against a baseline, exit 1 on a regression"),
    ("report", "fftgauge.harness.cli.report", "turn stored results into plots (PNG/SVG), a scaling analysis and Markdown/HTML tables"),
    ("count", "fftgauge.harness.cli.count", "operation-count tables: direct DFT and radix-2 models against instrumented counts"),
    ("pick", "fftgauge.harness.cli.pick", "which backend to ship for a workload: battery and timer on it, ranked, in words"),
]

EXIT_OK, EXIT_FAILED, EXIT_USAGE = 0, 1, 2


class _Parser(argparse.ArgumentParser):
    """An ArgumentParser whose errors are one line and exit code 2."""

    def error(self, message: str) -> None:  # type: ignore[override]
        raise UsageError(f"{message} (see {self.prog} --help)")


def add_common_options(parser: argparse.ArgumentParser, *names: str, defaults: dict[str, str] | None = None) -> None:
    """Add the contract's common options named in ``names`` to ``parser``; ``defaults`` (name ->
    text) adds "(default TEXT)" to an option's help, for the command whose default it is.

    Known names: backend, kinds, dtypes, sizes, seed, json, csv, quiet, threads, pin.
    """
    table = {
        "backend": (("--backend",), dict(action="append", metavar="SPEC",
                    help="backend to use, repeatable (default: every available built-in backend)")),
        "kinds": (("--kinds",), dict(metavar="LIST", help="comma list of fft, ifft, rfft, irfft (default: all)")),
        "dtypes": (("--dtypes",), dict(metavar="LIST", help="comma list of float32, float64, longdouble")),
        "sizes": (("--sizes",), dict(metavar="SIZES", help="sizes: N, A..B, 2^A..2^B, @pow2, @primes, @smooth, "
                                                            "@odd, @default, @deep (comma-separated)")),
        "seed": (("--seed",), dict(type=int, default=1234, metavar="N", help="seed of every random input (default 1234)")),
        "json": (("--json",), dict(metavar="PATH", help="write the full machine-readable result here")),
        "csv": (("--csv",), dict(metavar="PATH", help="write the result table as CSV here")),
        "quiet": (("--quiet",), dict(action="store_true", help="no progress bar, only the summary")),
        "threads": (("--threads",), dict(type=int, metavar="N", help="threads for backends that take a thread option")),
        "pin": (("--pin-cpu",), dict(metavar="auto|off|CPUS",
                help="run every timed process on these CPUs (comma list); auto (default): the last CPU of the "
                     "allowed set (the last N with --threads N); off: let the OS place them")),
    }
    for name in names:
        flags, kwargs = table[name]
        if defaults and name in defaults:
            kwargs = {**kwargs, "help": f"{kwargs['help']} (default {defaults[name]})"}
        parser.add_argument(*flags, **kwargs)


def default_results_path(command: str) -> str:
    """Return ``results/<command>-<UTC time>.json``: where a run is written when --json is not given."""
    import datetime as dt

    stamp = dt.datetime.now(dt.timezone.utc).strftime("%Y%m%d-%H%M%S")
    return f"results/{command}-{stamp}.json"


def build_parser() -> argparse.ArgumentParser:
    """Return the full ``fftgauge`` parser with every sub-command registered."""
    parser = _Parser(prog="fftgauge", description="Correctness battery, timing runner and regression gate "
                                                  "for FFT implementations.")
    parser.add_argument("--version", action="version", version=f"fftgauge {__version__}")
    subs = parser.add_subparsers(dest="command", metavar="COMMAND", parser_class=_Parser)
    for name, module_name, help_text in COMMANDS:
        module = importlib.import_module(module_name)
        sub = subs.add_parser(name, help=help_text, description=help_text)
        module.add_arguments(sub)
        sub.set_defaults(_run=module.run)
    return parser


def main(argv: Sequence[str] | None = None) -> int:
    """Run the command line and return its exit code (0 ok, 1 a check failed, 2 bad request)."""
    try:
        parser = build_parser()
        args = parser.parse_args(argv)
        if not getattr(args, "_run", None):
            parser.print_help()
            return EXIT_USAGE
        return int(args._run(args))
    except UsageError as exc:
        print(f"fftgauge: error: {exc}", file=sys.stderr)
        return EXIT_USAGE
    except KeyboardInterrupt:
        print("fftgauge: interrupted; results written so far are kept", file=sys.stderr)
        return 130
    except BrokenPipeError:
        return EXIT_OK


if __name__ == "__main__":
    sys.exit(main())
