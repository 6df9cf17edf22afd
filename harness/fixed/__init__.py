"""Fixed-point (Q15/Q31) transforms: formats and quantisation, the built-in fixed-point
radix-2 reference, SQNR/ENOB metrics, test signals at levels in dBFS, and the checks that
judge a fixed-point FFT against that reference (docs/fixed-point.md)."""
