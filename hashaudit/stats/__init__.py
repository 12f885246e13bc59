"""Statistics of bucket counts: streaming accumulators, tests of fit and the closed forms of uniform hashing."""
