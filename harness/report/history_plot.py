"""The history plot: one case's median time over stored runs (time or gate files), one panel
per backend, plus the gate's candidate/baseline ratios."""

from __future__ import annotations

from typing import Any, Iterable, Mapping

import numpy as np

from fftgauge.harness.cases import Case
from fftgauge.harness.errors import UsageError
from fftgauge.harness.report.figures import (MODEL_COLOUR, STYLE, backend_colours, check_plot_path, matplotlib_module,
                                             save_figure, seconds_tick, style_axes, styled)


def run_label(doc: Mapping[str, Any]) -> str:
    """Return how a stored run is named on a history axis: its commit (first 10 characters) if the
    envelope has one, else its ``created`` time as ``YYYY-MM-DD HH:MM``."""
    commit = doc.get("commit")
    if commit:
        return str(commit)[:10]
    created = str(doc.get("created") or "?")
    return created.replace("T", " ").rstrip("Z")[:16]


def _matches(row: Mapping[str, Any], case: Case, backend: str | None) -> bool:
    return (not row.get("shape") and row.get("kind") == case.kind and row.get("dtype") == case.dtype
            and row.get("n") == case.n and row.get("norm", "backward") == case.norm
            and (backend is None or row.get("backend") == backend))


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
    ax.axhline(centre, color=MODEL_COLOUR, linestyle=(0, (6, 3)), linewidth=1.2,
               gid="no-change" if ratio else "median")
    lo = min(min(p[2] for p in pts), centre * (1 - HISTORY_MIN_HALF_RANGE))
    hi = max(max(p[3] for p in pts), centre * (1 + HISTORY_MIN_HALF_RANGE))
    pad = (hi - lo) * 0.08
    ax.set_ylim(lo - pad, hi + pad)
    ax.set_xlim(-0.5, len(labels) - 0.5)
    ax.set_title("dashed: no change (1.0)" if ratio else f"dashed: median over runs, {format_seconds(centre, 'µs')}",
                 loc="right", fontsize=13, color=MODEL_COLOUR)


@styled
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
    matplotlib_module()
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
    matplotlib, Figure = matplotlib_module()
    with matplotlib.rc_context(STYLE):
        fig = Figure(figsize=(max(7.5, 1.5 + 0.6 * len(labels)), 1.2 + 2.7 * len(panels)), layout="constrained")
        axes = list(np.atleast_1d(fig.subplots(len(panels), 1, squeeze=False, sharex=True)).ravel())
    fig.suptitle(title or f"History of {case.label()} over {len(labels)} stored runs\n(error bars: 95% interval "
                          f"of each run's median)", fontsize=16)
    for ax, (field, name, data) in zip(axes, panels):
        if field == "seconds":
            _history_panel(ax, data, labels, colours[name], ratio=False, gid=f"backend:{name}")
            ax.yaxis.set_major_formatter(FuncFormatter(seconds_tick))
            ax.set_ylabel("median time")
            ax.set_title(name, loc="left", color=colours[name], fontweight="bold", fontsize=15)
        else:
            for bname, pts in sorted(data.items()):
                _history_panel(ax, pts, labels, colours[bname], ratio=True, gid=f"ratio:{bname}")
            ax.set_ylabel("candidate / baseline")
            ax.set_title("gate: candidate / baseline time, " + ", ".join(sorted(data)), loc="left", fontsize=15)
        style_axes(ax)
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
