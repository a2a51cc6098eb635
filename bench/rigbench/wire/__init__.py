"""The line protocol with no I/O: framing, CRC, typed messages, host and board codecs.

See protocol/PROTOCOL.md.
"""

from rigbench.wire.codec import KILL, BoardCodec, HostCodec
from rigbench.wire.crc import crc16
from rigbench.wire.describe import BoardInfo, LoopInfo, ParamInfo, SignalInfo
from rigbench.wire.errors import LocalProtocolError, ProtocolError, RemoteProtocolError
from rigbench.wire.frame import MAX_LINE, BadFrame, Body, KillByte, encode_frame
from rigbench.wire.messages import *  # noqa: F401,F403  (the message classes are the API)
from rigbench.wire.messages import PROTOCOL_VERSION, as_dict, format_body

__all__ = [
    "KILL", "BoardCodec", "HostCodec", "crc16", "BoardInfo", "LoopInfo", "ParamInfo",
    "SignalInfo", "LocalProtocolError", "ProtocolError", "RemoteProtocolError", "MAX_LINE",
    "BadFrame", "Body", "KillByte", "encode_frame", "PROTOCOL_VERSION", "as_dict",
    "format_body",
]
