"""taprig.protocol: the wire protocol codec of PROTOCOL.md, pure (no I/O, no clocks, no threads).

- :mod:`~taprig.protocol.messages`: type codes, enums, one frozen dataclass per message, non-sample body codecs;
- :mod:`~taprig.protocol.samples`: ``SAMPLES`` layouts, :class:`RawBlock`, the sample encoder;
- :mod:`~taprig.protocol.framing`: COBS + CRC-32 frames, :func:`encode_frame`, :func:`encode_message`;
- :mod:`~taprig.protocol.decoder`: :class:`StreamDecoder` and its :class:`Counters`.
"""

from taprig.protocol.decoder import Counters, StreamDecoder
from taprig.protocol.framing import (
    FLAG_BOOT,
    MAX_ENCODED,
    MAX_FRAME,
    Frame,
    FrameError,
    decode_frame,
    encode_frame,
    encode_message,
)
from taprig.protocol.messages import (
    ActuatorInfo,
    ActuatorKind,
    AllowMoves,
    ChannelInfo,
    Describe,
    Description,
    DeviceState,
    Encoding,
    Heartbeat,
    Log,
    MsgType,
    Reply,
    ReplyCode,
    Reset,
    Samples,
    SetActuator,
    Start,
    Status,
    Stop,
    encoding_name,
)
from taprig.protocol.samples import RawBlock, channels_to_mask, mask_to_channels

__all__ = [
    "FLAG_BOOT",
    "MAX_ENCODED",
    "MAX_FRAME",
    "ActuatorInfo",
    "ActuatorKind",
    "AllowMoves",
    "ChannelInfo",
    "Counters",
    "Describe",
    "Description",
    "DeviceState",
    "Encoding",
    "Frame",
    "FrameError",
    "Heartbeat",
    "Log",
    "MsgType",
    "RawBlock",
    "Reply",
    "ReplyCode",
    "Reset",
    "Samples",
    "SetActuator",
    "Start",
    "Status",
    "Stop",
    "StreamDecoder",
    "channels_to_mask",
    "decode_frame",
    "encode_frame",
    "encode_message",
    "encoding_name",
    "mask_to_channels",
]
