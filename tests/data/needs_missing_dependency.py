"""A user module that imports a package that is not installed (a dependency, not itself)."""

import fftgauge_no_such_dependency_xyz  # noqa: F401
