"""Run Python code under the MicroPython WebAssembly port (node + npm package).

The package is installed by ``make test`` into ``tests/mp/node_modules``.
``run_micropython`` copies the named repository packages into the port's file
system and runs the script there, returning its standard output.
"""
import os
import shutil
import subprocess
import tempfile

import pytest

HERE = os.path.dirname(os.path.abspath(__file__))
ROOT = os.path.dirname(HERE)
RUNNER = os.path.join(HERE, "mp", "run.mjs")
MODULE_DIR = os.path.join(HERE, "mp", "node_modules", "@micropython", "micropython-webassembly-pyscript")


def available():
    return shutil.which("node") is not None and os.path.isdir(MODULE_DIR)


def run_micropython(code, packages=("engine",), timeout=300):
    """Run ``code`` under MicroPython; return stdout. Raise AssertionError on failure."""
    if not available():
        if os.environ.get("CI"):
            raise AssertionError("MicroPython runner missing: run `make mp`")
        pytest.skip("MicroPython WebAssembly port not installed (make mp)")
    with tempfile.NamedTemporaryFile("w", suffix=".py", delete=False) as f:
        f.write(code)
        script = f.name
    try:
        proc = subprocess.run(["node", RUNNER, ROOT, script] + list(packages),
                              cwd=os.path.join(HERE, "mp"), capture_output=True, text=True, timeout=timeout)
    finally:
        os.unlink(script)
    if proc.returncode != 0:
        raise AssertionError("MicroPython run failed:\n" + proc.stdout[-3000:] + "\n" + proc.stderr[-3000:])
    return proc.stdout
