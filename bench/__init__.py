"""Benchmarks: speed goals live here, never in timed tests.

Run every benchmark with ``python -m bench`` (or ``make bench``). Each module
in this package that defines ``main()`` is one benchmark; it prints its
figures, its goals and whether each goal was met, and returns True when all
goals were met.
"""
