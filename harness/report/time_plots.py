"""The speed plots of timing rows, one panel per kind x precision:

- :func:`draw_time`: time per point (median time of one transform divided by N) against N,
  with the model lines of an FFT's cost (N log2 N) and of a direct DFT's (N^2) through the
  fastest time at a mid-range size; a backend that scales like an FFT runs parallel to the
  dashed line, cache cliffs show as steps;
- :func:`draw_relative`: each backend's median time divided by the fastest backend's at the
  same N (1 = fastest), so who is faster, by how much, at which sizes, reads directly.

Each ``draw_*`` returns a Figure, each ``plot_*`` writes it (PNG or SVG by extension) and
returns the path. The rate in GFLOP/s is a number in the tables, not a plot.
"""

from __future__ import annotations

import math
from typing import Any, Iterable, Mapping

import numpy as np

from fftgauge.harness.cases import is_power_of_two
from fftgauge.harness.dft import size_label
from fftgauge.harness.errors import UsageError
from fftgauge.harness.report.figures import (MODEL_COLOUR, backend_colours, check_plot_path, draw_series,
                                             figure_legend, matplotlib_module, name_lines, new_figure, panel_keys,
                                             save_figure, seconds_tick, split_series, style_axes, style_handles,
                                             styled, timed_rows)

#: The model lines are anchored at the middle of the powers of two at least this size.
MODEL_ANCHOR_MIN_N = 64

#: What the band around each line in the time-per-point plot is.
TIME_BAND = "95% interval of the median"


def _interval(row: Mapping[str, Any]) -> tuple[float, float] | None:
    lo, hi = row.get("seconds_low"), row.get("seconds_high")
    if lo is None or hi is None or lo <= 0 or hi <= 0:
        return None
    return (lo, hi)


def per_point_interval(row: Mapping[str, Any]) -> tuple[float, float] | None:
    """Return the row's 95% interval of the median divided by N, or None without one."""
    interval = _interval(row)
    return None if interval is None else (interval[0] / row["n"], interval[1] / row["n"])


def model_anchor(rows: list[dict[str, Any]]) -> tuple[int, float]:
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


def size_words(n: int) -> str:
    """Return ``2^k`` (mathtext) for a power of two, else the number."""
    return size_label(n, mathtext=True)


def _draw_models(ax, rows: list[dict[str, Any]], n_lo: int, n_hi: int) -> None:
    """Draw the per-point model lines through the fastest time at the anchor size, and a grey
    ring at that anchor.

    Per point, a cost t0 (N log2 N)/(n0 log2 n0) is t0/n0 * log2 N / log2 n0 and a cost
    t0 (N/n0)^2 is t0/n0 * N/n0. The panel's height is kept: a model leaving it is clipped.
    """
    n0, t0 = model_anchor(rows)
    grid = np.geomspace(max(n_lo, 2), n_hi, 300)
    y_lo, y_hi = ax.get_ylim()
    for gid, dash, values in (("model:nlogn", MODEL_DASHES["nlogn"], t0 / n0 * np.log2(grid) / math.log2(n0)),
                              ("model:n2", MODEL_DASHES["n2"], t0 / n0 * grid / n0)):
        ax.plot(grid, values, linestyle=dash, linewidth=1.6, color=MODEL_COLOUR, gid=gid, zorder=1)
    ax.plot([n0], [t0 / n0], linestyle="none", marker="o", markersize=13, markerfacecolor="none",
            markeredgewidth=1.6, color=MODEL_COLOUR, gid="model:anchor", zorder=1)
    ax.set_ylim(y_lo, y_hi)


#: Dash patterns of the model lines.
MODEL_DASHES = {"nlogn": (0, (6, 3)), "n2": (0, (1.5, 2.5))}


def model_handles() -> list:
    """Return the legend entries of the model lines and their anchor ring."""
    from matplotlib.lines import Line2D

    return [Line2D([], [], color=MODEL_COLOUR, linestyle=MODEL_DASHES["nlogn"], linewidth=1.6,
                   label="∝ N log$_2$ N: an FFT's cost"),
            Line2D([], [], color=MODEL_COLOUR, linestyle=MODEL_DASHES["n2"], linewidth=1.6,
                   label="∝ N$^2$: a direct DFT's cost"),
            Line2D([], [], color=MODEL_COLOUR, linestyle="none", marker="o", markersize=11, markerfacecolor="none",
                   markeredgewidth=1.6, label="grey ring: the fastest time the\nmodels are drawn through")]


@styled
def draw_time(rows: Iterable[Any], title: str | None = None):
    """Return a Figure of time per point (median seconds / N) against N, log-log.

    Each backend is a line through its powers of two with its 95% interval (divided by N)
    shaded and its other sizes as hollow markers; the N log2 N and N^2 model lines go
    through the fastest time at the anchor size (:func:`model_anchor`). Backends are named
    at their lines' ends, or in the legend where those labels would collide.

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
    fig, axes = new_figure(len(keys), title or "Time per point: median time of one transform / N (lower is faster)")
    for ax, (kind, dtype) in zip(axes, keys):
        panel = [r for r in rows if r["kind"] == kind and r["dtype"] == dtype]
        series = split_series(panel, lambda r: r["seconds"] / r["n"])
        n_lo, n_hi = min(r["n"] for r in panel), max(r["n"] for r in panel)
        ends = draw_series(ax, series, colours, band=per_point_interval)
        ax.set_yscale("log")
        lows = [(per_point_interval(r) or (r["seconds"] / r["n"],))[0] for r in panel]
        highs = [(per_point_interval(r) or (0, r["seconds"] / r["n"]))[1] for r in panel]
        ax.set_ylim(min(lows) / 2.0, max(highs) * 2.0)
        ax.yaxis.set_major_locator(LogLocator(base=10))
        ax.yaxis.set_major_formatter(FuncFormatter(seconds_tick))
        _draw_models(ax, panel, n_lo, n_hi)
        name_lines(ax, ends, True, n_lo, n_hi)
        style_axes(ax)
        ax.set_title(f"{kind} {dtype}")
        ax.set_ylabel("median time per transform / N")
    others = any(r["n"] >= 2 and not is_power_of_two(r["n"]) for r in rows)
    figure_legend(fig, colours, style_handles(others, TIME_BAND) + model_handles())
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


def relative_rows(rows: list[dict[str, Any]]) -> list[dict[str, Any]]:
    """Return the rows of sizes timed by at least two backends, each with ``relative``: its
    median time divided by the fastest median time at that kind, precision and N."""
    fastest: dict[tuple, float] = {}
    count: dict[tuple, int] = {}
    for r in rows:
        key = (r["kind"], r["dtype"], r["n"])
        fastest[key] = min(fastest.get(key, math.inf), r["seconds"])
        count[key] = count.get(key, 0) + 1
    return [{**r, "relative": r["seconds"] / fastest[(r["kind"], r["dtype"], r["n"])]} for r in rows
            if count[(r["kind"], r["dtype"], r["n"])] >= 2]


def _times_tick(value: float, _pos: Any = None) -> str:
    return f"{value:g}×" if value > 0 else ""


@styled
def draw_relative(rows: Iterable[Any], title: str | None = None):
    """Return a Figure of each backend's median time relative to the fastest at each N.

    Only sizes that two or more backends timed count (:func:`relative_rows`); 1 is the
    fastest, 2 twice as slow (log scale). The fastest backend at a size sits on the line at 1.

    Raises
    ------
    UsageError
        When no size was timed by two backends, or matplotlib is missing.
    """
    matplotlib_module()
    rows = relative_rows(timed_rows(rows))
    if not rows:
        raise UsageError("no size was timed by two or more backends: nothing to compare")
    from matplotlib.lines import Line2D
    from matplotlib.ticker import FuncFormatter, LogLocator, NullFormatter

    keys = panel_keys(rows)
    colours = backend_colours(r["backend"] for r in rows)
    fig, axes = new_figure(len(keys), title or "Time relative to the fastest backend at each N (1× = fastest)")
    for ax, (kind, dtype) in zip(axes, keys):
        panel = [r for r in rows if r["kind"] == kind and r["dtype"] == dtype]
        series = split_series(panel, lambda r: r["relative"])
        n_lo, n_hi = min(r["n"] for r in panel), max(r["n"] for r in panel)
        ax.plot([n_lo, n_hi], [1.0, 1.0], color=MODEL_COLOUR, linewidth=1.2, linestyle=(0, (6, 3)), gid="fastest",
                zorder=1)
        ends = draw_series(ax, series, colours)
        ax.set_yscale("log")
        top = max(r["relative"] for r in panel)
        ax.set_ylim(0.85, max(2.0, top * 1.6))
        ax.yaxis.set_major_locator(LogLocator(base=10, subs=(1.0, 2.0, 5.0)))
        ax.yaxis.set_minor_formatter(NullFormatter())
        ax.yaxis.set_major_formatter(FuncFormatter(_times_tick))
        name_lines(ax, ends, True, n_lo, n_hi)
        style_axes(ax)
        ax.set_title(f"{kind} {dtype}")
        ax.set_ylabel("median time / fastest median time")
    fastest = Line2D([], [], color=MODEL_COLOUR, linewidth=1.2, linestyle=(0, (6, 3)), label="1×: the fastest")
    others = any(r["n"] >= 2 and not is_power_of_two(r["n"]) for r in rows)
    figure_legend(fig, colours, style_handles(others) + [fastest])
    return fig


def plot_relative(rows: Iterable[Any], path: str, title: str | None = None) -> str:
    """Draw :func:`draw_relative` and write it to ``path`` (.png or .svg); return ``path``.

    Raises
    ------
    UsageError
        For another extension, no size timed by two backends, or matplotlib missing.
    """
    check_plot_path(path)
    return save_figure(draw_relative(rows, title), path)
