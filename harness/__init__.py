"""fftgauge's engine: cases, inputs, ground truth, checks, timing, statistics, gate, results.

Nothing in this package imports a particular FFT library; every library-specific line
lives in :mod:`fftgauge.backends`.
"""
