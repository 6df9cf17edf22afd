"""Comparison tables of timing rows: one row per size, one column per backend, the fastest marked.

:func:`comparison_table` builds the pandas DataFrame (the Python API's view of a timing
run), :func:`format_comparison` the terminal text and :func:`markdown_comparison` the
Markdown that ``fftgauge report`` writes.
"""

from __future__ import annotations

import dataclasses
from typing import TYPE_CHECKING, Any, Iterable

if TYPE_CHECKING:  # pandas is imported when a table is built, not with this module
    import pandas as pd

INDEX = ["kind", "dtype", "n"]

#: Appended to the heading of a column whose times the program measured itself
#: (``timing_source`` = ``program``: an ``exec:`` backend reporting its own elapsed time).
SELF_TIMED_MARK = "(self-timed)"
#: The legend line of that mark.
SELF_TIMED_LEGEND = (f"{SELF_TIMED_MARK}: timed by the program itself (its own reported time per call), not by "
                     f"fftgauge; not compared with fftgauge-timed columns for the fastest")

_UNITS = (("s", 1.0), ("ms", 1e-3), ("us", 1e-6), ("ns", 1e-9))


def format_seconds(seconds: float, micro: str = "us") -> str:
    """Return a time with a unit chosen so that it reads as 1 .. 999: ``9.9e-6`` -> ``"9.90 us"``.

    ``micro`` is the spelling of the micro prefix (``"us"`` for terminals, ``"µs"`` for
    Markdown and plots). NaN gives ``""``.
    """
    if seconds is None or seconds != seconds:
        return ""
    unit, scale = next(((u, s) for u, s in _UNITS if seconds >= s * 0.9995), _UNITS[-1])
    text = f"{seconds / scale:#.3g}".rstrip(".")
    return f"{text} {micro if unit == 'us' else unit}"


def _label_columns(df: pd.DataFrame) -> pd.Series:
    """Return each row's column label: the backend, plus ``(k threads)`` where a backend was
    timed with several thread counts."""
    import pandas as pd

    threads = df["threads"] if "threads" in df else pd.Series(1, index=df.index)
    several = df.assign(threads=threads).groupby("backend")["threads"].transform("nunique") > 1
    return df["backend"].where(~several, df["backend"] + " (" + threads.astype(str) + " threads)")


def comparison_table(time_rows: Iterable[Any]) -> pd.DataFrame:
    """Return the median seconds per case as a DataFrame: index (kind, dtype, n), one column per backend.

    Parameters
    ----------
    time_rows
        Rows of the ``fftgauge-time/1`` schema (dicts or :class:`fftgauge.harness.rows.TimeRow`).
        Rows whose status is not ``ok`` or that hold no time are left out (their cell is
        NaN); when the same backend and case appear twice, the last row wins.

    Returns
    -------
    pandas.DataFrame
        Index levels ``kind``, ``dtype``, ``n`` (sorted); columns are backend names (with
        ``(k threads)`` appended where one backend was timed with several thread counts),
        in order of first appearance; values are median seconds. The fastest backend per
        row is ``df.idxmin(axis=1)``; one (kind, dtype) block is ``df.loc[(kind, dtype)]``.
        ``df.attrs["self_timed"]`` lists the columns whose rows the program timed itself
        (``timing_source`` = ``program``).
    """
    import pandas as pd

    rows = [dataclasses.asdict(r) if dataclasses.is_dataclass(r) else dict(r) for r in time_rows]
    rows = [r for r in rows if r.get("status", "ok") == "ok" and r.get("seconds") is not None]
    if not rows:
        return pd.DataFrame(index=pd.MultiIndex.from_tuples([], names=INDEX), dtype=float)
    df = pd.DataFrame(rows)
    df["column"] = _label_columns(df)
    order = list(dict.fromkeys(df["column"]))
    df = df.drop_duplicates(subset=INDEX + ["column"], keep="last")
    table = df.pivot(index=INDEX, columns="column", values="seconds").sort_index()
    table = table[order].astype(float)
    table.columns.name = "backend"
    sources = df["timing_source"] if "timing_source" in df else pd.Series("harness", index=df.index)
    own = set(df.loc[sources == "program", "column"])
    table.attrs["self_timed"] = [c for c in order if c in own]
    return table


def _fastest(values: pd.Series, self_timed: set) -> Any:
    """Return the column of the smallest time among the fftgauge-timed columns that have one,
    or among the self-timed ones when none has; None for a row without any time."""
    timed = values.dropna()
    host = timed[[c not in self_timed for c in timed.index]]
    pool = host if not host.empty else timed
    return pool.idxmin() if not pool.empty else None


def comparison_blocks(df: pd.DataFrame, micro: str = "us") -> list[dict[str, Any]]:
    """Return the table as text cells, one block per kind x dtype, for any output format.

    Parameters
    ----------
    df
        A table from :func:`comparison_table`.
    micro
        Spelling of the micro prefix in the cells (``"us"`` or ``"µs"``).

    Returns
    -------
    list of dict
        Each with ``kind``, ``dtype``, ``header`` (``["n", backend, ...]``; a column the
        program timed itself carries :data:`SELF_TIMED_MARK`), ``rows`` (lists of cell texts,
        ``"-"`` where a backend has no time), ``fastest`` (per row, the column index of the
        fastest backend, or None; a self-timed column only where no fftgauge-timed column has
        a time) and ``legend`` (:data:`SELF_TIMED_LEGEND` when a column is marked, else None).
    """
    self_timed = set(df.attrs.get("self_timed", ()))
    out = []
    for (kind, dtype), block in df.groupby(level=["kind", "dtype"], sort=True):
        block = block.droplevel(["kind", "dtype"]).dropna(axis=1, how="all")
        rows, fastest = [], []
        for n, values in block.iterrows():
            best = _fastest(values, self_timed)
            rows.append([str(n)] + [format_seconds(v, micro) or "-" for v in values])
            fastest.append(1 + list(values.index).index(best) if best is not None else None)
        marked = [c in self_timed for c in block.columns]
        header = ["n"] + [f"{c} {SELF_TIMED_MARK}" if own else str(c) for c, own in zip(block.columns, marked)]
        out.append({"kind": kind, "dtype": dtype, "header": header, "rows": rows, "fastest": fastest,
                    "legend": SELF_TIMED_LEGEND if any(marked) else None})
    return out


def format_comparison(df: pd.DataFrame) -> str:
    """Return the table as terminal text: one block per kind x dtype, the fastest cell marked ``*``.

    Parameters
    ----------
    df
        A table from :func:`comparison_table`.
    """
    if df.empty:
        return "no timed cases"
    parts = []
    for block in comparison_blocks(df):
        header = block["header"]
        cells = [[cell if j == 0 else f"{cell} *" if j == best else f"{cell}  " for j, cell in enumerate(row)]
                 for row, best in zip(block["rows"], block["fastest"])]
        widths = [max(len(h), *(len(r[i]) for r in cells)) for i, h in enumerate(header)]
        lines = [f"{block['kind']} {block['dtype']}: median time per transform (* fastest)",
                 "  ".join(h.rjust(w) for h, w in zip(header, widths))]
        lines += ["  ".join(c.rjust(w) for c, w in zip(row, widths)) for row in cells]
        if block["legend"]:
            lines.append(block["legend"])
        parts.append("\n".join(lines))
    return "\n\n".join(parts)


def markdown_comparison(df: pd.DataFrame, heading_level: int = 3) -> str:
    """Return the table as Markdown: one table per kind x dtype, the fastest cell in bold.

    Parameters
    ----------
    df
        A table from :func:`comparison_table`.
    heading_level
        Markdown heading level of each block's title.
    """
    from fftgauge.harness.report.markup import markdown_table

    if df.empty:
        return "no timed cases\n"
    parts = []
    for block in comparison_blocks(df, "µs"):
        title = f"{'#' * heading_level} {block['kind']} {block['dtype']}: median time per transform (fastest in bold)"
        bold = {(i, j) for i, j in enumerate(block["fastest"]) if j is not None}
        legend = f"\n\n{block['legend']}" if block["legend"] else ""
        parts.append(title + "\n\n" + markdown_table(block["header"], block["rows"], bold) + legend)
    return "\n\n".join(parts) + "\n"


def format_bytes(count: float | None) -> str:
    """Return a byte count in binary units: ``16384`` -> ``"16.0 KiB"``; None gives ``""``."""
    if count is None:
        return ""
    for unit, scale in (("GiB", 2**30), ("MiB", 2**20), ("KiB", 2**10)):
        if count >= scale:
            return f"{count / scale:.1f} {unit}"
    return f"{int(count)} B"


def rate_gflops(row: dict[str, Any]) -> float | None:
    """Return the row's rate in GFLOP/s: its ``gflops`` field, else the conventional flop count
    (:func:`fftgauge.harness.timing.opcount.pseudo_flops`: 5 N log2 N, 2.5 N log2 N for real
    transforms) over its median time; None without a time or for N < 2."""
    if row.get("gflops") is not None:
        return float(row["gflops"])
    if not row.get("seconds") or row["n"] < 2:
        return None
    from fftgauge.harness.timing.opcount import gflops, pseudo_flops

    flops = row.get("flops") or pseudo_flops(row["n"], row["kind"] in ("rfft", "irfft"))
    return gflops(flops, row["seconds"])


def rate_text(rate: float | None, dtype: str) -> str:
    """Return a rate cell: ``'5.12'`` (GFLOP/s), ``'0.512 Gop/s'`` for a q15/q31 case (the same
    5 N log2 N count, integer operations: not floating point), ``'-'`` for None."""
    if rate is None:
        return "-"
    return f"{rate:.3g} Gop/s" if dtype in ("q15", "q31") else f"{rate:.3g}"


#: Columns of :func:`timing_summary`.
TIMING_SUMMARY_HEADER = ["backend", "kind", "dtype", "sizes timed", "fastest at", "planning (median)",
                         "planning (most)", "largest N", "time at largest N", "peak memory at largest N",
                         "GFLOP/s at largest N", "GFLOP/s (best)"]


def timing_summary(time_rows: Iterable[Any], micro: str = "µs") -> list[list[str]]:
    """Return one line of text cells per backend x kind x dtype (:data:`TIMING_SUMMARY_HEADER`):
    the sizes timed, at how many of the sizes two or more backends timed it was the fastest,
    the median and largest planning time, and at the largest N its median time, peak memory
    and rate, with the best rate over all sizes (GFLOP/s by :func:`rate_gflops`).

    Lines are in the order fft, ifft, rfft, irfft, then precision, then backend; rows that
    are not ``ok`` or hold no time are left out.
    """
    rows = [dataclasses.asdict(r) if dataclasses.is_dataclass(r) else dict(r) for r in time_rows]
    rows = [r for r in rows if r.get("status", "ok") == "ok" and r.get("seconds")]
    best: dict[tuple, tuple[float, int]] = {}
    for r in rows:
        key = (r["kind"], r["dtype"], r["n"])
        fastest, count = best.get(key, (float("inf"), 0))
        best[key] = (min(fastest, r["seconds"]), count + 1)
    groups: dict[tuple, list[dict[str, Any]]] = {}
    for r in rows:
        groups.setdefault((r["backend"], r["kind"], r["dtype"]), []).append(r)
    lines = []
    kinds = {"fft": 0, "ifft": 1, "rfft": 2, "irfft": 3}
    for (backend, kind, dtype), mine in sorted(groups.items(), key=lambda kv: (kinds.get(kv[0][1], 9), kv[0][1],
                                                                              kv[0][2], kv[0][0])):
        mine.sort(key=lambda r: r["n"])
        shared = [r for r in mine if best[(kind, dtype, r["n"])][1] >= 2]
        wins = sum(1 for r in shared if r["seconds"] <= best[(kind, dtype, r["n"])][0])
        plans = sorted(r["plan_seconds"] for r in mine if r.get("plan_seconds") is not None)
        top = mine[-1]
        rates = [g for g in (rate_gflops(r) for r in mine) if g is not None]
        lines.append([backend, kind, dtype, str(len(mine)), f"{wins} of {len(shared)}" if shared else "-",
                      format_seconds(plans[(len(plans) - 1) // 2], micro) if plans else "-",
                      format_seconds(plans[-1], micro) if plans else "-", str(top["n"]),
                      format_seconds(top["seconds"], micro), format_bytes(top.get("peak_bytes")) or "-",
                      rate_text(rate_gflops(top), dtype), rate_text(max(rates) if rates else None, dtype)])
    return lines
