"""limbclock benchmarks: ``make bench`` prints figures and ratios (no asserts)."""
