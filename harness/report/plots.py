"""Plots of stored results: time against N with the N log2 N and N^2 models, GFLOP/s against
N, accuracy against N with the error bound, and one case's history over stored runs.

Every ``draw_*`` function returns a :class:`matplotlib.figure.Figure` (one panel per kind x
precision present) and every ``plot_*`` function draws, saves to PNG or SVG by the path's
extension and returns the path. matplotlib is imported only when a plot is drawn, so the
rest of fftgauge works without it. Figures are built with :class:`matplotlib.figure.Figure`
directly rather than through ``pyplot``: they render with matplotlib's Agg (PNG) and SVG
writers whatever the session's interactive backend is, need no display, and leave no
global figure state behind.

Lines are labelled at their right end (the backend's name in its colour, the model's
formula in grey), so a reader does not need a legend. In the time, rate and accuracy plots
the lines join the powers of two; other sizes (primes, smooth sizes) are hollow markers of
the same colour, so that a slow prime stands out from the line instead of zigzagging it.

Artists carry a ``gid`` that tests and callers can inspect: ``backend:NAME`` (a backend's
line), ``other-sizes:NAME``, ``model:nlogn``, ``model:n2``, ``bound``, ``fail``; in the
history plot ``backend:NAME``, ``median``, ``ratio:NAME`` and ``no-change``.
"""

from __future__ import annotations

import dataclasses
import math
import os
import tempfile
from typing import Any, Iterable, Mapping, Sequence

import numpy as np

from fftgauge.harness.cases import Case, is_power_of_two
from fftgauge.harness.errors import UsageError
from fftgauge.harness.timing.opcount import pseudo_flops

#: Extensions a plot can be written as.
FORMATS = ("png", "svg")

#: Resolution of PNG files (dots per inch); a 7.5 x 5.2 inch panel is about 975 x 675 pixels.
PNG_DPI = 130

#: The model lines are anchored at the middle of the powers of two at least this size.
MODEL_ANCHOR_MIN_N = 64

_STYLE = {
    "font.size": 11, "axes.titlesize": 13, "axes.labelsize": 12, "xtick.labelsize": 10.5,
    "ytick.labelsize": 10.5, "legend.fontsize": 10, "axes.spines.top": False, "axes.spines.right": False,
    "svg.fonttype": "none",
}
_MODEL_COLOUR = "0.35"
_BOUND_COLOUR = "0.15"
_FAIL_COLOUR = "#d62728"


def _matplotlib():
    """Return the matplotlib module and its Figure class.

    Raises
    ------
    UsageError
        When matplotlib is not installed (the plots extra).
    """
    try:
        import matplotlib
        from matplotlib.figure import Figure
    except ImportError:
        raise UsageError("plots need matplotlib: install matplotlib (pip install 'fftgauge[plots]')") from None
    return matplotlib, Figure


def require_matplotlib() -> None:
    """Check that matplotlib can be imported.

    Raises
    ------
    UsageError
        When it cannot (install the plots extra).
    """
    _matplotlib()


def check_plot_path(path: str) -> str:
    """Return the format (``png`` or ``svg``) that ``path``'s extension asks for.

    Raises
    ------
    UsageError
        For any other extension.
    """
    ext = os.path.splitext(str(path))[1].lower().lstrip(".")
    if ext not in FORMATS:
        raise UsageError(f"plot file {path!r}: write .png or .svg (got {'.' + ext if ext else 'no extension'})")
    return ext


def save_figure(fig: Any, path: str) -> str:
    """Write ``fig`` to ``path`` (PNG or SVG by extension) atomically and return ``path``.

    Raises
    ------
    UsageError
        For an extension other than .png/.svg, or a folder that cannot be written.
    """
    fmt = check_plot_path(path)
    folder = os.path.dirname(os.path.abspath(path))
    try:
        os.makedirs(folder, exist_ok=True)
        fd, tmp = tempfile.mkstemp(prefix=".fftgauge-", suffix=f".{fmt}", dir=folder)
    except OSError as exc:
        raise UsageError(f"cannot write {path!r}: {exc.strerror}; choose a writable location") from None
    try:
        with os.fdopen(fd, "wb") as fh:
            fig.savefig(fh, format=fmt, dpi=PNG_DPI)
        os.replace(tmp, path)
    except BaseException:
        if os.path.exists(tmp):
            os.unlink(tmp)
        raise
    return path


# --------------------------------------------------------------------------- rows and panels

def _as_dicts(rows: Iterable[Any]) -> list[dict[str, Any]]:
    return [dataclasses.asdict(r) if dataclasses.is_dataclass(r) else dict(r) for r in rows]


def _timed(rows: Iterable[Any]) -> list[dict[str, Any]]:
    """Return the rows that hold a positive median time."""
    return [r for r in _as_dicts(rows)
            if r.get("status", "ok") == "ok" and (r.get("seconds") or 0) > 0 and r.get("n", 0) >= 1]


def _panel_keys(rows: Sequence[Mapping[str, Any]]) -> list[tuple[str, str]]:
    """Return the (kind, dtype) pairs present, in the order fft, ifft, rfft, irfft x float32, float64, ..."""
    kinds = {"fft": 0, "ifft": 1, "rfft": 2, "irfft": 3}
    dtypes = {"float32": 0, "float64": 1, "longdouble": 2}
    keys = {(r["kind"], r["dtype"]) for r in rows}
    return sorted(keys, key=lambda k: (kinds.get(k[0], 9), k[0], dtypes.get(k[1], 9), k[1]))


def backend_colours(names: Iterable[str]) -> dict[str, Any]:
    """Return one colour per backend name (the tab10 cycle, in sorted name order), stable across plots."""
    cycle = ["#1f77b4", "#ff7f0e", "#2ca02c", "#9467bd", "#8c564b", "#e377c2", "#17becf", "#bcbd22",
             "#7f7f7f", "#393b79"]
    return {name: cycle[i % len(cycle)] for i, name in enumerate(sorted(set(names)))}


def _new_figure(n_panels: int, title: str | None):
    """Return (figure, axes list) for ``n_panels`` panels in up to two columns."""
    matplotlib, Figure = _matplotlib()
    ncols = 1 if n_panels <= 1 else 2
    nrows = max(1, math.ceil(n_panels / ncols))
    with matplotlib.rc_context(_STYLE):
        fig = Figure(figsize=(7.5 * ncols, 5.2 * nrows), layout="constrained")
        axes = list(np.atleast_1d(fig.subplots(nrows, ncols, squeeze=False)).ravel())
    for ax in axes[n_panels:]:
        ax.set_visible(False)
    if title:
        fig.suptitle(title, fontsize=14)
    return fig, axes[:n_panels]


def _style_axes(ax) -> None:
    ax.grid(True, which="major", alpha=0.35)
    ax.grid(True, which="minor", alpha=0.12)
    ax.set_axisbelow(True)


def _pow2_axis(ax, n_lo: int, n_hi: int, right_room: float) -> None:
    """Log2 x axis with ticks 2^k, and ``right_room`` (fraction of the width) kept free for labels."""
    from matplotlib.ticker import FixedLocator, FuncFormatter, NullFormatter

    ax.set_xscale("log", base=2)
    k_lo, k_hi = math.floor(math.log2(n_lo)), math.ceil(math.log2(n_hi))
    step = max(1, math.ceil((k_hi - k_lo) / 9))
    ax.xaxis.set_major_locator(FixedLocator([2.0**k for k in range(k_lo, k_hi + 1) if k % step == 0]))
    ax.xaxis.set_minor_locator(FixedLocator([2.0**k for k in range(k_lo, k_hi + 1)]))
    ax.xaxis.set_major_formatter(FuncFormatter(lambda v, _: f"$2^{{{round(math.log2(v))}}}$" if v > 0 else ""))
    ax.xaxis.set_minor_formatter(NullFormatter())
    lo, hi = math.log2(n_lo) - 0.3, math.log2(n_hi) + 0.2
    hi = hi + (hi - lo) * right_room / (1 - right_room)
    ax.set_xlim(2.0**lo, 2.0**hi)
    ax.set_xlabel("transform length N (log scale)")


def _seconds_tick(value: float, _pos: Any = None) -> str:
    """Return a tick label for a time in seconds: ``1 µs``, ``10 ms``, ``500 ns``."""
    if value <= 0:
        return ""
    for unit, scale in (("s", 1.0), ("ms", 1e-3), ("µs", 1e-6), ("ns", 1e-9)):
        if value >= scale * 0.9995:
            return f"{value / scale:g} {unit}"
    return f"{value / 1e-9:.2g} ns"


def _right_room(labels: Iterable[str]) -> float:
    """Return the fraction of a panel's width to keep free for end-of-line labels."""
    longest = max((len(s) for s in labels), default=0)
    return min(0.32, 0.06 + 0.017 * longest)


def _spread(values: list[float], min_gap: float) -> list[float]:
    """Return ``values`` moved apart (keeping their order) so that neighbours are ``min_gap`` apart.

    Labels are pushed up from the lowest, then the whole set is shifted back down by half
    the total displacement so that labels stay near their lines.
    """
    order = sorted(range(len(values)), key=lambda i: values[i])
    placed = [values[i] for i in order]
    for j in range(1, len(placed)):
        placed[j] = max(placed[j], placed[j - 1] + min_gap)
    shift = (sum(placed) - sum(values[i] for i in order)) / (2 * len(placed)) if placed else 0.0
    out = [0.0] * len(values)
    for j, i in enumerate(order):
        out[i] = placed[j] - shift
    return out


def _end_labels(ax, ends: list[tuple], log_y: bool) -> None:
    """Write each (text, x, y, colour[, model]) label just right of (x, y).

    Labels ending at the same x are spread apart vertically so that they do not overlap;
    backend labels are bold, model labels (``model`` true) grey italic.
    """
    if not ends:
        return
    y_lo, y_hi = ax.get_ylim()
    to = (lambda v: math.log10(v)) if log_y else (lambda v: v)
    back = (lambda v: 10.0**v) if log_y else (lambda v: v)
    span = to(y_hi) - to(y_lo)
    by_x: dict[float, list[int]] = {}
    for i, end in enumerate(ends):
        by_x.setdefault(end[1], []).append(i)
    margin = 0.03 * span
    ys = [min(max(to(end[2]) if end[2] > 0 or not log_y else to(y_lo), to(y_lo) + margin), to(y_hi) - margin)
          for end in ends]
    for idx in by_x.values():
        moved = _spread([ys[i] for i in idx], 0.055 * span)
        for i, y in zip(idx, moved):
            ys[i] = y
    for end, y in zip(ends, ys):
        text, x, _, colour = end[:4]
        model = len(end) > 4 and end[4]
        ax.annotate(text, (x, back(y)), xytext=(7, 0), textcoords="offset points", va="center", ha="left",
                    color=colour, fontsize=11.5 if model else 11, fontweight="normal" if model else "bold",
                    fontstyle="italic" if model else "normal", annotation_clip=False,
                    gid=f"label:{text}")


def _series(rows: list[dict[str, Any]], value_of) -> dict[str, dict[str, Any]]:
    """Return per backend: the power-of-two points (the line) and the other points (markers)."""
    out: dict[str, dict[str, Any]] = {}
    for backend in sorted({r["backend"] for r in rows}):
        mine = sorted((r for r in rows if r["backend"] == backend), key=lambda r: r["n"])
        pow2 = [r for r in mine if is_power_of_two(r["n"])]
        line = pow2 if len(pow2) >= 2 else mine
        others = [r for r in mine if r not in line]
        out[backend] = {"line": line, "others": others, "value": value_of}
    return out


def _draw_series(ax, series: dict[str, dict[str, Any]], colours: dict[str, Any], band=None) -> list:
    """Draw each backend's line (and hollow markers for other sizes); return the end labels."""
    ends = []
    for backend, s in series.items():
        colour = colours[backend]
        xs = [r["n"] for r in s["line"]]
        ys = [s["value"](r) for r in s["line"]]
        ax.plot(xs, ys, marker="o", markersize=4.5, linewidth=2.0, color=colour, label=backend,
                gid=f"backend:{backend}")
        if band is not None:
            lo_hi = [band(r) for r in s["line"]]
            if all(v is not None for v in lo_hi):
                ax.fill_between(xs, [v[0] for v in lo_hi], [v[1] for v in lo_hi], color=colour, alpha=0.18,
                                linewidth=0)
        if s["others"]:
            ax.plot([r["n"] for r in s["others"]], [s["value"](r) for r in s["others"]], linestyle="none",
                    marker="D", markersize=5.5, markerfacecolor="none", markeredgewidth=1.4, color=colour,
                    label="_nolegend_", gid=f"other-sizes:{backend}")
        ends.append((backend, xs[-1], ys[-1], colour))
    return ends


def _style_legend(ax, series: dict[str, dict[str, Any]], loc: str, extra: Sequence[Any] = ()) -> None:
    """Add a small legend of marker styles (powers of two, other sizes) plus ``extra`` handles.

    Backends are labelled at their lines' ends, not here. No legend when there is nothing
    to explain (no other sizes, no extra handles).
    """
    from matplotlib.lines import Line2D

    handles = list(extra)
    if any(s["others"] for s in series.values()):
        handles = [Line2D([], [], color="0.3", marker="o", markersize=4.5, linewidth=2.0, label="powers of two"),
                   Line2D([], [], color="0.3", marker="D", markersize=5.5, markerfacecolor="none",
                          linestyle="none", label="other sizes")] + handles
    if handles:
        ax.legend(handles=handles, loc=loc, frameon=True, framealpha=0.9)


# --------------------------------------------------------------------------- time

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
        ax.plot(grid, values, linestyle=dash, linewidth=1.6, color=_MODEL_COLOUR, gid=gid, zorder=1,
                label=f"_{gid}")
        if values[-1] <= y_hi:
            ends.append((f"∝ {text}", grid[-1], values[-1], _MODEL_COLOUR, True))
            continue
        where = int(np.flatnonzero(values >= target)[0])
        ax.annotate(f"∝ {text}", (grid[where], values[where]), xytext=(-7, 0), textcoords="offset points",
                    ha="right", va="center", color=_MODEL_COLOUR, fontsize=11.5, fontstyle="italic",
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
    handles.append(Line2D([], [], color=_MODEL_COLOUR, linestyle=(0, (6, 3)), linewidth=1.6,
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
    _matplotlib()
    rows = _timed(rows)
    if not rows:
        raise UsageError("no timed rows to plot (every row is skipped or failed)")
    from matplotlib.ticker import FuncFormatter, LogLocator

    keys = _panel_keys(rows)
    colours = backend_colours(r["backend"] for r in rows)
    fig, axes = _new_figure(len(keys), title or "Time per transform (lower is better)")
    for ax, (kind, dtype) in zip(axes, keys):
        panel = [r for r in rows if r["kind"] == kind and r["dtype"] == dtype]
        series = _series(panel, lambda r: r["seconds"])
        n_lo, n_hi = min(r["n"] for r in panel), max(r["n"] for r in panel)
        ends = _draw_series(ax, series, colours, band=_interval)
        _pow2_axis(ax, n_lo, n_hi, _right_room(list(series) + ["∝ N log2 N"]))
        ax.set_yscale("log")
        lows = [(_interval(r) or (r["seconds"],))[0] for r in panel]
        highs = [(_interval(r) or (0, r["seconds"]))[1] for r in panel]
        ax.set_ylim(min(lows) / 2.5, max(highs) * 2.5)
        ax.yaxis.set_major_locator(LogLocator(base=10))
        ax.yaxis.set_major_formatter(FuncFormatter(_seconds_tick))
        n0, model_ends = _draw_models(ax, panel, n_lo, n_hi)
        _end_labels(ax, ends + model_ends, log_y=True)
        _time_legend(ax, series, n0)
        _style_axes(ax)
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
    _matplotlib()
    rows = [r for r in _timed(rows) if r["n"] >= 2]
    if not rows:
        raise UsageError("no timed rows with n >= 2 to plot")
    keys = _panel_keys(rows)
    colours = backend_colours(r["backend"] for r in rows)
    fig, axes = _new_figure(len(keys), title or "Rate in GFLOP/s (higher is better)")
    for ax, (kind, dtype) in zip(axes, keys):
        panel = [r for r in rows if r["kind"] == kind and r["dtype"] == dtype]
        series = _series(panel, _gflops)
        ends = _draw_series(ax, series, colours)
        _pow2_axis(ax, min(r["n"] for r in panel), max(r["n"] for r in panel), _right_room(series))
        ax.set_ylim(0, max(_gflops(r) for r in panel) * 1.15)
        _end_labels(ax, ends, log_y=False)
        _style_legend(ax, series, "upper left")
        _style_axes(ax)
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


# --------------------------------------------------------------------------- accuracy

def _eps(dtype: str) -> float:
    """Machine epsilon of a real precision (IEEE Std 754-2019: 2^-23 binary32, 2^-52 binary64)."""
    return float(np.finfo(Case("fft", dtype, 1).real_dtype).eps)


def bound_eps_units(row: Mapping[str, Any]) -> float | None:
    """Return the row's limit in eps units: ``limit * eps_units / value`` (the row's own scale),
    else ``limit / eps`` of its precision; None without a positive limit."""
    limit = row.get("limit")
    if limit is None or limit <= 0:
        return None
    value, eps_units = row.get("value"), row.get("eps_units")
    if value and eps_units and value > 0 and eps_units > 0:
        return limit * eps_units / value
    return limit / _eps(row["dtype"])


def draw_accuracy(check_rows: Iterable[Any], title: str | None = None):
    """Return a Figure of accuracy (relative rms error in eps units) against N, with the error bound.

    Uses the rows whose ``check`` is ``accuracy`` and that hold a positive ``eps_units``;
    failing rows get a red cross. The bound line is, per size, the largest limit of the
    rows at that size, in eps units (:func:`bound_eps_units`).

    Raises
    ------
    UsageError
        When no accuracy row holds a value, or matplotlib is missing.
    """
    _matplotlib()
    rows = [r for r in _as_dicts(check_rows) if r.get("check") == "accuracy" and r.get("status") in ("pass", "fail")
            and r.get("eps_units") is not None]
    exact = [r for r in rows if r["eps_units"] <= 0]
    rows = [r for r in rows if r["eps_units"] > 0]
    if not rows:
        raise UsageError("no accuracy rows with an error above zero to plot (run fftgauge check with the accuracy "
                         "check)")
    from matplotlib.ticker import FuncFormatter

    keys = _panel_keys(rows)
    colours = backend_colours(r["backend"] for r in rows)
    fig, axes = _new_figure(len(keys), title or "Accuracy: relative rms error (lower is better)")
    for ax, (kind, dtype) in zip(axes, keys):
        panel = [r for r in rows if r["kind"] == kind and r["dtype"] == dtype]
        series = _series(panel, lambda r: r["eps_units"])
        ends = _draw_series(ax, series, colours)
        bounds: dict[int, float] = {}
        for r in panel:
            b = bound_eps_units(r)
            if b is not None:
                bounds[r["n"]] = max(b, bounds.get(r["n"], 0.0))
        ys = [r["eps_units"] for r in panel] + list(bounds.values())
        ax.set_yscale("log")
        ax.set_ylim(min(ys) / 2.5, max(ys) * 2.5)
        if bounds:
            bn = sorted(bounds)
            ax.plot(bn, [bounds[n] for n in bn], color=_BOUND_COLOUR, linestyle=(0, (6, 3)), linewidth=1.8,
                    gid="bound", label="_bound")
            ends.append(("error bound", bn[-1], bounds[bn[-1]], _BOUND_COLOUR))
        fails = [r for r in panel if r["status"] == "fail"]
        fail_handles = []
        if fails:
            fail_handles = ax.plot([r["n"] for r in fails], [r["eps_units"] for r in fails], linestyle="none",
                                   marker="x", markersize=9, markeredgewidth=2.2, color=_FAIL_COLOUR, gid="fail",
                                   label="fails the check")
        _pow2_axis(ax, min(r["n"] for r in panel), max(r["n"] for r in panel), _right_room(
            list(series) + (["error bound"] if bounds else [])))
        ax.yaxis.set_major_formatter(FuncFormatter(lambda v, _: f"{v:g}"))
        _end_labels(ax, ends, log_y=True)
        _style_legend(ax, series, "upper left", fail_handles)
        _style_axes(ax)
        n_exact = sum(1 for r in exact if r["kind"] == kind and r["dtype"] == dtype)
        hidden = f" ({n_exact} exact result{'s' if n_exact > 1 else ''}, 0 eps, not shown)" if n_exact else ""
        ax.set_title(f"{kind} {dtype}{hidden}")
        ax.set_ylabel(f"relative rms error (eps units, eps = {_eps(dtype):.3g})")
    return fig


def plot_accuracy(check_rows: Iterable[Any], path: str, title: str | None = None) -> str:
    """Draw :func:`draw_accuracy` and write it to ``path`` (.png or .svg); return ``path``.

    Raises
    ------
    UsageError
        For another extension, no accuracy rows, or matplotlib missing.
    """
    check_plot_path(path)
    return save_figure(draw_accuracy(check_rows, title), path)


# --------------------------------------------------------------------------- history

def run_label(doc: Mapping[str, Any]) -> str:
    """Return how a stored run is named on a history axis: its commit (first 10 characters) if the
    envelope has one, else its ``created`` time as ``YYYY-MM-DD HH:MM``."""
    commit = doc.get("commit")
    if commit:
        return str(commit)[:10]
    created = str(doc.get("created") or "?")
    return created.replace("T", " ").rstrip("Z")[:16]


def _matches(row: Mapping[str, Any], case: Case, backend: str | None) -> bool:
    return (row.get("kind") == case.kind and row.get("dtype") == case.dtype and row.get("n") == case.n
            and row.get("norm", "backward") == case.norm and (backend is None or row.get("backend") == backend))


def history_points(docs: Iterable[Mapping[str, Any]], case: Case, backend: str | None = None) -> dict[str, Any]:
    """Return one case's values over stored runs, the runs ordered by ``created``.

    Returns
    -------
    dict
        ``labels`` (one per run, :func:`run_label`), ``seconds`` and ``ratio``: per backend
        a list of (run index, value, low, high) from rows with a median time (time files,
        or gate rows that carry ``seconds``) and from gate rows' ``ratio``.
    """
    ordered = sorted(docs, key=lambda d: str(d.get("created") or ""))
    out: dict[str, Any] = {"labels": [run_label(d) for d in ordered], "seconds": {}, "ratio": {}}
    for i, doc in enumerate(ordered):
        for row in doc.get("rows", []):
            if not _matches(row, case, backend) or row.get("status", "ok") not in ("ok", "pass", "fail"):
                continue
            for field, store in (("seconds", out["seconds"]), ("ratio", out["ratio"])):
                value = row.get(field)
                if value is not None and value > 0:
                    lo, hi = row.get(f"{field}_low"), row.get(f"{field}_high")
                    store.setdefault(row["backend"], []).append((i, value, lo if lo else value, hi if hi else value))
    return out


#: Smallest half-height of a history panel, as a fraction of the backend's median time: a
#: 1% wobble then looks flat and a 10% step stands out.
HISTORY_MIN_HALF_RANGE = 0.10


def _history_panel(ax, pts: list[tuple], labels: list[str], colour: Any, ratio: bool, gid: str) -> None:
    """Draw one series of (run index, value, low, high) on ``ax`` with error bars and its median
    (or no-change) line; the data line gets ``gid``."""
    from fftgauge.harness.report.time_tables import format_seconds

    xs, ys = [p[0] for p in pts], [p[1] for p in pts]
    err = [[max(0.0, y - p[2]) for y, p in zip(ys, pts)], [max(0.0, p[3] - y) for y, p in zip(ys, pts)]]
    container = ax.errorbar(xs, ys, yerr=err, marker="o", markersize=5, linewidth=2.0, capsize=3, color=colour)
    container.lines[0].set_gid(gid)
    centre = 1.0 if ratio else float(np.median(ys))
    ax.axhline(centre, color=_MODEL_COLOUR, linestyle=(0, (6, 3)), linewidth=1.2,
               gid="no-change" if ratio else "median")
    lo = min(min(p[2] for p in pts), centre * (1 - HISTORY_MIN_HALF_RANGE))
    hi = max(max(p[3] for p in pts), centre * (1 + HISTORY_MIN_HALF_RANGE))
    pad = (hi - lo) * 0.08
    ax.set_ylim(lo - pad, hi + pad)
    ax.set_xlim(-0.5, len(labels) - 0.5)
    ax.set_title("dashed: no change (1.0)" if ratio else f"dashed: median over runs, {format_seconds(centre, 'µs')}",
                 loc="right", fontsize=10, color=_MODEL_COLOUR)


def draw_history(docs: Iterable[Mapping[str, Any]], case: Case, backend: str | None = None,
                 title: str | None = None):
    """Return a Figure of one case's median time (with its 95% interval) over stored runs.

    One panel per backend (each on its own scale, at least +/- 10% of its median high, so
    that a 5-15% step is visible and noise of 1% looks flat), and one panel of the gate's
    candidate/baseline time ratios when gate documents are given. The x axis names each
    run by its commit when the envelope has one, else by its time.

    Parameters
    ----------
    docs
        Loaded ``fftgauge-time/1`` and/or ``fftgauge-gate/1`` documents (any order: they
        are sorted by ``created``).
    case
        The case (kind, dtype, n, norm) to follow.
    backend
        Only this backend (default: every backend that has the case).

    Raises
    ------
    UsageError
        When no document holds the case, or matplotlib is missing.
    """
    _matplotlib()
    points = history_points(docs, case, backend)
    panels = [("seconds", name, pts) for name, pts in sorted(points["seconds"].items())]
    if points["ratio"]:
        panels.append(("ratio", None, points["ratio"]))
    if not panels:
        who = f" for backend {backend!r}" if backend else ""
        raise UsageError(f"no stored run holds {case.label()}{who}; choose a case the runs measured")
    from matplotlib.ticker import FuncFormatter

    labels = points["labels"]
    colours = backend_colours(list(points["seconds"]) + list(points["ratio"]))
    matplotlib, Figure = _matplotlib()
    with matplotlib.rc_context(_STYLE):
        fig = Figure(figsize=(max(7.5, 1.5 + 0.6 * len(labels)), 1.2 + 2.7 * len(panels)), layout="constrained")
        axes = list(np.atleast_1d(fig.subplots(len(panels), 1, squeeze=False, sharex=True)).ravel())
    fig.suptitle(title or f"History of {case.label()} over {len(labels)} stored runs (error bars: 95% interval)",
                 fontsize=13.5)
    for ax, (field, name, data) in zip(axes, panels):
        if field == "seconds":
            _history_panel(ax, data, labels, colours[name], ratio=False, gid=f"backend:{name}")
            ax.yaxis.set_major_formatter(FuncFormatter(_seconds_tick))
            ax.set_ylabel("median time")
            ax.set_title(name, loc="left", color=colours[name], fontweight="bold", fontsize=12)
        else:
            for bname, pts in sorted(data.items()):
                _history_panel(ax, pts, labels, colours[bname], ratio=True, gid=f"ratio:{bname}")
            ax.set_ylabel("candidate / baseline")
            ax.set_title("gate: candidate / baseline time, " + ", ".join(sorted(data)), loc="left", fontsize=12)
        _style_axes(ax)
    axes[-1].set_xticks(range(len(labels)), labels, rotation=35, ha="right")
    axes[-1].set_xlabel("stored run (commit, or time of the run in UTC)")
    return fig


def plot_history(gate_or_time_docs: Iterable[Mapping[str, Any]], case: Case, path: str,
                 backend: str | None = None, title: str | None = None) -> str:
    """Draw :func:`draw_history` and write it to ``path`` (.png or .svg); return ``path``.

    Raises
    ------
    UsageError
        For another extension, no document holding the case, or matplotlib missing.
    """
    check_plot_path(path)
    return save_figure(draw_history(gate_or_time_docs, case, backend, title), path)
