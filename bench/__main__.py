"""Run every benchmark module in ``bench/`` that defines ``main()``.

Usage: ``python -m bench [--quick] [NAME ...]`` runs all benchmarks, or only the named
modules; ``--quick`` shrinks the service benchmarks' sizes for a smoke run (modules read
it from ``bench._support.QUICK``). The exit status is 1 when a benchmark reports a missed goal (its
``main()`` returned False), so a script can notice; timings vary by machine,
which is why goals are never asserted in the test suite.
"""

from __future__ import annotations

import importlib
import pkgutil
import sys
from collections.abc import Sequence

import bench


def run(names: Sequence[str] = ()) -> int:
    modules = pkgutil.iter_modules(bench.__path__)
    available = sorted(m.name for m in modules if not m.name.startswith("_"))
    unknown = sorted(set(names) - set(available))
    if unknown:
        print(
            f"unknown benchmark {', '.join(unknown)}; available: {', '.join(available)}",
            file=sys.stderr,
        )
        return 2
    missed = []
    for name in names or available:
        module = importlib.import_module(f"bench.{name}")
        benchmark = getattr(module, "main", None)
        if benchmark is None:
            continue
        print(f"== bench.{name}")
        if benchmark() is False:
            missed.append(name)
        print()
    if missed:
        print(f"goals missed in: {', '.join(missed)}")
        return 1
    return 0


if __name__ == "__main__":
    sys.exit(run([arg for arg in sys.argv[1:] if arg != "--quick"]))
