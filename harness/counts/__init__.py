"""Instruction counts of transforms, measured under valgrind's cachegrind (the gate's and the
timing runner's ``instructions`` metric)."""
