"""Timing plots: time per transform against N with the N log2 N and N^2 model lines, and the
rate in GFLOP/s against N. Each ``draw_*`` returns a Figure (one panel per kind x
precision), each ``plot_*`` writes it (PNG or SVG by extension) and returns the path.
"""

from __future__ import annotations

import math
from typing import Any, Iterable, Mapping

import numpy as np

from fftgauge.harness.cases import is_power_of_two
from fftgauge.harness.errors import UsageError
from fftgauge.harness.report.figures import (MODEL_COLOUR, check_plot_path, draw_series, end_labels,
                                             matplotlib_module, new_figure, panel_keys, pow2_axis, right_room,
                                             save_figure, seconds_tick, split_series, style_axes, style_legend,
                                             timed_rows, backend_colours)
from fftgauge.harness.timing.opcount import pseudo_flops

#: The model lines are anchored at the middle of the powers of two at least this size.
MODEL_ANCHOR_MIN_N = 64


def _interval(row: Mapping[str, Any]) -> tuple[float, float] | None:
    lo, hi = row.get("seconds_low"), row.get("seconds_high")
    if lo is None or hi is None or lo <= 0 or hi <= 0:
        return None
    return (lo, hi)


def _model_anchor(rows: list[dict[str, Any]]) -> tuple[int, float]:
    """Return (n0, t0): the anchor size of the model lines and the fastest median time there.

    n0 is the middle (lower median) of the powers of two >= :data:`MODEL_ANCHOR_MIN_N`
    present, so that the models cross the data mid-range instead of at small sizes where
    the fixed cost of a call bends every curve; without such sizes, the middle power of two,
    else the middle size.
    """
    sizes = sorted({r["n"] for r in rows if r["n"] >= 2})
    pow2 = [n for n in sizes if is_power_of_two(n)]
    big = [n for n in pow2 if n >= MODEL_ANCHOR_MIN_N]
    pool = big or pow2 or sizes
    n0 = pool[(len(pool) - 1) // 2]
    return n0, min(r["seconds"] for r in rows if r["n"] == n0)


def _draw_models(ax, rows: list[dict[str, Any]], n_lo: int, n_hi: int) -> tuple[int, list[tuple]]:
    """Draw the N log2 N and N^2 model lines through the fastest time at the anchor size.

    Returns the anchor size and the end labels of the lines that end inside the panel (to be
    spread with the backends' labels); a line that leaves through the top is labelled where
    it reaches 85% of the panel's height, left of the line.
    """
    n0, t0 = _model_anchor(rows)
    grid = np.geomspace(max(n_lo, 2), n_hi, 300)
    models = [("model:nlogn", "N log$_2$ N", (0, (6, 3)), t0 * grid * np.log2(grid) / (n0 * math.log2(n0))),
              ("model:n2", "N$^2$", (0, (1.5, 2.5)), t0 * (grid / n0) ** 2)]
    y_lo, y_hi = ax.get_ylim()
    target = 10.0 ** (math.log10(y_lo) + 0.85 * (math.log10(y_hi) - math.log10(y_lo)))
    ends = []
    for gid, text, dash, values in models:
        ax.plot(grid, values, linestyle=dash, linewidth=1.6, color=MODEL_COLOUR, gid=gid, zorder=1,
                label=f"_{gid}")
        if values[-1] <= y_hi:
            ends.append((f"∝ {text}", grid[-1], values[-1], MODEL_COLOUR, True))
            continue
        where = int(np.flatnonzero(values >= target)[0])
        ax.annotate(f"∝ {text}", (grid[where], values[where]), xytext=(-7, 0), textcoords="offset points",
                    ha="right", va="center", color=MODEL_COLOUR, fontsize=11.5, fontstyle="italic",
                    gid=f"label:{gid}")
    ax.set_ylim(y_lo, y_hi)
    return n0, ends


def _size_words(n: int) -> str:
    """Return ``2^k`` (mathtext) for a power of two, else the number."""
    return f"$2^{{{n.bit_length() - 1}}}$" if n >= 2 and is_power_of_two(n) else str(n)


def _time_legend(ax, series: dict[str, dict[str, Any]], n0: int) -> None:
    """Add the legend of line styles: powers of two, other sizes (if any), the model lines' anchor."""
    from matplotlib.lines import Line2D

    handles = [Line2D([], [], color="0.3", marker="o", markersize=4.5, linewidth=2.0, label="powers of two")]
    if any(s["others"] for s in series.values()):
        handles.append(Line2D([], [], color="0.3", marker="D", markersize=5.5, markerfacecolor="none",
                              linestyle="none", label="other sizes"))
    handles.append(Line2D([], [], color=MODEL_COLOUR, linestyle=(0, (6, 3)), linewidth=1.6,
                          label=f"models through the fastest at N = {_size_words(n0)}"))
    ax.legend(handles=handles, loc="lower right", frameon=True, framealpha=0.9)


def draw_time(rows: Iterable[Any], title: str | None = None):
    """Return a Figure of median time per transform against N (log-log), one panel per kind x dtype.

    Each backend is a line through its powers of two with its 95% interval shaded and its
    other sizes as hollow markers; the N log2 N and N^2 model lines go through the fastest
    backend's time at the smallest power of two >= 64.

    Raises
    ------
    UsageError
        When no row holds a time, or matplotlib is missing.
    """
    matplotlib_module()
    rows = timed_rows(rows)
    if not rows:
        raise UsageError("no timed rows to plot (every row is skipped or failed)")
    from matplotlib.ticker import FuncFormatter, LogLocator

    keys = panel_keys(rows)
    colours = backend_colours(r["backend"] for r in rows)
    fig, axes = new_figure(len(keys), title or "Time per transform (lower is better)")
    for ax, (kind, dtype) in zip(axes, keys):
        panel = [r for r in rows if r["kind"] == kind and r["dtype"] == dtype]
        series = split_series(panel, lambda r: r["seconds"])
        n_lo, n_hi = min(r["n"] for r in panel), max(r["n"] for r in panel)
        ends = draw_series(ax, series, colours, band=_interval)
        pow2_axis(ax, n_lo, n_hi, right_room(list(series) + ["∝ N log2 N"]))
        ax.set_yscale("log")
        lows = [(_interval(r) or (r["seconds"],))[0] for r in panel]
        highs = [(_interval(r) or (0, r["seconds"]))[1] for r in panel]
        ax.set_ylim(min(lows) / 2.5, max(highs) * 2.5)
        ax.yaxis.set_major_locator(LogLocator(base=10))
        ax.yaxis.set_major_formatter(FuncFormatter(seconds_tick))
        n0, model_ends = _draw_models(ax, panel, n_lo, n_hi)
        end_labels(ax, ends + model_ends, log_y=True)
        _time_legend(ax, series, n0)
        style_axes(ax)
        ax.set_title(f"{kind} {dtype}")
        ax.set_ylabel("median time per transform")
    return fig


def plot_time(rows: Iterable[Any], path: str, title: str | None = None) -> str:
    """Draw :func:`draw_time` and write it to ``path`` (.png or .svg); return ``path``.

    Raises
    ------
    UsageError
        For another extension, no timed rows, or matplotlib missing.
    """
    check_plot_path(path)
    return save_figure(draw_time(rows, title), path)


# --------------------------------------------------------------------------- rate

def _gflops(row: Mapping[str, Any]) -> float:
    """Return the row's GFLOP/s: its field, else pseudo_flops / seconds / 1e9."""
    if row.get("gflops") is not None:
        return float(row["gflops"])
    flops = row.get("flops")
    if flops is None:
        flops = pseudo_flops(row["n"], row["kind"] in ("rfft", "irfft"))
    return flops / row["seconds"] / 1e9


def draw_rate(rows: Iterable[Any], title: str | None = None):
    """Return a Figure of GFLOP/s (5 N log2 N convention; 2.5 N log2 N for real kinds) against N.

    Raises
    ------
    UsageError
        When no row holds a time, or matplotlib is missing.
    """
    matplotlib_module()
    rows = [r for r in timed_rows(rows) if r["n"] >= 2]
    if not rows:
        raise UsageError("no timed rows with n >= 2 to plot")
    keys = panel_keys(rows)
    colours = backend_colours(r["backend"] for r in rows)
    fig, axes = new_figure(len(keys), title or "Rate in GFLOP/s (higher is better)")
    for ax, (kind, dtype) in zip(axes, keys):
        panel = [r for r in rows if r["kind"] == kind and r["dtype"] == dtype]
        series = split_series(panel, _gflops)
        ends = draw_series(ax, series, colours)
        pow2_axis(ax, min(r["n"] for r in panel), max(r["n"] for r in panel), right_room(series))
        ax.set_ylim(0, max(_gflops(r) for r in panel) * 1.15)
        end_labels(ax, ends, log_y=False)
        style_legend(ax, series, "upper left")
        style_axes(ax)
        factor = "2.5" if kind in ("rfft", "irfft") else "5"
        ax.set_title(f"{kind} {dtype}")
        ax.set_ylabel(f"GFLOP/s (counting {factor} N log$_2$ N flops)")
    return fig


def plot_rate(rows: Iterable[Any], path: str, title: str | None = None) -> str:
    """Draw :func:`draw_rate` and write it to ``path`` (.png or .svg); return ``path``.

    Raises
    ------
    UsageError
        For another extension, no timed rows, or matplotlib missing.
    """
    check_plot_path(path)
    return save_figure(draw_rate(rows, title), path)
