"""fftgauge.harness.battery: the correctness battery: inputs, ground truth, bounds, checks, diagnosis."""
