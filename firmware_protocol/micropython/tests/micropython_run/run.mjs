// Run a Python script under MicroPython's WebAssembly port (npm package @micropython/micropython-webassembly-pyscript)
// with the firmware modules in its filesystem. Usage: node run.mjs FIRMWARE_DIR SCRIPT
import fs from "fs";
import path from "path";
import { loadMicroPython } from "@micropython/micropython-webassembly-pyscript";

const [firmwareDir, script] = process.argv.slice(2);
const mp = await loadMicroPython({ heapsize: 16 * 1024 * 1024, stdout: (d) => process.stdout.write(d), linebuffer: false });
for (const name of fs.readdirSync(firmwareDir)) {
  // main.py would start the firmware, hw_machine.py needs the real machine module, conftest.py is pytest's
  if (name.endsWith(".py") && !["main.py", "hw_machine.py", "conftest.py"].includes(name)) {
    mp.FS.writeFile("/" + name, fs.readFileSync(path.join(firmwareDir, name), "utf8"));
  }
}
try {
  mp.runPython("import sys\nsys.path.insert(0, '/')\n" + fs.readFileSync(script, "utf8"));
} catch (error) {
  console.error(error.message);
  process.exit(1);
}
