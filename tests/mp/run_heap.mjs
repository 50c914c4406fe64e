// Run a Python script under the MicroPython WebAssembly port with a chosen heap.
// usage: node run_heap.mjs HEAP_BYTES REPO_ROOT SCRIPT_FILE [PACKAGE ...]
// As run.mjs, but the MicroPython heap is HEAP_BYTES (the port's default is 1 MiB):
// a MemoryError under a small heap shows that the code does not fit it.
// Exit status 0 on success, 1 when the script raised.
import { loadMicroPython } from "@micropython/micropython-webassembly-pyscript";
import fs from "node:fs";
import path from "node:path";

const [heap, root, script, ...packages] = process.argv.slice(2);
const mp = await loadMicroPython({
  heapsize: parseInt(heap, 10),
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
