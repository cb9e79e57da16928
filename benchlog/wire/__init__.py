"""Sans-I/O wire stage: bytes in, typed records out; records and host commands to bytes.

Nothing here does I/O or imports pyserial. See docs/protocol.md for the contract.
"""

from benchlog.wire._decoder import MAX_FRAME, MAX_LINE, Decoder
from benchlog.wire._encoders import LineEncoder, PackedEncoder
from benchlog.wire._framing import DecodeError, cobs_decode, cobs_encode, crc16, crc32
from benchlog.wire._lineform import line_check
from benchlog.wire._records import (
    BLOCK_BEAT,
    BLOCK_DRIVE,
    BLOCK_EDGE,
    PROTOCOL_VERSION,
    Announce,
    Beat,
    Block,
    DecodeCounters,
    Drive,
    Edges,
    Fault,
    GoAccepted,
    Notice,
    PlanAccepted,
    Pong,
    Record,
    SequenceGap,
    Unknown,
)

# host commands load on first use: reading a recording (`benchlog analyze`) sends none
_COMMAND_NAMES = frozenset(
    ("Command", "Go", "Halt", "Ping", "Plan", "SetForm", "Who", "encode_command", "parse_command")
)


def __getattr__(name: str):
    if name not in _COMMAND_NAMES:
        raise AttributeError(f"module {__name__!r} has no attribute {name!r}")
    from benchlog.wire import _commands

    value = getattr(_commands, name)
    globals()[name] = value
    return value


__all__ = [
    "PROTOCOL_VERSION",
    "Announce",
    "Beat",
    "Block",
    "BLOCK_EDGE",
    "BLOCK_DRIVE",
    "BLOCK_BEAT",
    "DecodeCounters",
    "Drive",
    "Edges",
    "Fault",
    "GoAccepted",
    "PlanAccepted",
    "Notice",
    "Pong",
    "Record",
    "SequenceGap",
    "Unknown",
    "Decoder",
    "MAX_FRAME",
    "MAX_LINE",
    "LineEncoder",
    "PackedEncoder",
    "cobs_encode",
    "cobs_decode",
    "crc32",
    "crc16",
    "line_check",
    "DecodeError",
    "Command",
    "Who",
    "Ping",
    "SetForm",
    "Plan",
    "Go",
    "Halt",
    "encode_command",
    "parse_command",
]
