"""The board API for the host: requests with retries, reconnection, telemetry, and a safe exit.

Use::

    with BoardClient.open("/dev/pts/5") as board:
        print(board.identify())
        board.set_overvoltage(3.0)
        board.enable()
        for item in board.stream(duration_s=60):
            ...                      # Telemetry samples, and LinkEvent on a reconnection

Leaving the ``with`` block disables the outputs and waits while the board
ramps the bias down at its slew limit (``ramp_down_on_exit=False`` for a
logger that only watches). Each request gets a new sequence number; a retry
re-sends the same frame with the same number, so the board answers it from
its cache and never executes it twice. Commands are absolute (set this
bias, enable), so repeating one is harmless too.

Every command keeps the board's heartbeat watchdog fed; a host that goes
silent for longer than the board's timeout with the outputs enabled finds
the board in its safe state.
"""

from __future__ import annotations

import os
import time
import zlib
from collections import deque
from dataclasses import dataclass, field, replace

from compensator.errors import LinkError
from compensator.firmware.faults import fault_names
from compensator.link import protocol as p
from compensator.link.codec import NEED_DATA, LinkCodec, RemoteProtocolError
from compensator.link.messages import Identity, Telemetry
from compensator.link.transport import DEFAULT_BAUD_RATE, DEFAULT_TURNAROUND_S, SerialTransport, reply_timeout_s

__all__ = ["BoardClient", "BoardStatus", "FaultState", "TripRecord", "LinkEvent", "BoardRefused", "LinkTimeout",
           "telemetry_from_wire", "DEFAULT_RETRIES"]

#: Attempts after the first before a request fails.
DEFAULT_RETRIES = 4


class LinkTimeout(LinkError):
    """No valid answer arrived after every retry."""


class BoardRefused(LinkError):
    """The board answered and refused the request.

    Parameters
    ----------
    request : str
        The request's name (``"set_bias"``, ...).
    result : Result
        Why (a :class:`~compensator.link.protocol.Result`).
    value : int
        The reply's value (for ``REFUSED_LIMIT`` the limit, in the request's wire unit).
    faults : int
        Fault bits behind the refusal.
    detail : str
        The limit or other value in words, e.g. ``"limit 36 V"``.
    """

    def __init__(self, request: str, result: p.Result, *, value: int = 0, faults: int = 0, detail: str = ""):
        self.request = request
        self.result = p.Result(result)
        self.value = value
        self.faults = faults
        reason = p.RESULT_REASONS[self.result]
        extra = [detail] if detail else []
        if faults:
            extra.append("faults: " + ", ".join(fault_names(faults)))
        super().__init__(f"{request}: {reason}" + (f" ({'; '.join(extra)})" if extra else ""))


@dataclass(frozen=True, kw_only=True)
class LinkEvent:
    """Something that happened to the link rather than a sample: a gap the logbook can record.

    Attributes
    ----------
    kind : str
        ``"disconnected"`` (the port failed), ``"reconnected"`` (it is back; ``gap_s`` says how long it was gone).
    time_s : float
        Host wall-clock time of the event (``time.time()``), second.
    gap_s : float
        Length of the gap, second (0 for ``disconnected``).
    detail : str
        What the transport said.
    """

    kind: str
    time_s: float
    gap_s: float = 0.0
    detail: str = ""


@dataclass(frozen=True, kw_only=True)
class BoardStatus:
    """A status sample and the board's mode.

    Attributes
    ----------
    telemetry : Telemetry
    mode : str
        ``off``, ``law``, ``fixed``, ``safe`` or ``ramp_down``.
    outputs_enabled : bool
    bias_dac_code : int
    telemetry_period_s : float
        Period of the unsolicited stream, second (0: off).
    """

    telemetry: Telemetry
    mode: str
    outputs_enabled: bool
    bias_dac_code: int
    telemetry_period_s: float


@dataclass(frozen=True, kw_only=True)
class TripRecord:
    """When a latched fault tripped and the value that tripped it.

    Attributes
    ----------
    fault : str
        Flag name (lower case).
    uptime_s : float
        Board time of the trip, second.
    trip_value : int
        The value that tripped it, in the unit ``docs/protocol.md`` gives for the flag.
    """

    fault: str
    uptime_s: float
    trip_value: int


@dataclass(frozen=True, kw_only=True)
class FaultState:
    """The fault words in names and bits, with a trip record per latched flag."""

    live: list = field(default_factory=list)
    latched: list = field(default_factory=list)
    live_bits: int = 0
    latched_bits: int = 0
    trips: list = field(default_factory=list)


def _opt(value: int, scale: float, absent: int = p.ABSENT_I32):
    return None if value == absent else value * scale


def telemetry_from_wire(report: p.TelemetryReport) -> Telemetry:
    """A wire sample (integers) as a :class:`~compensator.link.messages.Telemetry` in SI units.

    Parameters
    ----------
    report : TelemetryReport or StatusReport
    """
    return Telemetry(
        uptime_s=report.uptime_ms / 1000.0,
        sensor_adc_code=report.sensor_adc_code,
        sensor_temp_c=report.sensor_temp_mdegc / 1000.0,
        bias_set_v=report.bias_set_uv * 1e-6,
        bias_measured_v=_opt(report.bias_measured_uv, 1e-6),
        sipm_current_a=_opt(report.sipm_current_na, 1e-9),
        cooler_current_a=_opt(report.cooler_current_ma, 1e-3),
        hot_side_temp_c=_opt(report.hot_side_temp_mdegc, 1e-3),
        overvoltage_target_v=report.overvoltage_target_uv * 1e-6,
        faults_live=report.faults_live,
        faults_latched=report.faults_latched,
        dark_peak_gain=_opt(report.dark_peak_gain, 1.0, p.ABSENT_U32),
        dark_peak_gain_err=_opt(report.dark_peak_gain_err, 1.0, p.ABSENT_U32),
    )


def _microvolts(volts: float, what: str) -> int:
    if not isinstance(volts, (int, float)) or volts != volts or abs(volts) > 2000.0:
        raise LinkError(f"{what}: needs a finite voltage within +-2000 V, got {volts!r}")
    return int(round(volts * 1e6))


class BoardClient:
    """The host side of the link.

    Parameters
    ----------
    transport : SerialTransport
        An unopened or open transport (see :meth:`open` to build one from a URL).
    retries : int
        Re-sends of a request before :class:`LinkTimeout`.
    turnaround_s : float
        The board's allowance between request and reply, second; the reply
        timeout adds the line time of both frames at the baud rate.
    ramp_down_on_exit : bool
        Leaving the ``with`` block disables the outputs and waits for the ramp down.
    ramp_timeout_s : float
        Longest wait for the ramp down, second.
    first_seq : int, optional
        First sequence number (default: random, so a restarted host does not
        collide with the board's cache of the previous one).
    """

    def __init__(self, transport: SerialTransport, *, retries: int = DEFAULT_RETRIES,
                 turnaround_s: float = DEFAULT_TURNAROUND_S, ramp_down_on_exit: bool = True,
                 ramp_timeout_s: float = 120.0, first_seq: int | None = None):
        self.transport = transport
        self.retries = int(retries)
        self.timeout_s = reply_timeout_s(transport.baud_rate, turnaround_s=turnaround_s)
        self.ramp_down_on_exit = ramp_down_on_exit
        self.ramp_timeout_s = float(ramp_timeout_s)
        self._codec = LinkCodec()
        self._seq = (int.from_bytes(os.urandom(2), "little") if first_seq is None else int(first_seq)) & 0xFFFF
        self._telemetry: deque = deque(maxlen=100_000)
        self._events: deque = deque(maxlen=1000)
        self.retried = 0
        self.corrupt_frames = 0

    @classmethod
    def open(cls, url: str, *, baud_rate: int = DEFAULT_BAUD_RATE, hexdump=None, reconnect_timeout_s: float = 30.0,
             **options) -> "BoardClient":
        """A client on a new transport for ``url`` (opened on entering the ``with`` block or the first request).

        Parameters
        ----------
        url : str
            Device path, pty path or pyserial URL.
        baud_rate : int
            Baud.
        hexdump : callable, optional
            Receives one text line per chunk of traffic.
        reconnect_timeout_s : float
            How long to keep trying after the port fails, second.
        **options
            Passed to :class:`BoardClient`.
        """
        return cls(SerialTransport(url, baud_rate=baud_rate, hexdump=hexdump,
                                   reconnect_timeout_s=reconnect_timeout_s), **options)

    def __enter__(self):
        self.transport.open()
        return self

    def __exit__(self, exc_type, exc, tb):
        try:
            if self.ramp_down_on_exit and self.transport.is_open:
                try:
                    self.shutdown()
                except LinkError:
                    if exc_type is None:
                        raise
        finally:
            self.transport.close()

    # ------------------------------------------------------------------ the exchange
    def _next_seq(self) -> int:
        self._seq = (self._seq + 1) & 0xFFFF
        return self._seq

    def _pump(self, deadline: float):
        """Read until a message arrives or the deadline passes; telemetry is queued, not returned."""
        while True:
            try:
                message = self._codec.next_message()
            except RemoteProtocolError:
                self.corrupt_frames += 1
                continue
            if message is not NEED_DATA:
                if type(message) is p.TelemetryReport:
                    self._telemetry.append(message)
                    continue
                return message
            left = deadline - time.monotonic()
            if left <= 0:
                return None
            data = self.transport.read(min(left, 0.05))
            if data:
                self._codec.receive_data(data)

    def _recover(self, exc: LinkError) -> None:
        """The port failed: record the gap and reconnect (raises when it does not come back)."""
        t0 = time.time()
        self._events.append(LinkEvent(kind="disconnected", time_s=t0, detail=str(exc)))
        self._codec = LinkCodec()
        gap_s = self.transport.reconnect()
        self._events.append(LinkEvent(kind="reconnected", time_s=time.time(), gap_s=gap_s, detail=self.transport.url))

    def request(self, message: p.Message) -> p.Message:
        """Send a request and return its answer (retrying with the same sequence number).

        Parameters
        ----------
        message : Message
            A request; its ``seq`` is replaced by the next sequence number.

        Returns
        -------
        Message
            The report or :class:`~compensator.link.protocol.Reply` answering it.

        Raises
        ------
        BoardRefused
            The board could not parse it (:class:`~compensator.link.protocol.Refusal`).
        LinkTimeout
            No answer after ``retries`` re-sends.
        LinkError
            The port failed and did not come back.
        """
        if not self.transport.is_open:
            self.transport.open()
        seq = self._next_seq()
        wire = self._codec.encode(replace(message, seq=seq))
        want = p.reply_kind(message.KIND)
        last_error = "no answer"
        for attempt in range(self.retries + 1):
            if attempt:
                self.retried += 1
            try:
                self.transport.write(wire)
                deadline = time.monotonic() + self.timeout_s
                while True:
                    answer = self._pump(deadline)
                    if answer is None:
                        break
                    if answer.seq != seq:
                        continue  # a late answer to an earlier request
                    if type(answer) is p.Refusal and answer.request_kind == message.KIND:
                        raise BoardRefused(p.message_name(message), answer.result, value=answer.value)
                    kind = p.reply_kind(answer.request_kind) if type(answer) is p.Reply else answer.KIND
                    if kind == want:
                        return answer
            except BoardRefused:
                raise
            except LinkError as exc:
                last_error = str(exc)
                self._recover(exc)
        raise LinkTimeout(f"{self.transport.url}: {p.message_name(message)}: {last_error} after {self.retries + 1} attempts "
                          f"of {self.timeout_s * 1000:.0f} ms")

    def command(self, message: p.Message, *, detail=None) -> p.Reply:
        """Send a command and return its :class:`~compensator.link.protocol.Reply`, raising on a refusal.

        Parameters
        ----------
        message : Message
            A request answered by a Reply.
        detail : callable, optional
            ``detail(reply) -> str`` describing the reply's value for the refusal message.

        Raises
        ------
        BoardRefused
            The reply's result is not ``OK``.
        """
        reply = self.request(message)
        if reply.result != p.Result.OK:
            raise BoardRefused(p.message_name(message), reply.result, value=reply.value, faults=reply.faults,
                               detail=detail(reply) if detail else "")
        return reply

    # ------------------------------------------------------------------ the API
    def identify(self) -> Identity:
        """Who the board is.

        Returns
        -------
        Identity
        """
        r = self.request(p.Identify())
        digest = (lambda b: "" if not any(b) else b.hex())
        return Identity(firmware_version=r.firmware_version, board_name=r.board_name,
                        protocol_version=r.protocol_version, table_sha256=digest(r.table_sha256),
                        coefficients_sha256=digest(r.coefficients_sha256), serial_number=r.serial_number)

    def status(self) -> BoardStatus:
        """One status sample.

        Returns
        -------
        BoardStatus
        """
        r = self.request(p.ReadStatus())
        try:
            mode = p.Mode(r.mode).name.lower()
        except ValueError:
            mode = f"mode_{r.mode}"
        return BoardStatus(telemetry=telemetry_from_wire(r), mode=mode, outputs_enabled=bool(r.outputs_enabled),
                           bias_dac_code=r.bias_dac_code, telemetry_period_s=r.telemetry_period_ms / 1000.0)

    def faults(self) -> FaultState:
        """The live and latched fault flags with a trip record per latched flag.

        Returns
        -------
        FaultState
        """
        r = self.request(p.ReadFaults())
        trips = [TripRecord(fault=fault_names(1 << b)[0], uptime_s=r.trip_uptime_ms[b] / 1000.0,
                            trip_value=r.trip_value[b]) for b in range(p.FAULT_SLOTS) if r.faults_latched >> b & 1]
        return FaultState(live=fault_names(r.faults_live), latched=fault_names(r.faults_latched),
                          live_bits=r.faults_live, latched_bits=r.faults_latched, trips=trips)

    def set_overvoltage(self, overvoltage_v: float) -> float:
        """Hold the law's overvoltage target (bias from the loaded lookup table).

        Parameters
        ----------
        overvoltage_v : float
            Volt.

        Returns
        -------
        float
            The target the board applied, volt.

        Raises
        ------
        BoardRefused
            Beyond the sensor's overvoltage limits, or no table is loaded.
        """
        r = self.command(p.SetOvervoltage(overvoltage_uv=_microvolts(overvoltage_v, "overvoltage_v")),
                         detail=lambda r: f"limit {r.value * 1e-6:g} V")
        return r.value * 1e-6

    def set_bias(self, bias_v: float) -> float:
        """Hold a fixed bias (no temperature compensation).

        Parameters
        ----------
        bias_v : float
            Volt.

        Returns
        -------
        float
            The bias the board applied, volt.

        Raises
        ------
        BoardRefused
            Above the board's maximum bias or the sensor's maximum overvoltage at the measured temperature.
        """
        r = self.command(p.SetBias(bias_uv=_microvolts(bias_v, "bias_v")),
                         detail=lambda r: f"limit {r.value * 1e-6:g} V")
        return r.value * 1e-6

    def enable(self) -> None:
        """Enable the outputs (the bias ramps to its target at the slew limit).

        Raises
        ------
        BoardRefused
            A latched trip holds the safe state.
        """
        self.command(p.SetOutputs(enabled=1))

    def disable(self) -> None:
        """Disable the outputs: the bias ramps down to the safe code at the slew limit, the cooler stops."""
        self.command(p.SetOutputs(enabled=0))

    def clear_faults(self, mask: int = 0xFFFFFFFF) -> list[str]:
        """Clear latched faults whose cause has gone.

        Parameters
        ----------
        mask : int
            Bits to clear (default all).

        Returns
        -------
        list of str
            The flags still latched (their cause is still there).
        """
        return fault_names(self.command(p.ClearFaults(mask=mask)).value & 0xFFFFFFFF)

    def heartbeat(self) -> None:
        """Feed the board's watchdog."""
        self.command(p.Heartbeat())

    def set_telemetry_period(self, period_s: float) -> None:
        """Stream telemetry every ``period_s`` (0 stops it).

        Parameters
        ----------
        period_s : float
            Second.
        """
        lo_s, hi_s = p.MIN_TELEMETRY_PERIOD_S, p.MAX_TELEMETRY_PERIOD_S
        if not period_s == period_s or not (period_s == 0 or lo_s <= period_s <= hi_s):
            raise LinkError(f"period_s: needs 0 (stop) or {lo_s:g} to {hi_s:g} s (the protocol counts whole "
                            f"milliseconds), got {period_s!r}")
        self.command(p.SetTelemetryPeriod(period_ms=int(round(period_s * 1000))))

    def upload(self, target: p.UploadTarget, image: bytes) -> int:
        """Upload an image in chunks, checked by CRC-32 and applied at once by the board.

        Parameters
        ----------
        target : UploadTarget
            ``TABLE`` or ``COEFFICIENTS``.
        image : bytes
            At most :data:`~compensator.link.protocol.MAX_IMAGE_BYTES`.

        Returns
        -------
        int
            Bytes applied.

        Raises
        ------
        BoardRefused
            Too large, incomplete, corrupted, or rejected by the board.
        """
        crc = zlib.crc32(image)
        target = int(target)
        self.command(p.UploadBegin(target=target, size_bytes=len(image), crc32=crc),
                     detail=lambda r: f"largest image {r.value} bytes")
        for offset in range(0, len(image), p.MAX_CHUNK_BYTES):
            self.command(p.UploadChunk(target=target, offset_bytes=offset,
                                       data=image[offset:offset + p.MAX_CHUNK_BYTES]))
        return self.command(p.UploadCommit(target=target, size_bytes=len(image), crc32=crc)).value

    def shutdown(self) -> BoardStatus:
        """Disable the outputs and wait while the bias ramps down at the board's slew limit.

        Returns
        -------
        BoardStatus
            The status once the ramp has ended.

        Raises
        ------
        LinkTimeout
            The ramp did not end within ``ramp_timeout_s``.
        """
        self.disable()
        deadline = time.monotonic() + self.ramp_timeout_s
        while True:
            state = self.status()
            if state.mode != "ramp_down":
                return state
            if time.monotonic() > deadline:
                raise LinkTimeout(f"{self.transport.url}: the bias still ramps down after {self.ramp_timeout_s:g} s")
            time.sleep(0.02)

    def stream(self, *, duration_s: float | None = None, heartbeat_s: float = 1.0, poll_s: float = 0.1):
        """Telemetry samples as they arrive, with a :class:`LinkEvent` for each disconnection and reconnection.

        The stream must have been started with :meth:`set_telemetry_period`.
        A heartbeat goes out every ``heartbeat_s`` so the board's watchdog
        stays fed while the host only listens.

        Parameters
        ----------
        duration_s : float, optional
            Stop after this long, second (default: forever).
        heartbeat_s : float
            Second.
        poll_s : float
            Longest single wait on the port, second.

        Yields
        ------
        Telemetry or LinkEvent
        """
        end = None if duration_s is None else time.monotonic() + duration_s
        next_beat = time.monotonic() + heartbeat_s
        while end is None or time.monotonic() < end:
            while self._events:
                yield self._events.popleft()
            while self._telemetry:
                yield telemetry_from_wire(self._telemetry.popleft())
            now = time.monotonic()
            try:
                if now >= next_beat:
                    self.heartbeat()
                    next_beat = now + heartbeat_s
                    continue
                wait = min(poll_s, next_beat - now, (end - now) if end is not None else poll_s)
                answer = self._pump(now + max(wait, 0.0))
                del answer  # stray answers to old requests are dropped
            except LinkTimeout:
                continue
            except LinkError as exc:
                self._recover(exc)
        while self._events:
            yield self._events.popleft()
        while self._telemetry:
            yield telemetry_from_wire(self._telemetry.popleft())
