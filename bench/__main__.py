"""Run every benchmark module ``bench/bench_*.py`` (each has ``run()``) and print figures.

``python -m bench`` runs all; ``python -m bench almanac fix`` runs those named.
"""
import importlib
import os
import sys
import time

HERE = os.path.dirname(os.path.abspath(__file__))


def main(argv):
    names = sorted(f[6:-3] for f in os.listdir(HERE) if f.startswith("bench_") and f.endswith(".py"))
    wanted = argv or names
    for name in wanted:
        if name not in names:
            print("unknown benchmark %r; have: %s" % (name, ", ".join(names)))
            return 2
        print("=" * 78)
        print("benchmark: %s" % name)
        print("=" * 78)
        t0 = time.perf_counter()
        importlib.import_module("bench.bench_" + name).run()
        print("(%s took %.1f s)" % (name, time.perf_counter() - t0))
        sys.stdout.flush()
    return 0


if __name__ == "__main__":
    sys.exit(main(sys.argv[1:]))
