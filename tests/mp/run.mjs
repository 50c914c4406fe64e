// Run a Python script under the MicroPython WebAssembly port.
// usage: node run.mjs REPO_ROOT SCRIPT_FILE [PACKAGE ...]
// Each PACKAGE directory of the repository (e.g. engine, device) is copied into
// the port's file system under /lib and put on sys.path; then SCRIPT_FILE runs.
// LIMBCLOCK_MP_HEAP=BYTES starts the port with that heap (its default is 1 MiB;
// note that this port grows its heap on demand rather than failing).
// Exit status 0 on success, 1 when the script raised.
import { loadMicroPython } from "@micropython/micropython-webassembly-pyscript";
import fs from "node:fs";
import path from "node:path";

const [root, script, ...packages] = process.argv.slice(2);
const heap = process.env.LIMBCLOCK_MP_HEAP;
const mp = await loadMicroPython({
  ...(heap ? { heapsize: parseInt(heap, 10) } : {}),
  stdout: (line) => process.stdout.write(line + "\n"),
  stderr: (line) => process.stderr.write(line + "\n"),
});

function copyTree(src, dst) {
  mp.FS.mkdir(dst);
  for (const name of fs.readdirSync(src)) {
    if (name === "__pycache__" || name === "node_modules") continue;
    const s = path.join(src, name);
    const d = dst + "/" + name;
    if (fs.statSync(s).isDirectory()) copyTree(s, d);
    else mp.FS.writeFile(d, new Uint8Array(fs.readFileSync(s)));
  }
}

mp.FS.mkdir("/lib");
for (const p of packages) copyTree(path.join(root, p), "/lib/" + p);
const code = fs.readFileSync(script, "utf8");
try {
  mp.runPython("import sys\nif '/lib' not in sys.path: sys.path.append('/lib')\n");
  mp.runPython(code);
} catch (err) {
  process.stderr.write(String(err && err.message ? err.message : err) + "\n");
  process.exit(1);
}
