"""Regenerate every reference vector file: runs ``main()`` of each ``vectors/generate_*.py``.

``python -m vectors.generate`` runs all; ``python -m vectors.generate almanac schedule`` runs those named.
(``make vectors`` calls it.)
"""
import importlib
import os
import sys

HERE = os.path.dirname(os.path.abspath(__file__))


def generators():
    return sorted(f[len("generate_"):-3] for f in os.listdir(HERE)
                  if f.startswith("generate_") and f.endswith(".py"))


def main(argv=None):
    names = generators()
    wanted = list(argv if argv is not None else sys.argv[1:]) or names
    for name in wanted:
        if name not in names:
            print("unknown generator %r; have: %s" % (name, ", ".join(names)))
            return 2
        print("== vectors: %s" % name, flush=True)
        importlib.import_module("vectors.generate_" + name).main()
    return 0


if __name__ == "__main__":
    sys.exit(main())
