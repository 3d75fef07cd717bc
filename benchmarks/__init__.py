"""Benchmarks: speed and memory measured side by side in one run (``make bench``)."""
