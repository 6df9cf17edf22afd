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
    return table


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
        Each with ``kind``, ``dtype``, ``header`` (``["n", backend, ...]``), ``rows`` (lists
        of cell texts, ``"-"`` where a backend has no time) and ``fastest`` (per row, the
        column index of the fastest backend, or None).
    """
    out = []
    for (kind, dtype), block in df.groupby(level=["kind", "dtype"], sort=True):
        block = block.droplevel(["kind", "dtype"]).dropna(axis=1, how="all")
        rows, fastest = [], []
        for n, values in block.iterrows():
            best = values.idxmin() if values.notna().any() else None
            rows.append([str(n)] + [format_seconds(v, micro) or "-" for v in values])
            fastest.append(1 + list(values.index).index(best) if best is not None else None)
        out.append({"kind": kind, "dtype": dtype, "header": ["n"] + [str(c) for c in block.columns],
                    "rows": rows, "fastest": fastest})
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
        parts.append(title + "\n\n" + markdown_table(block["header"], block["rows"], bold))
    return "\n\n".join(parts) + "\n"
