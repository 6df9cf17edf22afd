"""Choosing a library for a workload (``fftgauge pick``): the workload and its accuracy need
(:mod:`.workload`), the ranking from battery and timing rows (:mod:`.ranking`), the answer in
words (:mod:`.verdict`) and the run that gathers the evidence (:mod:`.run`)."""
