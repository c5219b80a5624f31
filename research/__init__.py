"""Lab code: measurement sweeps behind the engine's design choices.

Not part of the product. Each module imports `service` like any client and is
run from the repository root as `python -m research.<module>`; the findings are
written up in docs/measurements.md.
"""
