"""The plots of stored results, in one place for callers: time per point against N with the
N log2 N and N^2 models, time relative to the fastest backend at each N, accuracy against N
with the error bound, and one case's history over stored runs.

Every ``draw_*`` function returns a :class:`matplotlib.figure.Figure` (one panel per kind x
precision present) and every ``plot_*`` function draws, saves to PNG or SVG by the path's
extension and returns the path. matplotlib is imported only when a plot is drawn, so the
rest of fftgauge works without it. The shared machinery is in
:mod:`fftgauge.harness.report.figures`; each plot lives in its own module.

Artists carry a ``gid`` that tests and callers can inspect: ``backend:NAME`` (a backend's
line), ``other-sizes:NAME``, ``model:nlogn``, ``model:n2``, ``fastest`` (the 1x line),
``bound``, ``fail``; end-of-line labels ``label:NAME`` (absent where the lines are named in
the legend because their labels would collide); in the
history plot ``backend:NAME``, ``median``, ``ratio:NAME`` and ``no-change``.
"""

from fftgauge.harness.report.accuracy_plot import bound_eps_units, draw_accuracy, plot_accuracy
from fftgauge.harness.report.figures import (FORMATS, PNG_DPI, backend_colours, check_plot_path,
                                             require_matplotlib, save_figure)
from fftgauge.harness.report.history_plot import draw_history, history_points, plot_history, run_label
from fftgauge.harness.report.time_plots import draw_relative, draw_time, plot_relative, plot_time

__all__ = ["FORMATS", "PNG_DPI", "backend_colours", "bound_eps_units", "check_plot_path", "draw_accuracy",
           "draw_history", "draw_relative", "draw_time", "history_points", "plot_accuracy", "plot_history",
           "plot_relative", "plot_time", "require_matplotlib", "run_label", "save_figure"]
