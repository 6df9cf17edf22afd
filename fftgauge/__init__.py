"""fftgauge's Python API: the same engine as the command line, returning pandas DataFrames.

The engine lives in :mod:`harness` (cases, checks, timing, gate) and the adapters in
:mod:`backends`; this package re-exports what a user's own scripts need.
"""

from harness import __version__
from backends.registry import list_backends, load_backend
from harness.cases import Case

__all__ = ["__version__", "Case", "list_backends", "load_backend"]
