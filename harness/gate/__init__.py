"""fftgauge.harness.gate: the regression gate: sampling, estimates, decisions, stored history, outputs."""
