"""``taprig decode``: golden vectors, hex and raw files, a fake board on a pty, and the one-line errors.

Expected counters come from the golden-vector file (``firmware_protocol/vectors``), whose expectations are written
by hand from the spec and not produced by the host's codec (see its README).
"""

from __future__ import annotations

import importlib.util
import json
import sys
from pathlib import Path

import pytest

from taprig.cli import main

VECTORS = Path(__file__).resolve().parents[2] / "firmware_protocol" / "vectors" / "vectors.json"
CASES = {case["name"]: case for case in json.loads(VECTORS.read_text())["cases"]}
posix_only = pytest.mark.skipif(sys.platform == "win32", reason="needs POSIX pseudo-terminals (os.openpty)")


def _fake_device_module():
    """The link tests' fake board, loaded by path (tests run with --import-mode=importlib)."""
    if "link_fakedevice" not in sys.modules:
        spec = importlib.util.spec_from_file_location(
            "link_fakedevice", Path(__file__).resolve().parents[1] / "link" / "fakedevice.py")
        module = importlib.util.module_from_spec(spec)
        sys.modules["link_fakedevice"] = module
        spec.loader.exec_module(module)
    return sys.modules["link_fakedevice"]


def decode(capsys, *args) -> tuple[int, list[dict], str]:
    code = main(["decode", *map(str, args)])
    captured = capsys.readouterr()
    return code, [json.loads(line) for line in captured.out.splitlines()], captured.err


def test_every_vector_case_gives_the_counters_it_expects(capsys):
    code, lines, _ = decode(capsys, VECTORS)
    assert code == 0
    verdicts = {line["case"]: line["matches_expected"] for line in lines if "case_counters" in line}
    assert set(verdicts) == set(CASES) and all(verdicts.values()), [k for k, ok in verdicts.items() if not ok]
    totals = {key: sum(case["counters"][key] for case in CASES.values()) for key in lines[-1]["counters"]}
    assert lines[-1] == {"counters": totals}


@pytest.mark.parametrize("name", ["bad_crc", "garbage_between_frames", "sequence_gap", "duplicate", "oversize"])
def test_one_case_gives_its_counters(capsys, name):
    code, lines, _ = decode(capsys, VECTORS, "--case", name)
    assert code == 0 and lines[-1] == {"counters": CASES[name]["counters"]}


@pytest.mark.parametrize("name", ["garbage_between_frames", "scan_gap", "unknown_type"])
def test_hex_text_with_whitespace_and_raw_bytes_decode_alike(capsys, tmp_path, name):
    hex_text = CASES[name]["hex"]
    spaced = "\n".join(" ".join(hex_text[i:i + 2] for i in range(j, min(j + 64, len(hex_text)), 2))
                       for j in range(0, len(hex_text), 64))
    (tmp_path / "capture.hex").write_text(spaced + "\n")
    (tmp_path / "capture.bin").write_bytes(bytes.fromhex(hex_text))
    for path in (tmp_path / "capture.hex", tmp_path / "capture.bin"):
        code, lines, _ = decode(capsys, path)
        assert code == 0 and lines[-1] == {"counters": CASES[name]["counters"]}


def test_sample_block_line_gives_shape_ends_and_first_counts(capsys):
    code, lines, _ = decode(capsys, VECTORS, "--case", "samples_mixed")
    (block,) = [line for line in lines if line.get("type") == "SAMPLES"]
    (frame,) = [f["fields"] for f in CASES["samples_mixed"]["frames"] if f["type"] == "SAMPLES"]
    assert block["shape"] == [frame["n_scans"], len(frame["channels"])]
    assert block["channels"] == frame["channels"]
    assert (block["first_scan"], block["last_scan"]) == (frame["scan_index"][0], frame["scan_index"][-1])
    assert (block["t_first_ns"], block["t_last_ns"]) == (frame["t_ns"][0], frame["t_ns"][-1])
    assert block["first_counts"] == frame["data"][0]


def test_messages_print_their_type_and_named_fields(capsys):
    _, lines, _ = decode(capsys, VECTORS, "--case", "reply_out_of_range")
    (reply,) = [line for line in lines if line.get("type") == "REPLY"]
    fields = CASES["reply_out_of_range"]["frames"][0]["fields"]
    assert reply["code"] == "OUT_OF_RANGE" and reply["req"] == fields["req"] and reply["detail"] == fields["detail"]


def test_missing_file_is_one_line_and_exit_1(capsys, tmp_path):
    code, lines, err = decode(capsys, tmp_path / "nope.bin")
    assert code == 1 and lines == []
    assert err.count("\n") == 1 and "no such file" in err


def test_a_json_file_that_is_not_vectors_is_refused(capsys, tmp_path):
    path = tmp_path / "other.json"
    path.write_text('{"cases": [{"name": "x"}]}')
    code, _, err = decode(capsys, path)
    assert code == 1 and "golden-vector" in err and str(path) in err


def test_missing_port_is_one_line_and_exit_1(capsys):
    code, _, err = decode(capsys, "/dev/ttyTAPRIG_NOPE", "--seconds", "0.1")
    assert code == 1 and err.count("\n") == 1 and "no serial port /dev/ttyTAPRIG_NOPE" in err


@posix_only
def test_port_start_reads_stops_and_counts(capsys):
    fake = _fake_device_module()
    pty = fake.Pty()
    device = fake.FakeDevice(pty).start()
    try:
        code, lines, _ = decode(capsys, pty.path, "--start", "1000", "--seconds", "0.5")
    finally:
        device.stop()
        pty.close()
    assert code == 0
    assert lines[0]["type"] == "DESCRIPTION"  # the handshake's items come before the connected event
    events = [line for line in lines if "event" in line]
    assert [e["event"] for e in events] == ["connected", "closed"] and events[0]["port"] == pty.path
    blocks = [line for line in lines if line.get("type") == "SAMPLES"]
    assert blocks and blocks[0]["channels"] == [0, 1, 2, 3] and blocks[0]["first_scan"] == 0
    sent = [type(r.msg).__name__ for r in device.received if type(r.msg).__name__ != "Heartbeat"]
    assert sent[-2:] == ["Start", "Stop"]
    assert lines[-2]["link"]["bytes"] == lines[-1]["counters"]["bytes"] > 0
    assert lines[-1]["counters"]["frames"] >= len(blocks) + 3  # DESCRIPTION, its REPLY, START's REPLY


@posix_only
def test_port_handshake_timeout_is_one_line_and_exit_1(capsys):
    fake = _fake_device_module()
    pty = fake.Pty()
    device = fake.FakeDevice(pty, behaviour=fake.Behaviour(answer=False)).start()
    try:
        code, _, err = decode(capsys, pty.path, "--handshake-timeout", "0.3", "--seconds", "0.1")
    finally:
        device.stop()
        pty.close()
    assert code == 1 and err.count("\n") == 1 and "no DESCRIPTION" in err


def test_a_session_file_is_refused_with_the_commands_that_read_it(capsys, tmp_path):
    from taprig.session.store import SessionWriter

    path = tmp_path / "run.taprig"
    writer = SessionWriter(path, {"rig_id": "x"})
    writer.append_chunk(bytes.fromhex(CASES["samples_mixed"]["hex"]), 1)
    writer.close()
    code, lines, err = decode(capsys, path)
    assert code == 1 and lines == [] and err.count("\n") == 1
    assert f"{path} is a taprig session file: use taprig info / taprig replay" in err


def test_another_sqlite_database_is_refused_as_no_capture(capsys, tmp_path):
    import sqlite3

    path = tmp_path / "other.db"
    with sqlite3.connect(path) as con:
        con.execute("CREATE TABLE t (x)")
    con.close()
    code, _, err = decode(capsys, path)
    assert code == 1 and "is an SQLite database, not a capture file" in err and "session" not in err


def test_a_rig_file_decodes_to_no_frames_and_says_so(capsys):
    rig = Path(__file__).resolve().parents[2] / "rigs" / "naca0012-20tap.toml"
    code, lines, err = decode(capsys, rig)
    assert code == 0 and lines[-1]["counters"]["frames"] == 0  # the counters line is still printed
    (warning,) = err.strip().splitlines()
    assert warning.startswith(f"taprig decode: warning: {rig}: no good frames") and "rig or calibration" in warning


def test_a_file_with_frames_prints_no_warning(capsys, tmp_path):
    (tmp_path / "capture.bin").write_bytes(bytes.fromhex(CASES["samples_mixed"]["hex"]))
    code, lines, err = decode(capsys, tmp_path / "capture.bin")
    assert code == 0 and lines[-1]["counters"]["frames"] > 0 and err == ""


def test_a_capture_of_commands_decodes_as_the_board_does(capsys, tmp_path):
    # PROTOCOL.md §1: a host decoder counts host → device types as unknown; --commands decodes them
    (tmp_path / "sent.hex").write_text(CASES["set_actuator"]["hex"])
    code, lines, _ = decode(capsys, tmp_path / "sent.hex")
    assert code == 0 and lines[-1]["counters"]["unknown_types"] == 1
    code, lines, _ = decode(capsys, tmp_path / "sent.hex", "--commands")
    assert code == 0 and lines[-1] == {"counters": CASES["set_actuator"]["counters"]}
    assert lines[0]["type"] == "SET_ACTUATOR"
