"""The exceptions that cross module boundaries, and what each one means to the user.

``UsageError`` is the request itself being wrong (exit code 2, one line on stderr);
``BackendFailure`` is a backend that raised, crashed, hung or returned something unusable
(an ``error`` row, never the end of a run).
"""


class UsageError(ValueError):
    """The user's request is wrong: unknown backend, bad option, malformed size list, bad file.

    The message is one line that says what is wrong and how to fix it; the CLI prints it and
    exits with code 2.
    """


class UnsupportedCase(Exception):
    """A backend was asked for a case (kind, precision, size, normalisation) it does not claim.

    The message says why, e.g. ``"radix2-dit handles powers of two only (n = 12)"``; the
    engine turns it into a ``skip`` row.
    """


class BackendFailure(Exception):
    """A backend raised, crashed, hung or returned something unusable while running a case."""


class RunStopped(KeyboardInterrupt):
    """A run stopped by a signal before it finished (a KeyboardInterrupt, so a script's Ctrl-C
    handling still applies). ``signal_name`` (``SIGINT``, ``SIGTERM``, ``SIGHUP``),
    ``exit_code`` (130, 143, 129) and ``doc``: the results document of what finished."""

    def __init__(self, signal_name: str, exit_code: int, doc: dict):
        super().__init__(f"stopped by {signal_name}")
        self.signal_name = signal_name
        self.exit_code = exit_code
        self.doc = doc
