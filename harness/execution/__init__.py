"""fftgauge.harness.execution: running untrusted backend code in worker processes."""
