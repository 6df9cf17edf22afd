"""A tiny scipy.fft backend object (the uarray ``__ua_function__`` protocol) for the tests.

``forwarding`` sends fft/ifft/rfft/irfft to numpy.fft (dropping scipy's ``overwrite_x``
and ``workers``, which numpy.fft does not take) and answers NotImplemented for everything
else; ``complex_only`` answers only fft and ifft; ``not_a_backend`` lacks the domain.
"""

import numpy as np

FORWARDED = ("fft", "ifft", "rfft", "irfft")


class NumpyForwarding:
    """Forward the four 1-D transforms to numpy.fft; NotImplemented otherwise."""

    __ua_domain__ = "numpy.scipy.fft"

    def __init__(self, names=FORWARDED):
        self.names = tuple(names)
        self.calls = 0

    def __ua_function__(self, method, args, kwargs):
        name = getattr(method, "__name__", "")
        if name not in self.names:
            return NotImplemented
        self.calls += 1
        kwargs = {k: v for k, v in kwargs.items() if k not in ("overwrite_x", "workers", "plan")}
        return getattr(np.fft, name)(*args, **kwargs)


forwarding = NumpyForwarding()
complex_only = NumpyForwarding(("fft", "ifft"))
not_a_backend = object()
