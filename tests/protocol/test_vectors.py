"""The golden vectors of firmware_protocol/vectors (built from PROTOCOL.md by make_vectors.py, not by this codec):
the decoder must deliver exactly their frames and counters, and the encoder must reproduce their canonical bytes."""

from __future__ import annotations

import dataclasses
import importlib.util
import json
from pathlib import Path

import numpy as np
import pytest

from taprig.protocol import (
    ActuatorInfo,
    AllowMoves,
    ChannelInfo,
    Describe,
    Description,
    Encoding,
    Heartbeat,
    Log,
    RawBlock,
    Reply,
    Reset,
    Samples,
    SetActuator,
    Start,
    Status,
    Stop,
    StreamDecoder,
    decode_frame,
    encode_message,
)

VECTORS = Path(__file__).resolve().parents[2] / "firmware_protocol" / "vectors"
DOC = json.loads((VECTORS / "vectors.json").read_text(encoding="utf-8"))
CASES = {case["name"]: case for case in DOC["cases"]}
PLAIN = {"STATUS": Status, "REPLY": Reply, "LOG": Log, "START": Start, "STOP": Stop, "SET_ACTUATOR": SetActuator,
         "HEARTBEAT": Heartbeat, "DESCRIBE": Describe, "RESET": Reset, "ALLOW_MOVES": AllowMoves}


def _pieces(case: dict) -> list[bytes]:
    """The case's bytes cut after each delimiter, so that each feed call completes at most one frame."""
    wire = bytes.fromhex(case["hex"])
    parts = wire.split(b"\x00")
    return [p + b"\x00" for p in parts[:-1]] + ([parts[-1]] if parts[-1] else [])


def _check_item(item, frame: dict) -> None:
    fields = frame["fields"]
    if frame["type"] == "SAMPLES":
        assert isinstance(item, RawBlock)
        assert list(item.channels) == fields["channels"]
        np.testing.assert_array_equal(item.counts, np.array(fields["data"], dtype=np.float64))
        assert item.t_ns.tolist() == fields["t_ns"] and item.scan_index.tolist() == fields["scan_index"]
    else:
        assert type(item).__name__.upper() == frame["type"].replace("_", "")
        assert json.loads(json.dumps(dataclasses.asdict(item))) == fields


def _message(frame: dict, description: dict | None):
    fields = frame["fields"]
    if frame["type"] == "DESCRIPTION":
        return Description(**{**fields, "channels": tuple(ChannelInfo(**c) for c in fields["channels"]),
                              "actuators": tuple(ActuatorInfo(**a) for a in fields["actuators"])})
    if frame["type"] == "SAMPLES":
        encodings = [Encoding(description["channels"][i]["encoding"]) for i in fields["channels"]]  # known ones
        msg = Samples(fields["t_us"], fields["period_ns"], fields["first_scan"], fields["channel_mask"],
                      np.array(fields["data"], dtype=np.float64))
        return msg, encodings
    return PLAIN[frame["type"]](**fields)


def test_vectors_file_is_current():
    spec = importlib.util.spec_from_file_location("make_vectors", VECTORS / "make_vectors.py")
    module = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(module)
    assert module.build() == DOC, "vectors.json is stale: run firmware_protocol/vectors/make_vectors.py"


def test_vectors_cover_the_required_cases():
    types = {frame["type"] for case in DOC["cases"] for frame in case["frames"]}
    assert types == {"DESCRIPTION", "SAMPLES", "STATUS", "REPLY", "LOG", "START", "STOP", "SET_ACTUATOR",
                     "HEARTBEAT", "DESCRIBE", "RESET", "ALLOW_MOVES"}
    for counter in DOC["counters"]:
        if counter not in ("frames", "bytes"):
            assert any(case["counters"][counter] for case in DOC["cases"]), f"no case exercises {counter}"


@pytest.mark.parametrize("name", CASES)
def test_frame_by_frame(name):
    case = CASES[name]
    decoder = StreamDecoder(receiver=case["receiver"])
    delivered = []
    for piece in _pieces(case):
        items = decoder.feed(piece)
        assert len(items) <= 1
        if items:
            frame = decode_frame(piece[:-1])
            delivered.append((items[0], frame.seq, frame.flags))
    assert decoder.counters.as_dict() == case["counters"]
    assert len(delivered) == len(case["frames"])
    for (item, seq, flags), frame in zip(delivered, case["frames"]):
        assert (seq, flags) == (frame["seq"], frame["flags"])
        _check_item(item, frame)


@pytest.mark.parametrize("name", CASES)
def test_whole_input_at_once(name):
    case = CASES[name]
    decoder = StreamDecoder(receiver=case["receiver"])
    items = decoder.feed(bytes.fromhex(case["hex"]))
    assert decoder.counters.as_dict() == case["counters"]
    expected = iter(case["frames"])
    for item in items:
        if isinstance(item, RawBlock):  # consecutive SAMPLES of one channel set arrive merged
            taken = 0
            while taken < item.n_scans:
                frame = next(expected)
                n = frame["fields"]["n_scans"]
                part = RawBlock(item.counts[taken:taken + n], item.channels, item.t_ns[taken:taken + n],
                                item.scan_index[taken:taken + n])
                _check_item(part, frame)
                taken += n
        else:
            _check_item(item, next(expected))
    assert next(expected, None) is None


@pytest.mark.parametrize("name", CASES)
def test_encoder_reproduces_canonical_wire(name):
    description = None
    for frame in CASES[name]["frames"]:
        msg = _message(frame, description)
        if frame["type"] == "DESCRIPTION":
            description = frame["fields"]
        if isinstance(msg, tuple):
            wire = encode_message(msg[0], frame["seq"], frame["flags"], encodings=msg[1])
        else:
            wire = encode_message(msg, frame["seq"], frame["flags"])
        assert wire.hex() == frame["wire"]
