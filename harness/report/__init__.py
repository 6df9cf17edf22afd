"""fftgauge.harness.report: tables, plots and pages built from stored results."""
