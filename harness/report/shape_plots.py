"""The speed plot of shaped timing rows: median time of one call against the array's points.

One panel per kind x precision; in each, one line per backend and *series*: the input's
layout, and for a batch of 1-D transforms the axis it runs along (``first axis``, ``last
axis``, ``axis 1``), for an N-D transform how many axes it covers (``2-D``, ``3-D``). The x
axis is the total points of the array (every transform of the batch), so a backend whose cost
grows like the work runs at a slope of about one; a layout or an axis that is slower shows as
a line above its neighbours. The band is the 95% interval of the median.

Artists carry a ``gid``: ``series:BACKEND|SERIES`` on each line (tests and callers inspect it).
"""

from __future__ import annotations

import math
from typing import Any, Iterable

from fftgauge.harness.errors import UsageError
from fftgauge.harness.report.figures import (backend_colours, check_plot_path, new_figure, save_figure,
                                             seconds_tick, style_axes, styled, timed_rows)

__all__ = ["SHAPED_CAPTION", "draw_shaped_time", "plot_shaped_time", "series_name", "total_points"]

#: The caption of the plot in a report page.
SHAPED_CAPTION = ("Shaped cases: median time of one call (every transform of the batch) against the array's "
                  "points, one line per backend, layout and axis; the band is the 95% interval of the median.")

_MARKERS = ("o", "s", "^", "D", "v", "P", "X", "*")
_LINESTYLES = ("-", "--", ":", "-.")


def total_points(row: dict[str, Any]) -> int:
    """Return the points of the whole array of a shaped row (the product of its shape)."""
    return math.prod(row["shape"])


def series_name(row: dict[str, Any]) -> str:
    """Return the line a shaped row belongs to within its backend: layout and axis, e.g.
    ``"C, last axis"``, ``"F, first axis"``, ``"strided, 2-D"``."""
    rank, axes = len(row["shape"]), [a % len(row["shape"]) for a in row["axes"]]
    if len(axes) == 1:
        axis = axes[0]
        where = "last axis" if axis == rank - 1 else "first axis" if axis == 0 else f"axis {axis}"
    else:
        where = f"{len(axes)}-D" + ("" if len(axes) == rank else f" of {rank}-D")
    return f"{row.get('layout') or 'C'}, {where}"


def _two_and_five(value: float, pos: Any = None) -> str:
    """Return the tick label of ``value`` when its mantissa is 2 or 5, else ``""``."""
    if value <= 0:
        return ""
    mantissa = value / 10 ** math.floor(math.log10(value) + 1e-9)
    return seconds_tick(value, pos) if round(mantissa, 6) in (2.0, 5.0) else ""


def _panel_keys(rows: list[dict[str, Any]]) -> list[tuple[str, str]]:
    order = ("fft", "ifft", "rfft", "irfft", "fftn", "ifftn", "rfftn", "irfftn")
    keys = {(r["kind"], r["dtype"]) for r in rows}
    return sorted(keys, key=lambda k: (order.index(k[0]) if k[0] in order else 99, k[1]))


@styled
def draw_shaped_time(rows: Iterable[Any], title: str | None = None):
    """Return a Figure of the median time per call against the array's total points, log-log.

    Raises
    ------
    UsageError
        When no shaped row holds a time, or matplotlib is missing.
    """
    from matplotlib.ticker import FuncFormatter, LogLocator, NullFormatter

    rows = [r for r in timed_rows(rows) if r.get("shape")]
    if not rows:
        raise UsageError("no timed shaped rows to plot (every row is skipped or failed, or none has a shape)")
    colours = backend_colours(r["backend"] for r in rows)
    names = sorted({series_name(r) for r in rows})
    keys = _panel_keys(rows)
    fig, axes = new_figure(len(keys), title or "Time of one call against the array's points (lower is faster)")
    for ax, (kind, dtype) in zip(axes, keys):
        panel = [r for r in rows if r["kind"] == kind and r["dtype"] == dtype]
        lines: dict[tuple[str, str], list[dict[str, Any]]] = {}
        for r in panel:
            lines.setdefault((r["backend"], series_name(r)), []).append(r)
        for (backend, name), group in sorted(lines.items()):
            group.sort(key=total_points)
            x = [total_points(r) for r in group]
            y = [r["seconds"] for r in group]
            style = names.index(name)
            ax.plot(x, y, color=colours[backend], marker=_MARKERS[style % len(_MARKERS)],
                    linestyle=_LINESTYLES[style % len(_LINESTYLES)], label=f"{backend}: {name}",
                    gid=f"series:{backend}|{name}")
            low = [r.get("seconds_low") or r["seconds"] for r in group]
            high = [r.get("seconds_high") or r["seconds"] for r in group]
            if len(group) > 1:
                ax.fill_between(x, low, high, color=colours[backend], alpha=0.15, linewidth=0)
        ax.set_xscale("log")
        ax.set_yscale("log")
        ax.yaxis.set_major_locator(LogLocator(base=10))
        ax.yaxis.set_major_formatter(FuncFormatter(seconds_tick))
        y_lo, y_hi = ax.get_ylim()
        if y_hi / y_lo < 30:  # about one decade: too few major ticks to read, label 2 and 5 of each decade
            ax.yaxis.set_minor_formatter(FuncFormatter(_two_and_five))
        else:
            ax.yaxis.set_minor_formatter(NullFormatter())
        style_axes(ax)
        ax.set_title(f"{kind} {dtype}")
        ax.set_xlabel("points in the array (all transforms of the call)")
        ax.set_ylabel("median time of one call")
        ax.legend(fontsize="small", loc="upper left")
    return fig


def plot_shaped_time(rows: Iterable[Any], path: str, title: str | None = None) -> str:
    """Draw :func:`draw_shaped_time` and write it to ``path`` (.png or .svg); return ``path``.

    Raises
    ------
    UsageError
        For another extension, no timed shaped rows, or matplotlib missing.
    """
    check_plot_path(path)
    return save_figure(draw_shaped_time(rows, title), path)
