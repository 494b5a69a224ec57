"""The link protocol's messages and their layouts on the wire (pure data; no I/O).

Every message is a frozen record in wire units (integers: microvolt,
milli-degree Celsius, nanoampere, millisecond) with a one-byte ``KIND``.
Each message class carries its payload layout (:attr:`Message.LAYOUT`), a
tuple of ``(field_name, wire_type)``; the Python codec and the C renderer of
the board side (:mod:`compensator.firmware.link_c`) both read this one table,
so the two ends cannot disagree about a field.

Wire types (all little-endian):

``u8``, ``u16``, ``u32``, ``u64``, ``i32``
    Fixed-width integers.
``hash``
    32 raw bytes (a SHA-256 digest; all zero means "none").
``text``
    One length byte then at most :data:`MAX_TEXT_BYTES` bytes of printable ASCII.
``data``
    One length byte then at most :data:`MAX_CHUNK_BYTES` raw bytes.
``u64[16]``, ``i32[16]``
    Sixteen fixed-width integers (one per fault bit).

``docs/protocol.md`` describes the framing, the exchange rules and every
message for people; this module is its executable form.
"""

from __future__ import annotations

import re
import struct
from dataclasses import dataclass, fields
from enum import IntEnum
from typing import ClassVar

__all__ = [
    "PROTOCOL_VERSION", "MAX_PAYLOAD_BYTES", "MAX_CHUNK_BYTES", "MAX_TEXT_BYTES", "MAX_IMAGE_BYTES",
    "FAULT_SLOTS", "ABSENT_I32", "ABSENT_U32", "HEADER_BYTES", "CRC_BYTES", "MAX_FRAME_BYTES",
    "MAX_ENCODED_BYTES", "WIRE_TYPES", "Kind", "Result", "UploadTarget", "Mode", "Message",
    "Identify", "ReadStatus", "SetOvervoltage", "SetBias", "SetOutputs", "ReadFaults", "ClearFaults",
    "Heartbeat", "SetTelemetryPeriod", "UploadBegin", "UploadChunk", "UploadCommit",
    "IdentityReport", "StatusReport", "FaultReport", "Reply", "Refusal", "TelemetryReport",
    "MESSAGE_TYPES", "REQUEST_TYPES", "message_type", "message_name", "reply_kind", "fixed_size", "RESULT_REASONS",
    "MIN_TELEMETRY_PERIOD_S", "MAX_TELEMETRY_PERIOD_S",
]

#: Version byte at the start of every frame; a board answers another version with ``Result.BAD_VERSION``.
PROTOCOL_VERSION = 1
#: Largest payload of one frame, bytes.
MAX_PAYLOAD_BYTES = 240
#: Largest data block of one upload chunk, bytes.
MAX_CHUNK_BYTES = 192
#: Largest text field, bytes.
MAX_TEXT_BYTES = 32
#: Largest image (table or coefficients) a board accepts, bytes.
MAX_IMAGE_BYTES = 16384
#: Shortest telemetry period a host may ask for, second (``SetTelemetryPeriod`` counts whole milliseconds).
MIN_TELEMETRY_PERIOD_S = 0.001
#: Longest telemetry period a host may ask for, second.
MAX_TELEMETRY_PERIOD_S = 3600.0
#: Fault bits with a trip record each (bits 0..15 of the fault word).
FAULT_SLOTS = 16
#: ``i32`` value meaning "not measured / not fitted" (the board has no such channel).
ABSENT_I32 = -(1 << 31)
#: ``u32`` value meaning "not available".
ABSENT_U32 = (1 << 32) - 1
#: version (1) + kind (1) + sequence number (2)
HEADER_BYTES = 4
#: CRC-16/IBM-3740 after the payload, little-endian.
CRC_BYTES = 2
#: Largest frame before COBS: header + payload + CRC.
MAX_FRAME_BYTES = HEADER_BYTES + MAX_PAYLOAD_BYTES + CRC_BYTES
#: Largest frame on the wire: COBS adds one byte per 254 (here one) plus the zero delimiter.
MAX_ENCODED_BYTES = MAX_FRAME_BYTES + (MAX_FRAME_BYTES + 253) // 254 + 1

#: struct format per fixed wire type (little-endian).
_FIXED = {"u8": "B", "u16": "H", "u32": "I", "u64": "Q", "i32": "i", "hash": "32s",
          "u64[16]": "16Q", "i32[16]": "16i"}
#: Every wire type the layouts may use.
WIRE_TYPES = (*_FIXED, "text", "data")


class Kind(IntEnum):
    """Message kinds (one byte). Requests are below 0x80; a reply's kind is the request's plus 0x80."""

    IDENTIFY = 0x01
    READ_STATUS = 0x02
    SET_OVERVOLTAGE = 0x03
    SET_BIAS = 0x04
    SET_OUTPUTS = 0x05
    READ_FAULTS = 0x06
    CLEAR_FAULTS = 0x07
    HEARTBEAT = 0x08
    SET_TELEMETRY_PERIOD = 0x09
    UPLOAD_BEGIN = 0x0A
    UPLOAD_CHUNK = 0x0B
    UPLOAD_COMMIT = 0x0C
    IDENTITY_REPORT = 0x81
    STATUS_REPORT = 0x82
    FAULT_REPORT = 0x86
    REFUSAL = 0xBF
    TELEMETRY = 0xC0


class Result(IntEnum):
    """Outcome of a command, carried by :class:`Reply`."""

    OK = 0
    REFUSED_LIMIT = 1      # the value is beyond a safety limit; ``value`` holds the limit
    REFUSED_FAULT = 2      # a latched trip holds the outputs in the safe state
    BAD_REQUEST = 3        # malformed payload (wrong length, bad text, unknown target)
    UNKNOWN_KIND = 4       # the board does not know this request
    BAD_VERSION = 5        # the frame's version byte is not the board's
    UPLOAD_INCOMPLETE = 6  # commit before every chunk arrived, or a chunk outside the declared image
    UPLOAD_CHECKSUM = 7    # the image's CRC-32 or size differs from the declared one
    INVALID_IMAGE = 8      # the image arrived intact but the board rejects its content
    NO_TABLE = 9           # an overvoltage target needs a loaded lookup table


#: Plain-words reason for each result, for messages to people.
RESULT_REASONS = {
    Result.OK: "done",
    Result.REFUSED_LIMIT: "refused: beyond a safety limit",
    Result.REFUSED_FAULT: "refused: a latched fault holds the outputs in the safe state (clear it first)",
    Result.BAD_REQUEST: "refused: malformed request",
    Result.UNKNOWN_KIND: "refused: the board does not know this request",
    Result.BAD_VERSION: "refused: the board speaks another protocol version",
    Result.UPLOAD_INCOMPLETE: "refused: the upload is incomplete or a chunk lies outside it",
    Result.UPLOAD_CHECKSUM: "refused: the uploaded image's size or CRC-32 differs from the declared one",
    Result.INVALID_IMAGE: "refused: the board rejects the image's content",
    Result.NO_TABLE: "refused: no lookup table is loaded",
}


class UploadTarget(IntEnum):
    """What an upload replaces."""

    TABLE = 1
    COEFFICIENTS = 2


class Mode(IntEnum):
    """How the board sets the bias."""

    OFF = 0        # outputs disabled: bias at the safe code, cooler off
    LAW = 1        # bias from the lookup table (overvoltage target)
    FIXED = 2      # a fixed bias
    SAFE = 3       # a latched trip holds the safe state
    RAMP_DOWN = 4  # outputs disabled, bias still ramping down to the safe code at the slew limit


@dataclass(frozen=True, kw_only=True)
class Message:
    """Base of every message; ``seq`` is the frame's sequence number (0..65535)."""

    KIND: ClassVar[int] = -1
    LAYOUT: ClassVar[tuple] = ()
    seq: int = 0

    def payload_fields(self) -> dict:
        """The payload's field values by name (``seq`` excluded)."""
        return {f.name: getattr(self, f.name) for f in fields(self) if f.name != "seq"}


# ---------------------------------------------------------------- requests (host -> board)

@dataclass(frozen=True, kw_only=True)
class Identify(Message):
    """Ask the board who it is (answered by :class:`IdentityReport`)."""

    KIND: ClassVar[int] = Kind.IDENTIFY


@dataclass(frozen=True, kw_only=True)
class ReadStatus(Message):
    """Ask for one status sample (answered by :class:`StatusReport`)."""

    KIND: ClassVar[int] = Kind.READ_STATUS


@dataclass(frozen=True, kw_only=True)
class SetOvervoltage(Message):
    """Hold the law's overvoltage target (bias from the lookup table); absolute, so a retry is harmless."""

    KIND: ClassVar[int] = Kind.SET_OVERVOLTAGE
    LAYOUT: ClassVar[tuple] = (("overvoltage_uv", "i32"),)
    overvoltage_uv: int


@dataclass(frozen=True, kw_only=True)
class SetBias(Message):
    """Hold a fixed bias (no temperature compensation); absolute."""

    KIND: ClassVar[int] = Kind.SET_BIAS
    LAYOUT: ClassVar[tuple] = (("bias_uv", "i32"),)
    bias_uv: int


@dataclass(frozen=True, kw_only=True)
class SetOutputs(Message):
    """Enable (1) or disable (0) the bias and cooler outputs; disabling ramps the bias down at the slew limit."""

    KIND: ClassVar[int] = Kind.SET_OUTPUTS
    LAYOUT: ClassVar[tuple] = (("enabled", "u8"),)
    enabled: int


@dataclass(frozen=True, kw_only=True)
class ReadFaults(Message):
    """Ask for the fault words and the trip record of each latched bit (answered by :class:`FaultReport`)."""

    KIND: ClassVar[int] = Kind.READ_FAULTS


@dataclass(frozen=True, kw_only=True)
class ClearFaults(Message):
    """Clear the latched bits in ``mask`` whose cause has gone; the reply's ``value`` is what stays latched."""

    KIND: ClassVar[int] = Kind.CLEAR_FAULTS
    LAYOUT: ClassVar[tuple] = (("mask", "u32"),)
    mask: int


@dataclass(frozen=True, kw_only=True)
class Heartbeat(Message):
    """Tell the board the host is alive (any valid request does too)."""

    KIND: ClassVar[int] = Kind.HEARTBEAT


@dataclass(frozen=True, kw_only=True)
class SetTelemetryPeriod(Message):
    """Stream a :class:`TelemetryReport` every ``period_ms`` (0 stops the stream); absolute."""

    KIND: ClassVar[int] = Kind.SET_TELEMETRY_PERIOD
    LAYOUT: ClassVar[tuple] = (("period_ms", "u32"),)
    period_ms: int


@dataclass(frozen=True, kw_only=True)
class UploadBegin(Message):
    """Declare an image of ``size_bytes`` with CRC-32 ``crc32`` for ``target``; discards any earlier partial upload."""

    KIND: ClassVar[int] = Kind.UPLOAD_BEGIN
    LAYOUT: ClassVar[tuple] = (("target", "u8"), ("size_bytes", "u32"), ("crc32", "u32"))
    target: int
    size_bytes: int
    crc32: int


@dataclass(frozen=True, kw_only=True)
class UploadChunk(Message):
    """Image bytes at an absolute ``offset_bytes`` (a multiple of :data:`MAX_CHUNK_BYTES`); a repeat is harmless."""

    KIND: ClassVar[int] = Kind.UPLOAD_CHUNK
    LAYOUT: ClassVar[tuple] = (("target", "u8"), ("offset_bytes", "u32"), ("data", "data"))
    target: int
    offset_bytes: int
    data: bytes


@dataclass(frozen=True, kw_only=True)
class UploadCommit(Message):
    """Check the whole image against the declared size and CRC-32 and apply it at once (all or nothing)."""

    KIND: ClassVar[int] = Kind.UPLOAD_COMMIT
    LAYOUT: ClassVar[tuple] = (("target", "u8"), ("size_bytes", "u32"), ("crc32", "u32"))
    target: int
    size_bytes: int
    crc32: int


# ---------------------------------------------------------------- board -> host

@dataclass(frozen=True, kw_only=True)
class IdentityReport(Message):
    """Who the board is; answers :class:`Identify`."""

    KIND: ClassVar[int] = Kind.IDENTITY_REPORT
    LAYOUT: ClassVar[tuple] = (("protocol_version", "u8"), ("firmware_version", "text"), ("board_name", "text"),
                               ("serial_number", "text"), ("table_sha256", "hash"),
                               ("coefficients_sha256", "hash"))
    protocol_version: int
    firmware_version: str
    board_name: str
    serial_number: str = ""
    table_sha256: bytes = bytes(32)
    coefficients_sha256: bytes = bytes(32)


#: The sample fields shared by :class:`TelemetryReport` and :class:`StatusReport`.
_SAMPLE = (("uptime_ms", "u64"), ("sensor_adc_code", "u32"), ("sensor_temp_mdegc", "i32"),
           ("bias_set_uv", "i32"), ("bias_measured_uv", "i32"), ("sipm_current_na", "i32"),
           ("cooler_current_ma", "i32"), ("hot_side_temp_mdegc", "i32"), ("overvoltage_target_uv", "i32"),
           ("faults_live", "u32"), ("faults_latched", "u32"), ("dark_peak_gain", "u32"),
           ("dark_peak_gain_err", "u32"))


@dataclass(frozen=True, kw_only=True)
class TelemetryReport(Message):
    """One telemetry sample, streamed unsolicited; ``seq`` counts the board's samples.

    Absent channels carry :data:`ABSENT_I32` (or :data:`ABSENT_U32` for the gain).
    """

    KIND: ClassVar[int] = Kind.TELEMETRY
    LAYOUT: ClassVar[tuple] = _SAMPLE
    uptime_ms: int
    sensor_adc_code: int
    sensor_temp_mdegc: int
    bias_set_uv: int
    bias_measured_uv: int = ABSENT_I32
    sipm_current_na: int = ABSENT_I32
    cooler_current_ma: int = ABSENT_I32
    hot_side_temp_mdegc: int = ABSENT_I32
    overvoltage_target_uv: int = 0
    faults_live: int = 0
    faults_latched: int = 0
    dark_peak_gain: int = ABSENT_U32
    dark_peak_gain_err: int = ABSENT_U32


@dataclass(frozen=True, kw_only=True)
class StatusReport(TelemetryReport):
    """A sample plus the board's mode; answers :class:`ReadStatus`."""

    KIND: ClassVar[int] = Kind.STATUS_REPORT
    LAYOUT: ClassVar[tuple] = _SAMPLE + (("mode", "u8"), ("outputs_enabled", "u8"), ("bias_dac_code", "u32"),
                                         ("telemetry_period_ms", "u32"))
    mode: int = Mode.OFF
    outputs_enabled: int = 0
    bias_dac_code: int = 0
    telemetry_period_ms: int = 0


@dataclass(frozen=True, kw_only=True)
class FaultReport(Message):
    """Fault words and, per latched bit, when it tripped and the value that tripped it; answers :class:`ReadFaults`.

    ``trip_uptime_ms[b]`` and ``trip_value[b]`` belong to bit ``b`` (0 when not latched); the value's
    unit depends on the bit (see ``docs/protocol.md``).
    """

    KIND: ClassVar[int] = Kind.FAULT_REPORT
    LAYOUT: ClassVar[tuple] = (("faults_live", "u32"), ("faults_latched", "u32"),
                               ("trip_uptime_ms", "u64[16]"), ("trip_value", "i32[16]"))
    faults_live: int
    faults_latched: int
    trip_uptime_ms: tuple = (0,) * FAULT_SLOTS
    trip_value: tuple = (0,) * FAULT_SLOTS


@dataclass(frozen=True, kw_only=True)
class Reply(Message):
    """Answer to a command: its kind is the request's plus 0x80.

    Attributes
    ----------
    request_kind : int
        The request answered (not on the wire as a field: it is the frame's kind minus 0x80).
    result : int
        A :class:`Result`.
    faults : int
        The fault bits behind a refusal (0 when none).
    value : int
        The applied value (microvolt for bias and overvoltage), the limit for
        ``REFUSED_LIMIT``, the bits still latched after :class:`ClearFaults`,
        or the bytes received for an upload.
    """

    KIND: ClassVar[int] = 0x80
    LAYOUT: ClassVar[tuple] = (("result", "u8"), ("faults", "u32"), ("value", "i32"))
    request_kind: int
    result: int
    faults: int = 0
    value: int = 0

    def payload_fields(self) -> dict:
        """The payload's field values by name (``seq`` and ``request_kind`` excluded)."""
        return {"result": self.result, "faults": self.faults, "value": self.value}


@dataclass(frozen=True, kw_only=True)
class Refusal(Message):
    """A request the board could not even parse: wrong version, unknown kind or malformed payload.

    Attributes
    ----------
    request_kind : int
        The kind byte of the refused frame.
    result : int
        ``BAD_VERSION``, ``UNKNOWN_KIND`` or ``BAD_REQUEST``.
    value : int
        The board's protocol version for ``BAD_VERSION``, else 0.
    """

    KIND: ClassVar[int] = Kind.REFUSAL
    LAYOUT: ClassVar[tuple] = (("request_kind", "u8"), ("result", "u8"), ("value", "i32"))
    request_kind: int
    result: int
    value: int = 0


REQUEST_TYPES = (Identify, ReadStatus, SetOvervoltage, SetBias, SetOutputs, ReadFaults, ClearFaults, Heartbeat,
                 SetTelemetryPeriod, UploadBegin, UploadChunk, UploadCommit)
#: Every message class with a kind of its own (``Reply`` takes ``0x80 + request kind`` for the other requests).
MESSAGE_TYPES = REQUEST_TYPES + (IdentityReport, StatusReport, FaultReport, Refusal, TelemetryReport)
_BY_KIND = {int(cls.KIND): cls for cls in MESSAGE_TYPES}
#: The requests answered by a specific report rather than a :class:`Reply`.
_REPORTS = {Kind.IDENTIFY: IdentityReport, Kind.READ_STATUS: StatusReport, Kind.READ_FAULTS: FaultReport}


def message_name(message) -> str:
    """Snake-case name of a message or message class (``SetBias`` -> ``"set_bias"``).

    Parameters
    ----------
    message : Message or type
    """
    cls = message if isinstance(message, type) else type(message)
    return re.sub(r"(?<!^)(?=[A-Z])", "_", cls.__name__).lower()


def reply_kind(request_kind: int) -> int:
    """The kind of the frame that answers a request of ``request_kind``.

    Parameters
    ----------
    request_kind : int
        A request's kind (below 0x80).
    """
    return int(request_kind) | 0x80


def message_type(kind: int):
    """The message class for a frame kind: a specific class, :class:`Reply`, or ``None`` when unknown.

    Parameters
    ----------
    kind : int
        The frame's kind byte.
    """
    cls = _BY_KIND.get(int(kind))
    if cls is not None:
        return cls
    if kind & 0x80 and (kind & 0x7F) in _BY_KIND and _BY_KIND[kind & 0x7F] in REQUEST_TYPES \
            and (kind & 0x7F) not in _REPORTS:
        return Reply
    return None


def fixed_size(wire_type: str) -> int:
    """Bytes of a fixed wire type (``text`` and ``data`` have none).

    Parameters
    ----------
    wire_type : str
        One of :data:`WIRE_TYPES`.
    """
    return struct.calcsize("<" + _FIXED[wire_type])


def _check_layouts() -> None:
    for cls in (*MESSAGE_TYPES, Reply):
        size = 0
        for name, wire_type in cls.LAYOUT:
            assert wire_type in WIRE_TYPES, (cls.__name__, name)
            size += fixed_size(wire_type) if wire_type in _FIXED else 1 + (
                MAX_TEXT_BYTES if wire_type == "text" else MAX_CHUNK_BYTES)
        assert size <= MAX_PAYLOAD_BYTES, (cls.__name__, size)


_check_layouts()
