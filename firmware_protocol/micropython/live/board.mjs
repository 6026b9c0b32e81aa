// The reference firmware under MicroPython's WebAssembly port, with its serial port on this process's stdin and
// stdout (run_live.py puts those on a pseudo-terminal). Usage: node board.mjs FIRMWARE_DIR NODE_MODULES
// Whatever the firmware prints (not frames) goes to stderr.
import fs from "fs";
import path from "path";
import { pathToFileURL } from "url";

const [firmwareDir, modulesDir] = process.argv.slice(2);
const pkg = path.join(modulesDir, "@micropython", "micropython-webassembly-pyscript", "micropython.mjs");
const { loadMicroPython } = await import(pathToFileURL(pkg).href);
const mp = await loadMicroPython({ heapsize: 16 * 1024 * 1024, stdout: (d) => process.stderr.write(d), linebuffer: false });

let received = [];
process.stdin.on("data", (data) => received.push(data));
process.stdin.on("end", () => process.exit(0));
mp.registerJsModule("taprig_serial", {
  read: (max) => {
    if (!received.length) return "";
    const all = Buffer.concat(received);
    received = all.length > max ? [all.subarray(max)] : [];
    return all.subarray(0, max).toString("hex");
  },
  write: (hex) => { process.stdout.write(Buffer.from(hex, "hex")); },
});
for (const dir of [firmwareDir, path.join(firmwareDir, "live")]) {
  for (const name of fs.readdirSync(dir)) {
    // main.py starts the firmware on a real board and hw_machine.py needs its machine module
    if (name.endsWith(".py") && !["main.py", "hw_machine.py", "conftest.py", "run_live.py"].includes(name)) {
      mp.FS.writeFile("/" + name, fs.readFileSync(path.join(dir, name), "utf8"));
    }
  }
}
mp.runPython("import sys\nsys.path.insert(0, '/')\nimport hw_live\nboard = hw_live.LiveBoard()\n");
const tick = mp.globals.get("board").tick;
function loop() {
  try {
    tick();
  } catch (error) {
    console.error("taprig live board: " + error.message);
    process.exit(1);
  }
  setTimeout(loop, 1);
}
loop();
