"""What every plot of fftgauge shares: matplotlib (imported only when a plot is drawn), the
style, figures of one panel per kind x precision, the log2 size axis, backend colours, lines
through the powers of two with hollow markers for other sizes, end-of-line labels, and
writing a figure atomically as PNG or SVG.

Figures are built with :class:`matplotlib.figure.Figure` directly rather than through
``pyplot``: they render with matplotlib's Agg (PNG) and SVG writers whatever the session's
interactive backend is, need no display, and leave no global figure state behind.
"""

from __future__ import annotations

import dataclasses
import math
import os
import tempfile
from typing import Any, Iterable, Mapping, Sequence

import numpy as np

from fftgauge.harness.cases import is_power_of_two
from fftgauge.harness.errors import UsageError

#: Extensions a plot can be written as.
FORMATS = ("png", "svg")

#: Resolution of PNG files (dots per inch); an 8.6 x 5.4 inch panel is about 1120 x 700 pixels.
PNG_DPI = 130

#: Text sizes (points) chosen so that a two-column figure shown 1,400 pixels wide still reads at
#: about 14 pixels for the smallest text.
STYLE = {
    "font.size": 14, "axes.titlesize": 16, "axes.labelsize": 14.5, "xtick.labelsize": 13.5,
    "ytick.labelsize": 13.5, "legend.fontsize": 13.5, "axes.spines.top": False, "axes.spines.right": False,
    "svg.fonttype": "none",
}
MODEL_COLOUR = "0.35"
BOUND_COLOUR = "0.15"
FAIL_COLOUR = "#d62728"


def matplotlib_module():
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


def styled(draw):
    """Return ``draw`` (a function building a Figure) run inside matplotlib's ``rc_context`` of
    :data:`STYLE`, so that every text it creates (titles, labels, legends) takes the style's
    sizes; matplotlib is imported when ``draw`` is called.

    Raises
    ------
    UsageError
        From the call, when matplotlib is not installed.
    """
    import functools

    @functools.wraps(draw)
    def wrapper(*args, **kwargs):
        matplotlib, _ = matplotlib_module()
        with matplotlib.rc_context(STYLE):
            return draw(*args, **kwargs)

    return wrapper


def require_matplotlib() -> None:
    """Check that matplotlib can be imported.

    Raises
    ------
    UsageError
        When it cannot (install the plots extra).
    """
    matplotlib_module()


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

def as_dicts(rows: Iterable[Any]) -> list[dict[str, Any]]:
    return [dataclasses.asdict(r) if dataclasses.is_dataclass(r) else dict(r) for r in rows]


def timed_rows(rows: Iterable[Any]) -> list[dict[str, Any]]:
    """Return the rows that hold a positive median time."""
    return [r for r in as_dicts(rows)
            if r.get("status", "ok") == "ok" and (r.get("seconds") or 0) > 0 and r.get("n", 0) >= 1]


def panel_keys(rows: Sequence[Mapping[str, Any]]) -> list[tuple[str, str]]:
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


def new_figure(n_panels: int, title: str | None):
    """Return (figure, axes list) for ``n_panels`` panels in up to two columns."""
    matplotlib, Figure = matplotlib_module()
    ncols = 1 if n_panels <= 1 else 2
    nrows = max(1, math.ceil(n_panels / ncols))
    with matplotlib.rc_context(STYLE):
        fig = Figure(figsize=(8.6 * ncols, 5.4 * nrows), layout="constrained")
        axes = list(np.atleast_1d(fig.subplots(nrows, ncols, squeeze=False)).ravel())
    for ax in axes[n_panels:]:
        ax.set_visible(False)
    if title:
        fig.suptitle(title, fontsize=17)
    return fig, axes[:n_panels]


def style_axes(ax) -> None:
    ax.grid(True, which="major", alpha=0.35)
    ax.grid(True, which="minor", alpha=0.12)
    ax.set_axisbelow(True)


def pow2_axis(ax, n_lo: int, n_hi: int, right_room: float) -> None:
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


def seconds_tick(value: float, _pos: Any = None) -> str:
    """Return a tick label for a time in seconds: ``1 µs``, ``10 ms``, ``500 ns``."""
    if value <= 0:
        return ""
    for unit, scale in (("s", 1.0), ("ms", 1e-3), ("µs", 1e-6), ("ns", 1e-9)):
        if value >= scale * 0.9995:
            return f"{value / scale:g} {unit}"
    return f"{value / 1e-9:.2g} ns"


def right_room(labels: Iterable[str]) -> float:
    """Return the fraction of a panel's width to keep free for end-of-line labels (a little
    room when there are none)."""
    longest = max((len(s) for s in labels), default=0)
    return min(0.36, 0.06 + 0.021 * longest) if longest else 0.02


#: Two end labels closer than this fraction of the panel's height collide.
LABEL_MIN_GAP = 0.06

#: End labels whose lines end within this many octaves of each other share a column.
LABEL_SAME_COLUMN_OCTAVES = 2.0


def labels_fit(ends: list[tuple], y_lo: float, y_hi: float, log_y: bool) -> bool:
    """Return whether the (text, x, y, colour) end labels can sit at their lines' ends without
    two of them colliding (closer than :data:`LABEL_MIN_GAP` of the height in one column)."""
    to = (lambda v: math.log10(v) if v > 0 else math.log10(y_lo)) if log_y else (lambda v: v)
    span = (to(y_hi) - to(y_lo)) or 1.0
    points = sorted((math.log2(end[1]), (to(end[2]) - to(y_lo)) / span) for end in ends)
    for i, (x_i, y_i) in enumerate(points):
        for x_j, y_j in points[i + 1:]:
            if x_j - x_i <= LABEL_SAME_COLUMN_OCTAVES and abs(y_j - y_i) < LABEL_MIN_GAP:
                return False
    return True


def end_labels(ax, ends: list[tuple]) -> None:
    """Write each (text, x, y, colour) label in bold just right of (x, y), its line's end.

    Call only when :func:`labels_fit`; otherwise name the lines in the legend.
    """
    for text, x, y, colour in (end[:4] for end in ends):
        ax.annotate(text, (x, y), xytext=(7, 0), textcoords="offset points", va="center", ha="left",
                    color=colour, fontsize=14, fontweight="bold", annotation_clip=False, gid=f"label:{text}")


def name_lines(ax, ends: list[tuple], log_y: bool, n_lo: int, n_hi: int) -> bool:
    """Name the backends' lines at their ends when the labels fit (:func:`labels_fit`) and set
    the size axis with room for them; return whether they were placed. Where they would
    collide, no label is written: the figure's legend (:func:`figure_legend`) names every
    backend by its colour."""
    y_lo, y_hi = ax.get_ylim()
    if labels_fit(ends, y_lo, y_hi, log_y):
        pow2_axis(ax, n_lo, n_hi, right_room([end[0] for end in ends]))
        end_labels(ax, ends)
        return True
    pow2_axis(ax, n_lo, n_hi, right_room([]))
    return False


def split_series(rows: list[dict[str, Any]], value_of) -> dict[str, dict[str, Any]]:
    """Return per backend: the power-of-two points (the line) and the other points (markers)."""
    out: dict[str, dict[str, Any]] = {}
    for backend in sorted({r["backend"] for r in rows}):
        mine = sorted((r for r in rows if r["backend"] == backend), key=lambda r: r["n"])
        pow2 = [r for r in mine if is_power_of_two(r["n"])]
        line = pow2 if len(pow2) >= 2 else mine
        others = [r for r in mine if r not in line]
        out[backend] = {"line": line, "others": others, "value": value_of}
    return out


def draw_series(ax, series: dict[str, dict[str, Any]], colours: dict[str, Any], band=None) -> list:
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


def style_handles(any_other_sizes: bool, band: str | None = None) -> list:
    """Return legend handles that explain the marks: the line through the powers of two, the
    hollow markers of other sizes (when there are any) and, with ``band`` (its meaning), the
    shaded band."""
    from matplotlib.lines import Line2D
    from matplotlib.patches import Patch

    handles = [Line2D([], [], color="0.3", marker="o", markersize=4.5, linewidth=2.0,
                      label="line: powers of two")]
    if any_other_sizes:
        handles.append(Line2D([], [], color="0.3", marker="D", markersize=5.5, markerfacecolor="none",
                              linestyle="none", label="hollow: other sizes"))
    if band:
        handles.append(Patch(facecolor="0.3", alpha=0.25, label=f"band: {band}"))
    return handles


def figure_legend(fig, colours: Mapping[str, Any], handles: list) -> None:
    """Put one legend under the panels: every backend by its colour, then ``handles`` (what the
    marks, bands and grey lines mean). Colours are the same in every panel."""
    from matplotlib.lines import Line2D

    named = [Line2D([], [], color=colour, marker="o", markersize=4.5, linewidth=2.4, label=name)
             for name, colour in colours.items()]
    entries = named + handles
    columns = 4 if fig.get_figwidth() > 12 else 2
    fig.legend(handles=entries, loc="outside lower center", ncol=min(columns, len(entries)), frameon=False,
               handlelength=2.6, columnspacing=2.0)
