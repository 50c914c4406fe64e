"""A stand-in for ``mpremote`` (tests): records its arguments and plays a board.

``FAKE_MPREMOTE_DIR`` holds ``board.json`` (what is on the port: ``{"port", "micropython":
true|false, "name", "version": [1, 24, 1], "platform", "mpy", "unique_id"}``), ``fs/`` (the
board's flash) and ``calls.log`` (one JSON argv per call).  Commands, chained with ``+`` as
mpremote chains them: ``connect PORT``, ``exec CODE`` (the probe is answered from board.json;
other code runs in MicroPython's unix port in ``fs/``, with ``tests/fakeboard/machine.py`` as
``machine``), ``fs cp [-r] SRC :DST``, ``reset``.
"""
import json
import os
import shutil
import subprocess
import sys
import tempfile

HERE = os.path.dirname(os.path.abspath(__file__))


def main(argv):
    d = os.environ["FAKE_MPREMOTE_DIR"]
    with open(os.path.join(d, "calls.log"), "a") as f:
        f.write(json.dumps(argv) + "\n")
    with open(os.path.join(d, "board.json")) as f:
        board = json.load(f)
    fs = os.path.join(d, "fs")
    os.makedirs(fs, exist_ok=True)
    groups = [[]]
    for a in argv:
        if a == "+":
            groups.append([])
        else:
            groups[-1].append(a)
    for g in groups:
        if g[0] == "connect":
            if g[1] != board["port"]:
                sys.stderr.write("mpremote: failed to access %s (it may be in use by another program)\n" % g[1])
                return 1
            if not board.get("micropython", True):
                sys.stderr.write("mpremote: could not enter raw repl\n")
                return 1
            g = g[2:]
            if not g:
                continue
        if g[0] == "exec":
            code = g[1]
            if "LCPROBE" in code:
                print("LCPROBE", repr((board.get("name", "micropython"), tuple(board["version"]), board["platform"],
                                       board["mpy"], board["unique_id"], 180000)))
                continue
            with tempfile.NamedTemporaryFile("w", suffix=".py", delete=False) as f:
                f.write(code)
            env = dict(os.environ, MICROPYPATH=os.path.join(HERE, "fakeboard") + ":lib",
                       FAKE_UNIQUE_ID=board["unique_id"])
            p = subprocess.run([sys.executable, "-c", "import sys, micropython_unix; "
                                "sys.exit(micropython_unix.run_main(sys.argv))", "-X", "heapsize=%d" % board.get("heap", 1 << 20),
                                f.name], cwd=fs, env=env, capture_output=True, text=True)
            os.unlink(f.name)
            sys.stdout.write(p.stdout)
            if p.returncode != 0:
                sys.stdout.write(p.stderr)
                return 1
        elif g[:2] == ["fs", "cp"]:
            rest = g[2:]
            rec = rest[0] == "-r"
            src, dst = (rest[1], rest[2]) if rec else (rest[0], rest[1])
            target = os.path.join(fs, dst[1:].lstrip("/"))
            if dst.endswith("/") or dst == ":":
                target = os.path.join(target, os.path.basename(src.rstrip("/")))
            if rec and os.path.isdir(src):
                shutil.copytree(src, target, dirs_exist_ok=True)
            else:
                shutil.copyfile(src, target)
        elif g[0] in ("reset", "soft-reset"):
            pass
        else:
            sys.stderr.write("fake mpremote: unknown command %r\n" % g)
            return 1
    return 0


if __name__ == "__main__":
    sys.exit(main(sys.argv[1:]))
