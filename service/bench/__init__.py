"""`whichsense bench`: how close the service runs to the limit of its own encoder.

One seeded corpus, four ways of tagging the same occurrences (the bare encoder
forward pass, the engine, the HTTP service with its workers, and the naive
one-call-per-occurrence loop), plus the synchronous endpoint's latency and a
worker's peak memory. Figures depend on the machine and on what else runs on
it, so the ratios measured within one run are the figures to compare.
"""
