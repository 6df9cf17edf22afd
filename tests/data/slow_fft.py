"""A correct but slow FFT (numpy's, after a short sleep per call): a run of it takes long
enough to be interrupted half-way in the signal tests."""

import time

import numpy as np

#: Seconds each call sleeps.
SLEEP_SECONDS = 0.01


def fft(x):
    """Return numpy's forward FFT of ``x`` after sleeping :data:`SLEEP_SECONDS`."""
    time.sleep(SLEEP_SECONDS)
    return np.fft.fft(x)
