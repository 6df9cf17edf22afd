"""Shaped cases: batched 1-D transforms along one axis of an array, and 2-D/N-D transforms."""
