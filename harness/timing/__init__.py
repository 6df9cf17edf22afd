"""fftgauge.harness.timing: the clock, the timer, memory, CPU placement, scaling and operation counts."""
