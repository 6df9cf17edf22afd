"""The accuracy plot: relative rms error in eps units against N, with the error bound and the
failing cases marked."""

from __future__ import annotations

from typing import Any, Iterable, Mapping

import numpy as np

from fftgauge.harness.cases import Case
from fftgauge.harness.errors import UsageError
from fftgauge.harness.report.figures import (BOUND_COLOUR, FAIL_COLOUR, as_dicts, backend_colours,
                                             check_plot_path, draw_series, end_labels, matplotlib_module,
                                             new_figure, panel_keys, pow2_axis, right_room, save_figure,
                                             split_series, style_axes, style_legend)


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
    matplotlib_module()
    rows = [r for r in as_dicts(check_rows) if r.get("check") == "accuracy" and r.get("status") in ("pass", "fail")
            and r.get("eps_units") is not None]
    exact = [r for r in rows if r["eps_units"] <= 0]
    rows = [r for r in rows if r["eps_units"] > 0]
    if not rows:
        raise UsageError("no accuracy rows with an error above zero to plot (run fftgauge check with the accuracy "
                         "check)")
    from matplotlib.ticker import FuncFormatter

    keys = panel_keys(rows)
    colours = backend_colours(r["backend"] for r in rows)
    fig, axes = new_figure(len(keys), title or "Accuracy: relative rms error (lower is better)")
    for ax, (kind, dtype) in zip(axes, keys):
        panel = [r for r in rows if r["kind"] == kind and r["dtype"] == dtype]
        series = split_series(panel, lambda r: r["eps_units"])
        ends = draw_series(ax, series, colours)
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
            ax.plot(bn, [bounds[n] for n in bn], color=BOUND_COLOUR, linestyle=(0, (6, 3)), linewidth=1.8,
                    gid="bound", label="_bound")
            ends.append(("error bound", bn[-1], bounds[bn[-1]], BOUND_COLOUR))
        fails = [r for r in panel if r["status"] == "fail"]
        fail_handles = []
        if fails:
            fail_handles = ax.plot([r["n"] for r in fails], [r["eps_units"] for r in fails], linestyle="none",
                                   marker="x", markersize=9, markeredgewidth=2.2, color=FAIL_COLOUR, gid="fail",
                                   label="fails the check")
        pow2_axis(ax, min(r["n"] for r in panel), max(r["n"] for r in panel), right_room(
            list(series) + (["error bound"] if bounds else [])))
        ax.yaxis.set_major_formatter(FuncFormatter(lambda v, _: f"{v:g}"))
        end_labels(ax, ends, log_y=True)
        style_legend(ax, series, "upper left", fail_handles)
        style_axes(ax)
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
