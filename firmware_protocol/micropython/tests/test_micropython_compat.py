"""The firmware stays within what MicroPython runs.

Always: a static check of every firmware module (imports MicroPython has, no f-strings, annotations, dataclasses
or ``match``), and a fixed session (micropython_run/session.py) decoded by the host with no loss. With a real
MicroPython at hand, the same session's output from MicroPython must equal CPython's byte for byte: set
``TAPRIG_MICROPYTHON_NODE_MODULES`` to a ``node_modules`` folder holding the npm package
``@micropython/micropython-webassembly-pyscript`` (MicroPython's WebAssembly port) to run it.
"""

import ast
import os
import shutil
import subprocess
import sys
from pathlib import Path

import pytest
from taprig.protocol import RawBlock, Reply, ReplyCode, StreamDecoder

FIRMWARE_DIR = Path(__file__).resolve().parents[1]
RUN_DIR = Path(__file__).resolve().parent / "micropython_run"
FIRMWARE_MODULES = sorted(path for path in FIRMWARE_DIR.glob("*.py") if path.name != "conftest.py")
OWN_MODULES = {path.stem for path in FIRMWARE_MODULES}
# Modules of MicroPython's standard set on rp2 and esp32 that the firmware may use.
MICROPYTHON_MODULES = {"struct", "sys", "time", "binascii", "machine", "micropython", "select", "uselect", "rp2",
                       "esp32"}


def _imports(tree):
    for node in ast.walk(tree):
        if isinstance(node, ast.Import):
            yield from (alias.name.split(".")[0] for alias in node.names)
        elif isinstance(node, ast.ImportFrom):
            yield (node.module or "").split(".")[0]


@pytest.mark.parametrize("path", FIRMWARE_MODULES, ids=[path.name for path in FIRMWARE_MODULES])
def test_module_uses_only_what_micropython_has(path):
    tree = ast.parse(path.read_text(encoding="utf-8"), filename=str(path))
    foreign = set(_imports(tree)) - MICROPYTHON_MODULES - OWN_MODULES
    assert not foreign, "%s imports %s, which MicroPython lacks" % (path.name, sorted(foreign))
    banned = (ast.JoinedStr, ast.AnnAssign, ast.Match)
    found = [type(node).__name__ for node in ast.walk(tree) if isinstance(node, banned)]
    found += ["annotation" for node in ast.walk(tree) if isinstance(node, ast.arg) and node.annotation]
    found += ["return annotation" for node in ast.walk(tree)
              if isinstance(node, ast.FunctionDef) and node.returns is not None]
    assert not found, "%s uses %s" % (path.name, sorted(set(found)))


def _run_cpython(with_fan=False):
    env = dict(os.environ, PYTHONPATH=str(FIRMWARE_DIR))
    done = subprocess.run([sys.executable, str(RUN_DIR / "session.py")], env=env, capture_output=True, text=True,
                          timeout=120, check=True)
    return (_output(done.stdout), _fan(done.stdout)) if with_fan else _output(done.stdout)


def _output(stdout):
    lines = [line for line in stdout.splitlines() if line.startswith("OUT ")]
    assert len(lines) == 1, stdout[-2000:]
    return bytes.fromhex(lines[0][4:])


def _fan(stdout):
    """The fan's PWM duty the session printed: after the trip, after the late move, after ALLOW_MOVES, after the
    move that follows it."""
    lines = [line for line in stdout.splitlines() if line.startswith("FAN ")]
    assert len(lines) == 1, stdout[-2000:]
    return [int(word) for word in lines[0][4:].split()]


def test_fixed_session_decodes_without_loss():
    decoder = StreamDecoder()
    items = decoder.feed(_run_cpython())
    counters = decoder.counters.as_dict()
    assert counters["resets"] == 1
    assert all(counters[name] == 0 for name in ("framing_errors", "crc_errors", "gaps", "scans_lost", "undecodable"))
    block = RawBlock.concat([item for item in items if isinstance(item, RawBlock)])
    assert block.n_scans == 400  # 2 s at 200 Hz


def _check_safe_hold(output, duties):
    """In the session's safe hold a move (req 5) is refused with BUSY; after ALLOW_MOVES (req 9) the fan is set to
    0.5 (req 10); then a move decided before a freeze (req 6) arrives past the watchdog time: refused with BUSY,
    the fan stays at its safe 0; ALLOW_MOVES (req 7) moves nothing; the move after it (req 8, 0.25) is taken
    (PROTOCOL.md §4, 1.1)."""
    replies = {item.req: item.code for item in StreamDecoder().feed(output) if isinstance(item, Reply)}
    assert [replies[req] for req in (5, 9, 10, 6, 7, 8)] == [ReplyCode.BUSY, ReplyCode.OK, ReplyCode.OK,
                                                             ReplyCode.BUSY, ReplyCode.OK, ReplyCode.OK]
    assert duties == [0, round(0.5 * 65535), 0, 0, round(0.25 * 65535)]


def test_fixed_session_refuses_a_late_move_after_the_trip():
    _check_safe_hold(*_run_cpython(with_fan=True))


def test_micropython_output_equals_cpython_output(tmp_path):
    modules = os.environ.get("TAPRIG_MICROPYTHON_NODE_MODULES")
    node = shutil.which("node")
    if not modules or node is None:
        pytest.skip("set TAPRIG_MICROPYTHON_NODE_MODULES (and have node) to run the firmware under MicroPython")
    (tmp_path / "node_modules").symlink_to(Path(modules).resolve())
    shutil.copy(RUN_DIR / "run.mjs", tmp_path / "run.mjs")
    done = subprocess.run([node, str(tmp_path / "run.mjs"), str(FIRMWARE_DIR), str(RUN_DIR / "session.py")],
                          capture_output=True, text=True, timeout=300)
    assert done.returncode == 0, done.stderr[-2000:]
    assert (_output(done.stdout), _fan(done.stdout)) == _run_cpython(with_fan=True)
    _check_safe_hold(_output(done.stdout), _fan(done.stdout))  # under MicroPython itself
