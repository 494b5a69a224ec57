"""Sans-I/O codec of the link protocol: bytes in, messages out, and back. Never imports serial.

A frame on the wire is ``COBS(version | kind | seq | payload | crc) 0x00``:

* ``version`` (1 byte) is :data:`~compensator.link.protocol.PROTOCOL_VERSION`;
* ``kind`` (1 byte) selects the message (:class:`~compensator.link.protocol.Kind`);
* ``seq`` (2 bytes, little-endian) is the sequence number a reply echoes;
* ``payload`` is the message's fields in the order of its ``LAYOUT``;
* ``crc`` (2 bytes, little-endian) is CRC-16/IBM-3740 (polynomial 0x1021,
  initial value 0xFFFF, no reflection, no final XOR; catalogue check value
  0x29B1 for the ASCII bytes "123456789") over everything before it,
  computed with :func:`binascii.crc_hqx`;
* COBS (Cheshire and Baker, IEEE/ACM Trans. Networking 7(2), 159, 1999)
  removes every zero byte, so the single zero after it marks the frame's end
  and a receiver that lost its place resynchronises at the next zero.
  Framing uses the ``cobs`` package.

Use::

    codec = LinkCodec()
    port.write(codec.encode(ReadStatus(seq=7)))
    codec.receive_data(port.read(256))
    while (message := codec.next_message()) is not NEED_DATA:
        ...

:meth:`LinkCodec.next_message` raises :class:`RemoteProtocolError` for a
frame the peer got wrong (bad CRC, bad COBS, too long, unknown kind, bad
payload); the frame is dropped first, so the caller may simply call again.
Misuse by the caller (encoding a value that does not fit its field,
feeding more than the buffer bound without draining) raises
:class:`LocalProtocolError`. Both are :class:`~compensator.errors.LinkError`.
"""

from __future__ import annotations

import binascii
import struct
from typing import NamedTuple

from cobs import cobs

from compensator.errors import LinkError
from compensator.link import protocol as p

__all__ = [
    "NEED_DATA", "NeedData", "ProtocolError", "LocalProtocolError", "RemoteProtocolError", "LinkCodec",
    "crc16", "encode_payload", "decode_payload", "encode_frame", "DEFAULT_MAX_BUFFER_BYTES", "RawFrame",
]

#: Default bound on bytes buffered and not yet drained by :meth:`LinkCodec.next_message`.
DEFAULT_MAX_BUFFER_BYTES = 65536


class NeedData:
    """The marker :meth:`LinkCodec.next_message` returns when no complete frame is buffered."""

    _instance = None

    def __new__(cls):
        if cls._instance is None:
            cls._instance = super().__new__(cls)
        return cls._instance

    def __repr__(self) -> str:
        return "NEED_DATA"


#: The one :class:`NeedData` instance.
NEED_DATA = NeedData()


class ProtocolError(LinkError):
    """A protocol rule was broken; subclasses say by whom.

    Parameters
    ----------
    reason : str
        What went wrong, in plain words.
    code : str
        A short stable tag (``"crc"``, ``"cobs"``, ``"too_long"``, ...).
    kind, seq : int or None
        The frame's kind and sequence number when they could be read (a
        board answers such a frame with a refusal naming them).
    """

    def __init__(self, reason: str, *, code: str = "", kind: int | None = None, seq: int | None = None):
        self.reason = reason
        self.code = code
        self.kind = kind
        self.seq = seq
        super().__init__(reason)


class LocalProtocolError(ProtocolError):
    """We misused the codec (our fault): a value that does not fit, a buffer not drained."""


class RemoteProtocolError(ProtocolError):
    """The peer sent something that is not a valid frame or message (its fault, or the line's)."""


def crc16(data: bytes) -> int:
    """CRC-16/IBM-3740 of ``data`` (poly 0x1021, init 0xFFFF; check value 0x29B1), by :func:`binascii.crc_hqx`.

    Parameters
    ----------
    data : bytes
        The bytes to protect.
    """
    return binascii.crc_hqx(data, 0xFFFF)


def _compile(layout):
    """A struct for an all-fixed layout, else ``None`` (parsed field by field)."""
    if all(t not in ("text", "data") for _, t in layout):
        return struct.Struct("<" + "".join(p._FIXED[t] for _, t in layout))
    return None


_STRUCTS = {cls: _compile(cls.LAYOUT) for cls in (*p.MESSAGE_TYPES, p.Reply)}
_NAMES = {cls: tuple(name for name, _ in cls.LAYOUT) for cls in _STRUCTS}


def _build(cls, values: dict, seq: int):
    """A message from decoded fields without the dataclass ``__init__`` (the hot path of decoding).

    Every field is in ``values`` (the layout has them all), so the record is
    the one ``cls(seq=seq, **values)`` would make, at a fraction of the cost.
    """
    message = object.__new__(cls)
    state = message.__dict__
    state.update(values)
    state["seq"] = seq
    return message
_ARRAY = {"u64[16]", "i32[16]"}
_FLAT = {cls: any(t in _ARRAY for _, t in cls.LAYOUT) for cls in _STRUCTS}


def _check_text(value: str, name: str) -> bytes:
    raw = value.encode("ascii", "replace") if isinstance(value, str) else b"\x00"
    if not isinstance(value, str) or len(raw) > p.MAX_TEXT_BYTES or any(b < 0x20 or b > 0x7E for b in raw):
        raise LocalProtocolError(f"{name}: needs printable ASCII text of at most {p.MAX_TEXT_BYTES} bytes, "
                                 f"got {value!r}", code="value")
    return raw


def _field_bytes(name: str, wire_type: str, value) -> bytes:
    if wire_type == "text":
        raw = _check_text(value, name)
        return bytes([len(raw)]) + raw
    if wire_type == "data":
        if not isinstance(value, (bytes, bytearray)) or len(value) > p.MAX_CHUNK_BYTES:
            raise LocalProtocolError(f"{name}: needs bytes, at most {p.MAX_CHUNK_BYTES}, got {len(value)!r} "
                                     f"of {type(value).__name__}" if isinstance(value, (bytes, bytearray))
                                     else f"{name}: needs bytes, got {type(value).__name__}", code="value")
        return bytes([len(value)]) + bytes(value)
    fmt = "<" + p._FIXED[wire_type]
    try:
        if wire_type in _ARRAY:
            return struct.pack(fmt, *value)
        if wire_type == "hash" and (not isinstance(value, (bytes, bytearray)) or len(value) != 32):
            raise struct.error("needs 32 bytes")
        if isinstance(value, bool) or not isinstance(value, (int, bytes, bytearray)):
            raise struct.error(f"needs an integer, got {type(value).__name__}")
        return struct.pack(fmt, value)
    except (struct.error, TypeError) as exc:
        raise LocalProtocolError(f"{name}: {value!r} does not fit a {wire_type} field ({exc})", code="value") from None


def encode_payload(message: p.Message) -> bytes:
    """The payload bytes of ``message`` (fields in layout order).

    Parameters
    ----------
    message : Message
        Any message of :mod:`compensator.link.protocol`.

    Raises
    ------
    LocalProtocolError
        A field's value does not fit its wire type.
    """
    cls = type(message)
    layout = cls.LAYOUT
    fields_ = message.payload_fields()
    compiled = _STRUCTS.get(cls)
    if compiled is not None and not _FLAT[cls]:
        values = [fields_[name] for name, _ in layout]
        if all(type(v) is int for v in values):
            try:
                return compiled.pack(*values)
            except struct.error:
                pass  # name the field below
    return b"".join(_field_bytes(name, t, fields_[name]) for name, t in layout)


def encode_frame(kind: int, seq: int, payload: bytes, *, version: int = p.PROTOCOL_VERSION) -> bytes:
    """Frame a payload: header, CRC, COBS and the zero delimiter.

    Parameters
    ----------
    kind : int
        Kind byte, 0..255.
    seq : int
        Sequence number, 0..65535.
    payload : bytes
        At most :data:`~compensator.link.protocol.MAX_PAYLOAD_BYTES`.
    version : int, optional
        Version byte (tests use another one to check refusals).

    Raises
    ------
    LocalProtocolError
        ``kind``, ``seq`` or ``version`` out of range, or the payload too long.
    """
    if not 0 <= seq <= 0xFFFF:
        raise LocalProtocolError(f"seq: {seq!r} is outside 0..65535", code="value")
    if not 0 <= kind <= 0xFF or not 0 <= version <= 0xFF:
        raise LocalProtocolError(f"kind/version: {kind!r}/{version!r} is outside 0..255", code="value")
    if len(payload) > p.MAX_PAYLOAD_BYTES:
        raise LocalProtocolError(f"payload: {len(payload)} bytes exceed {p.MAX_PAYLOAD_BYTES}", code="value")
    body = bytes((version, kind, seq & 0xFF, seq >> 8)) + payload
    body += crc16(body).to_bytes(2, "little")
    return cobs.encode(body) + b"\x00"


def decode_payload(message_class, payload: bytes, *, seq: int = 0, kind: int | None = None) -> p.Message:
    """Build a message of class ``cls`` from its payload bytes.

    Parameters
    ----------
    message_class : type
        A message class of :mod:`compensator.link.protocol`.
    payload : bytes
        The payload as it came off the wire.
    seq : int
        The frame's sequence number.
    kind : int, optional
        The frame's kind (needed for :class:`~compensator.link.protocol.Reply`).

    Raises
    ------
    RemoteProtocolError
        The payload does not match the layout (its length, a text field, a length byte).
    """
    cls = message_class
    compiled = _STRUCTS[cls]
    if compiled is not None:
        if len(payload) != compiled.size:
            raise RemoteProtocolError(f"{cls.__name__}: payload of {len(payload)} bytes, expected {compiled.size}",
                                      code="payload", kind=kind, seq=seq)
        raw = compiled.unpack(payload)
        if _FLAT[cls]:
            values, i = {}, 0
            for name, t in cls.LAYOUT:
                if t in _ARRAY:
                    values[name] = tuple(raw[i:i + p.FAULT_SLOTS])
                    i += p.FAULT_SLOTS
                else:
                    values[name] = raw[i]
                    i += 1
        else:
            values = dict(zip(_NAMES[cls], raw))
    else:
        values, pos = {}, 0
        for name, t in cls.LAYOUT:
            if t in ("text", "data"):
                if pos >= len(payload):
                    raise RemoteProtocolError(f"{cls.__name__}.{name}: payload ends before the field",
                                              code="payload", kind=kind, seq=seq)
                n = payload[pos]
                limit = p.MAX_TEXT_BYTES if t == "text" else p.MAX_CHUNK_BYTES
                chunk = payload[pos + 1:pos + 1 + n]
                if n > limit or len(chunk) != n:
                    raise RemoteProtocolError(f"{cls.__name__}.{name}: length {n} is beyond the payload or "
                                              f"the limit {limit}", code="payload", kind=kind, seq=seq)
                if t == "text":
                    if any(b < 0x20 or b > 0x7E for b in chunk):
                        raise RemoteProtocolError(f"{cls.__name__}.{name}: not printable ASCII", code="payload",
                                                  kind=kind, seq=seq)
                    values[name] = chunk.decode("ascii")
                else:
                    values[name] = bytes(chunk)
                pos += 1 + n
            else:
                size = fixed_size = struct.calcsize("<" + p._FIXED[t])
                if pos + size > len(payload):
                    raise RemoteProtocolError(f"{cls.__name__}.{name}: payload ends inside the field",
                                              code="payload", kind=kind, seq=seq)
                (values[name],) = struct.unpack_from("<" + p._FIXED[t], payload, pos)
                pos += fixed_size
        if pos != len(payload):
            raise RemoteProtocolError(f"{cls.__name__}: {len(payload) - pos} bytes after the last field",
                                      code="payload", kind=kind, seq=seq)
    if cls is p.Reply:
        values["request_kind"] = kind & 0x7F
    return _build(cls, values, seq)


class RawFrame(NamedTuple):
    """A frame whose COBS and CRC are valid, before its payload is interpreted."""

    version: int
    kind: int
    seq: int
    payload: bytes


class LinkCodec:
    """Frames and messages in both directions, with no I/O of its own.

    Parameters
    ----------
    max_buffer_bytes : int, optional
        Largest number of received bytes held before :meth:`next_message`
        drains them; :meth:`receive_data` beyond it is the caller's mistake.

    Attributes
    ----------
    frames_ok : int
        Valid messages returned.
    frames_bad : int
        Frames dropped with a :class:`RemoteProtocolError`.
    bytes_discarded : int
        Bytes dropped while resynchronising (overlong runs without a delimiter).
    """

    def __init__(self, *, max_buffer_bytes: int = DEFAULT_MAX_BUFFER_BYTES):
        if max_buffer_bytes < p.MAX_ENCODED_BYTES:
            raise LocalProtocolError(f"max_buffer_bytes: must hold one frame ({p.MAX_ENCODED_BYTES} bytes)",
                                     code="value")
        self.max_buffer_bytes = int(max_buffer_bytes)
        self._buffer = bytearray()
        self._skipping = False   # inside an overlong run: drop until the next delimiter
        self.frames_ok = 0
        self.frames_bad = 0
        self.bytes_discarded = 0

    @property
    def buffered_bytes(self) -> int:
        """Bytes received and not yet consumed."""
        return len(self._buffer)

    def receive_data(self, data: bytes) -> None:
        """Hand received bytes to the codec (any split: whole frames, single bytes, garbage).

        Parameters
        ----------
        data : bytes
            Bytes as read from the line.

        Raises
        ------
        LocalProtocolError
            More than ``max_buffer_bytes`` would be held: drain with :meth:`next_message` first.
        """
        if len(self._buffer) + len(data) > self.max_buffer_bytes:
            raise LocalProtocolError(f"receive buffer: {len(self._buffer) + len(data)} bytes would exceed "
                                     f"{self.max_buffer_bytes}; call next_message() to drain it", code="buffer")
        self._buffer += data

    def next_frame(self):
        """The next frame with valid COBS and CRC (payload not interpreted), or :data:`NEED_DATA`.

        Returns
        -------
        RawFrame or NeedData

        Raises
        ------
        RemoteProtocolError
            The next frame is corrupt (``code`` ``"cobs"``, ``"short"``,
            ``"crc"`` or ``"too_long"``); it has been dropped, so call again.
        """
        buf = self._buffer
        while True:
            end = buf.find(0)
            if end < 0:
                if len(buf) > p.MAX_ENCODED_BYTES - 1:
                    dropped = len(buf)
                    self.bytes_discarded += dropped
                    del buf[:]
                    if not self._skipping:
                        self._skipping = True
                        self.frames_bad += 1
                        raise RemoteProtocolError(f"no frame delimiter in {dropped} bytes: dropped until the next "
                                                  "delimiter", code="too_long")
                return NEED_DATA
            encoded = bytes(buf[:end])
            del buf[:end + 1]
            if self._skipping:
                self._skipping = False
                self.bytes_discarded += len(encoded) + 1
                continue
            if not encoded:
                continue  # an idle delimiter (e.g. sent first to flush a receiver)
            return self._unframe(encoded)

    def _unframe(self, encoded: bytes) -> RawFrame:
        if len(encoded) > p.MAX_ENCODED_BYTES - 1:
            self.frames_bad += 1
            raise RemoteProtocolError(f"frame of {len(encoded)} bytes exceeds {p.MAX_ENCODED_BYTES - 1}",
                                      code="too_long")
        try:
            body = cobs.decode(encoded)
        except cobs.DecodeError as exc:
            self.frames_bad += 1
            raise RemoteProtocolError(f"bad COBS framing ({exc})", code="cobs") from None
        if len(body) < p.HEADER_BYTES + p.CRC_BYTES:
            self.frames_bad += 1
            raise RemoteProtocolError(f"frame of {len(body)} bytes is shorter than a header and CRC", code="short")
        if crc16(body[:-2]) != int.from_bytes(body[-2:], "little"):
            self.frames_bad += 1
            raise RemoteProtocolError("CRC mismatch: the frame was corrupted", code="crc")
        return RawFrame(body[0], body[1], body[2] | body[3] << 8, body[p.HEADER_BYTES:-2])

    def next_message(self):
        """The next complete message, or :data:`NEED_DATA`.

        Returns
        -------
        Message or NeedData

        Raises
        ------
        RemoteProtocolError
            The next frame is invalid; it has been dropped, so call again for the rest.
        """
        frame = self.next_frame()
        if frame is NEED_DATA:
            return frame
        version, kind, seq, payload = frame
        if version != p.PROTOCOL_VERSION:
            self.frames_bad += 1
            raise RemoteProtocolError(f"protocol version {version}, this end speaks {p.PROTOCOL_VERSION}",
                                      code="version", kind=kind, seq=seq)
        cls = p.message_type(kind)
        if cls is None:
            self.frames_bad += 1
            raise RemoteProtocolError(f"unknown message kind 0x{kind:02X}", code="unknown_kind", kind=kind, seq=seq)
        try:
            message = decode_payload(cls, payload, seq=seq, kind=kind)
        except RemoteProtocolError:
            self.frames_bad += 1
            raise
        self.frames_ok += 1
        return message

    def encode(self, message: p.Message) -> bytes:
        """The bytes that carry ``message`` on the wire (frame and delimiter).

        Parameters
        ----------
        message : Message
            A message of :mod:`compensator.link.protocol`; a
            :class:`~compensator.link.protocol.Reply` goes out with the kind
            ``0x80 + request_kind``.

        Raises
        ------
        LocalProtocolError
            A value does not fit its field, or the message is not one of ours.
        """
        cls = type(message)
        if cls is p.Reply:
            if p.message_type(p.reply_kind(message.request_kind)) is not p.Reply:
                raise LocalProtocolError(f"request_kind: 0x{message.request_kind:02X} is answered by a report, "
                                         "not a Reply", code="value")
            kind = p.reply_kind(message.request_kind)
        elif cls in _STRUCTS:
            kind = int(cls.KIND)
        else:
            raise LocalProtocolError(f"message: {cls.__name__} is not a message of the link protocol", code="value")
        return encode_frame(kind, message.seq, encode_payload(message))
