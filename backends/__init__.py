"""fftgauge's backend adapters: one file per FFT implementation, the adapter interface
(:mod:`fftgauge.backends.base`) and the registry that turns a SPEC string into an adapter
(:mod:`fftgauge.backends.registry`)."""
