"""``fftgauge backends``: every backend found, available or not, with capabilities, and a last
line saying whether valgrind (the ``instructions`` metric) is here (JSON: ``valgrind``, its
path or null)."""

from __future__ import annotations

import argparse
import json
import sys

from fftgauge.backends.registry import list_backends


def add_arguments(parser: argparse.ArgumentParser) -> None:
    """Add this sub-command's options to ``parser``."""
    parser.add_argument("--json", metavar="PATH", help="write the listing as JSON ('-' for standard output)")


def _text(value) -> str:
    return str(value).lower() if isinstance(value, bool) else str(value)


def _line(info) -> str:
    """Return the listing of one backend: a heading line, then its claims and options."""
    if not info.available:
        return f"  {info.name:<12} unavailable: {info.reason}"
    caps = info.capabilities.as_dict()
    sizes = "powers of two" if caps["sizes"] == "pow2" else "any size"
    if caps["min_n"] > 1:
        sizes += f" from {caps['min_n']}"
    if caps["max_n"]:
        sizes += f" up to {caps['max_n']}"
    features = [x for x, on in (("separate planning", caps["separate_planning"]), ("in place", caps["in_place"]),
                                (f"thread option {caps['thread_option']}", caps["thread_option"]),
                                ("counts operations", caps["counts_operations"])) if on]
    lines = [f"  {info.name:<12} {info.version}  ({info.source})",
             f"  {'':<12} kinds {','.join(caps['kinds'])}; {','.join(caps['dtypes'])}; {sizes}"
             + (f"; {'; '.join(features)}" if features else "")]
    if info.options:
        opts = ", ".join(f"{k}={_text(v['default'])}" for k, v in info.options.items())
        lines.append(f"  {'':<12} options: {opts}")
    return "\n".join(lines)


def run(args: argparse.Namespace) -> int:
    """Print the listing (and write JSON when asked); return 0."""
    from fftgauge.harness.counts.cachegrind import find_valgrind

    infos = list_backends()
    if args.json:
        text = json.dumps({"schema": "fftgauge-backends/1", "backends": [i.as_dict() for i in infos],
                           "valgrind": find_valgrind()}, indent=2)
        if args.json == "-":
            print(text)
            return 0
        from fftgauge.harness.results import write_text_atomic
        write_text_atomic(args.json, text + "\n")
    print("backends found (name, version, what it claims):")
    for info in infos:
        print(_line(info))
    from fftgauge.harness.counts.cachegrind import availability_line
    print(availability_line())
    from fftgauge.harness.cluster.target import cluster_lines
    print("\n".join(cluster_lines()))
    return 0
