"""The accuracy plot: relative rms error in eps units against N, with the error bound and the
failing cases marked."""

from __future__ import annotations

from typing import Any, Iterable

from fftgauge.harness.cases import is_power_of_two
from fftgauge.harness.errors import UsageError
from fftgauge.harness.report.findings import bound_eps_units, machine_epsilon
from fftgauge.harness.report.figures import (BOUND_COLOUR, FAIL_COLOUR, as_dicts, backend_colours, check_plot_path,
                                             draw_series, figure_legend, matplotlib_module, name_lines, new_figure,
                                             panel_keys, save_figure, split_series, style_axes, style_handles, styled)


@styled
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
    from matplotlib.ticker import FuncFormatter, LogFormatterSciNotation

    keys = panel_keys(rows)
    colours = backend_colours(r["backend"] for r in rows)
    fig, axes = new_figure(len(keys), title or "Accuracy: relative rms error (lower is better)")
    has_bound = has_fails = False
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
            has_bound = True
        fails = [r for r in panel if r["status"] == "fail"]
        if fails:
            ax.plot([r["n"] for r in fails], [r["eps_units"] for r in fails], linestyle="none",
                             marker="x", markersize=9, markeredgewidth=2.2, color=FAIL_COLOUR, gid="fail",
                             label="× fails the check")
        wide = max(ys) / min(ys) > 1e5  # plain numbers up to 5 decades, powers of ten beyond
        ax.yaxis.set_major_formatter(LogFormatterSciNotation() if wide else FuncFormatter(lambda v, _: f"{v:g}"))
        name_lines(ax, ends, True, min(r["n"] for r in panel), max(r["n"] for r in panel))
        has_fails = has_fails or bool(fails)
        style_axes(ax)
        n_exact = sum(1 for r in exact if r["kind"] == kind and r["dtype"] == dtype)
        hidden = f"\n{n_exact} exact result{'s' if n_exact > 1 else ''} (0 eps) not shown" if n_exact else ""
        ax.set_title(f"{kind} {dtype} (eps = {machine_epsilon(dtype):.3g}){hidden}")
        ax.set_ylabel("relative rms error (eps units)")
    from matplotlib.lines import Line2D

    extra = []
    if has_bound:
        extra.append(Line2D([], [], color=BOUND_COLOUR, linestyle=(0, (6, 3)), linewidth=1.8,
                            label="error bound: the limit each case is checked against"))
    if has_fails:
        extra.append(Line2D([], [], linestyle="none", marker="x", markersize=9, markeredgewidth=2.2,
                            color=FAIL_COLOUR, label="red cross: fails the check"))
    others = any(not is_power_of_two(r["n"]) for r in rows)
    figure_legend(fig, colours, style_handles(others) + extra)
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
