"""What the dependency stamps of numba's disk cache cost (cyclesim.loops.jit_cache).

    python benchmarks/jit_cache_cost.py [config ...]        (default: demo demo_runners)

Runs each config once in this process and prints the run's time, how many cached functions had
their stamp worked out (each the first time numba reads its index) and the time spent on it.
Run it twice: the first run of a cold cache compiles; the second shows the cost on a warm one.
The import of the module alone: ``python -X importtime -c "import cyclesim.loops.jit_cache"``.
"""

from __future__ import annotations

import sys
import time


def main(argv: list[str]) -> None:
    from cyclesim.loops import jit_cache

    spent = [0.0, 0]
    digest = jit_cache.dependency_digest

    def timed(fn):
        t0 = time.perf_counter()
        try:
            return digest(fn)
        finally:
            spent[0] += time.perf_counter() - t0
            spent[1] += 1

    jit_cache.dependency_digest = timed
    import cyclesim

    for name in argv or ["demo", "demo_runners"]:
        before = tuple(spent)
        t0 = time.perf_counter()
        cyclesim.run(name)
        run_s = time.perf_counter() - t0
        print(f"{name:14s} run {run_s:7.3f} s   stamps {spent[1] - before[1]:3d}   "
              f"stamp time {1e3 * (spent[0] - before[0]):7.2f} ms")


if __name__ == "__main__":
    main(sys.argv[1:])
