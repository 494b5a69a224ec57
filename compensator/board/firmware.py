"""The simulated board's firmware: protocol dispatcher, modes, interlocks, table and cooler PID (pure; no I/O).

:class:`BoardFirmware` is what a real controller runs, written against the
firmware package's bit-exact references: the lookup table
(:class:`~compensator.firmware.tables.LookupTable`), the fixed-point PID
(:class:`~compensator.firmware.pid.FixedPid`) and the interlocks
(:class:`~compensator.firmware.interlocks.Interlocks`). It is driven from the
outside: :meth:`BoardFirmware.receive` takes bytes from the host and returns
the bytes to send back; :meth:`BoardFirmware.tick` takes the plant's reading
at the end of a control period and returns the DAC code and cooler current
to hold over the next one, plus any telemetry frame due.

Its dispatcher follows the same rules as the generated C
(:mod:`compensator.firmware.link_c`): a retried request (same sequence
number, kind and CRC as the last one) is answered from the cache and not
executed again; an unparsable one gets a
:class:`~compensator.link.protocol.Refusal`; uploads are staged in chunks
and applied only when complete and checked.

The table holds the law at its own overvoltage target; another target adds a
constant bias offset (exact for the constant-overvoltage law, a close
approximation for constant gain).
"""

from __future__ import annotations

import hashlib
import zlib
from dataclasses import dataclass

from compensator.firmware.faults import TRIP_FLAGS, FaultFlag
from compensator.firmware.interlocks import ABSENT, InterlockInputs, InterlockLimits, Interlocks
from compensator.link import protocol as p
from compensator.link.codec import NEED_DATA, LinkCodec, RawFrame, RemoteProtocolError, decode_payload, encode_frame
from compensator.link.codec import encode_payload
from compensator.link.images import ImageError, read_image

__all__ = ["BoardFirmware", "BoardConfig", "FIRMWARE_VERSION"]

#: Version string the simulated firmware reports.
FIRMWARE_VERSION = "sim-1.0"


@dataclass(frozen=True, kw_only=True)
class BoardConfig:
    """What the firmware knows about its hardware (from the profiles).

    Attributes
    ----------
    board_name : str
    serial_number : str
    limits : InterlockLimits
    supply : BiasSupply
        To convert between volts and DAC codes.
    temperature : TemperatureChannel
        To convert the ADC code to a temperature for telemetry and limits.
    current_lsb_a : float or None
        SiPM current per current-ADC code, ampere (``None`` without the channel).
    min_overvoltage_v, max_overvoltage_v : float
        The sensor's overvoltage limits, volt.
    table_overvoltage_v : float
        The overvoltage the loaded table holds, volt.
    cooler_setpoint_code : int
        Temperature ADC code the cooler loop holds (0 without a cooler).
    cooler_amps_per_count : float
        Cooler current per PID output count, ampere.
    dew_point_c : float or None
        Dew point of the enclosure air when the humidity is known, degree Celsius.
    readback : BiasReadback or None
        The bias read-back channel (``None`` without one: no supply-fault check).
    """

    board_name: str
    serial_number: str = ""
    limits: InterlockLimits
    supply: object
    temperature: object
    current_lsb_a: float | None = None
    min_overvoltage_v: float
    max_overvoltage_v: float
    table_overvoltage_v: float
    cooler_setpoint_code: int = 0
    cooler_amps_per_count: float = 1e-3
    dew_point_c: float | None = None
    readback: object | None = None


class BoardFirmware:
    """The board's firmware, one method per event.

    Parameters
    ----------
    config : BoardConfig
    table : LookupTable or None
        The loaded table (``None``: only fixed bias until one is uploaded).
    pid : FixedPidCoefficients or None
        The cooler loop (``None``: cooler off).
    table_image, pid_image : bytes
        The images the table and coefficients came from (their SHA-256 is reported; ``b""`` for none).
    """

    def __init__(self, config: BoardConfig, *, table=None, pid=None, table_image: bytes = b"",
                 pid_image: bytes = b""):
        self.config = config
        self.interlocks = Interlocks(config.limits)
        self.table = table
        self._table_sha = hashlib.sha256(table_image).digest() if table_image else bytes(32)
        self._pid_sha = hashlib.sha256(pid_image).digest() if pid_image else bytes(32)
        self._pid = None
        self._pid_coefficients = None
        if pid is not None:
            self._load_pid(pid)
        self.codec = LinkCodec()
        self.now_ms = 0
        self.last_host_ms = 0
        self.enabled = False
        self.mode = p.Mode.OFF
        self.overvoltage_v = config.table_overvoltage_v
        self.fixed_code = config.limits.safe_dac_code
        self.telemetry_period_ms = 0
        self._next_telemetry_ms = 0
        self._telemetry_seq = 0
        self._last = None  # (seq, kind, crc, reply bytes)
        self._upload = None  # [target, size, crc, bytearray, set of slots]
        self._done = None
        self._reading = None
        self._temp_mdegc = 0
        self._out = None
        self.executed = {}
        self.replays = 0
        self.requests = 0

    # ------------------------------------------------------------------ host side
    def receive(self, data: bytes) -> bytes:
        """Bytes from the host in, bytes for the host out.

        Parameters
        ----------
        data : bytes
            As read from the line (any split, any corruption).

        Returns
        -------
        bytes
            Replies to every complete request, in order.
        """
        self.codec.receive_data(data)
        out = bytearray()
        while True:
            try:
                frame = self.codec.next_frame()
            except RemoteProtocolError:
                continue
            if frame is NEED_DATA:
                return bytes(out)
            out += self._dispatch(frame)

    def _dispatch(self, frame: RawFrame) -> bytes:
        version, kind, seq, payload = frame
        self.last_host_ms = self.now_ms
        self.requests += 1
        if kind >= 0x80:
            return b""
        crc = zlib.crc32(payload)
        if self._last is not None and self._last[:3] == (seq, kind, crc):
            self.replays += 1
            return self._last[3]
        if version != p.PROTOCOL_VERSION:
            return self._refuse(kind, seq, p.Result.BAD_VERSION, p.PROTOCOL_VERSION)
        cls = p.message_type(kind)
        if cls is None or cls not in p.REQUEST_TYPES:
            return self._refuse(kind, seq, p.Result.UNKNOWN_KIND)
        try:
            request = decode_payload(cls, payload, seq=seq, kind=kind)
        except RemoteProtocolError:
            return self._refuse(kind, seq, p.Result.BAD_REQUEST)
        name = p.message_name(cls)
        self.executed[name] = self.executed.get(name, 0) + 1
        answer = getattr(self, "_on_" + name)(request)
        if isinstance(answer, p.Reply):
            answer = p.Reply(seq=seq, request_kind=kind, result=answer.result, faults=answer.faults,
                             value=answer.value)
            if answer.result not in (p.Result.OK,):
                self.interlocks.latch(FaultFlag.REQUEST_REFUSED, self.now_ms, answer.value)
                answer = p.Reply(seq=seq, request_kind=kind, result=answer.result,
                                 faults=answer.faults | FaultFlag.REQUEST_REFUSED, value=answer.value)
            wire = encode_frame(p.reply_kind(kind), seq, encode_payload(answer))
        else:
            wire = encode_frame(answer.KIND, seq, encode_payload(answer))
        self._last = (seq, kind, crc, wire)
        return wire

    def _refuse(self, kind: int, seq: int, result: p.Result, value: int = 0) -> bytes:
        self._last = None
        return encode_frame(p.Kind.REFUSAL, seq, encode_payload(p.Refusal(request_kind=kind, result=result,
                                                                          value=value)))

    # ------------------------------------------------------------------ requests
    def _on_identify(self, _):
        return p.IdentityReport(protocol_version=p.PROTOCOL_VERSION, firmware_version=FIRMWARE_VERSION,
                                board_name=self.config.board_name[:p.MAX_TEXT_BYTES],
                                serial_number=self.config.serial_number[:p.MAX_TEXT_BYTES],
                                table_sha256=self._table_sha, coefficients_sha256=self._pid_sha)

    def _on_read_status(self, _):
        sample = self._sample(p.StatusReport)
        return p.StatusReport(**sample, mode=self._mode_now(), outputs_enabled=int(self.enabled),
                              bias_dac_code=self.interlocks.dac_code, telemetry_period_ms=self.telemetry_period_ms)

    def _on_read_faults(self, _):
        records = [self.interlocks.trip_record(b) for b in range(p.FAULT_SLOTS)]
        return p.FaultReport(faults_live=self.interlocks.faults_live, faults_latched=self.interlocks.faults_latched,
                             trip_uptime_ms=tuple(r[0] for r in records),
                             trip_value=tuple(r[1] for r in records))

    def _tripped(self) -> bool:
        return bool(self.interlocks.faults_latched & TRIP_FLAGS)

    def _on_set_overvoltage(self, q):
        volts = q.overvoltage_uv * 1e-6
        cfg = self.config
        if self.table is None:
            return p.Reply(request_kind=0, result=p.Result.NO_TABLE)
        if volts > cfg.max_overvoltage_v or volts < cfg.min_overvoltage_v:
            limit = cfg.max_overvoltage_v if volts > cfg.max_overvoltage_v else cfg.min_overvoltage_v
            return p.Reply(request_kind=0, result=p.Result.REFUSED_LIMIT, faults=FaultFlag.BIAS_LIMIT,
                           value=int(round(limit * 1e6)))
        self.overvoltage_v = volts
        self.mode = p.Mode.LAW
        return p.Reply(request_kind=0, result=p.Result.OK, value=q.overvoltage_uv)

    def _on_set_bias(self, q):
        lim, supply = self.config.limits, self.config.supply
        volts = q.bias_uv * 1e-6
        code = int(supply.dac_code(volts))
        top = lim.limit_level(self._temp_mdegc)
        top_v = float(lim.level_bias_v(top))
        if self._tripped():
            return p.Reply(request_kind=0, result=p.Result.REFUSED_FAULT, faults=self.interlocks.faults_latched)
        if lim.level(code) > top or volts > top_v + 0.5 * lim.volts_per_level:
            return p.Reply(request_kind=0, result=p.Result.REFUSED_LIMIT, faults=FaultFlag.BIAS_LIMIT,
                           value=int(round(top_v * 1e6)))
        low_v = float(supply.output_range_v()[0])
        if volts < low_v - 0.5 * lim.volts_per_level:
            return p.Reply(request_kind=0, result=p.Result.REFUSED_LIMIT, value=int(round(low_v * 1e6)))
        self.fixed_code = code
        self.mode = p.Mode.FIXED
        return p.Reply(request_kind=0, result=p.Result.OK, value=int(round(float(supply.output_v(code)) * 1e6)))

    def _on_set_outputs(self, q):
        if q.enabled and self._tripped():
            return p.Reply(request_kind=0, result=p.Result.REFUSED_FAULT, faults=self.interlocks.faults_latched)
        self.enabled = bool(q.enabled)
        return p.Reply(request_kind=0, result=p.Result.OK, value=int(self.enabled))

    def _on_clear_faults(self, q):
        remaining = self.interlocks.clear(q.mask)
        return p.Reply(request_kind=0, result=p.Result.OK, value=remaining - (1 << 32) if remaining >> 31 else remaining)

    def _on_heartbeat(self, _):
        return p.Reply(request_kind=0, result=p.Result.OK)

    def _on_set_telemetry_period(self, q):
        self.telemetry_period_ms = q.period_ms
        self._next_telemetry_ms = self.now_ms
        return p.Reply(request_kind=0, result=p.Result.OK, value=min(q.period_ms, (1 << 31) - 1))

    def _on_upload_begin(self, q):
        if q.target not in (p.UploadTarget.TABLE, p.UploadTarget.COEFFICIENTS):
            return p.Reply(request_kind=0, result=p.Result.BAD_REQUEST)
        if not 0 < q.size_bytes <= p.MAX_IMAGE_BYTES:
            return p.Reply(request_kind=0, result=p.Result.REFUSED_LIMIT, value=p.MAX_IMAGE_BYTES)
        self._upload = [q.target, q.size_bytes, q.crc32, bytearray(q.size_bytes), set()]
        return p.Reply(request_kind=0, result=p.Result.OK)

    def _on_upload_chunk(self, q):
        up = self._upload
        end = q.offset_bytes + len(q.data)
        if (up is None or q.target != up[0] or q.offset_bytes % p.MAX_CHUNK_BYTES or q.offset_bytes >= up[1]
                or end > up[1] or (len(q.data) != p.MAX_CHUNK_BYTES and end != up[1])):
            return p.Reply(request_kind=0, result=p.Result.UPLOAD_INCOMPLETE)
        up[3][q.offset_bytes:end] = q.data
        up[4].add(q.offset_bytes // p.MAX_CHUNK_BYTES)
        return p.Reply(request_kind=0, result=p.Result.OK, value=end)

    def _on_upload_commit(self, q):
        up = self._upload
        if up is None and self._done == (q.target, q.size_bytes, q.crc32):
            return p.Reply(request_kind=0, result=p.Result.OK, value=q.size_bytes)
        if up is None or q.target != up[0]:
            return p.Reply(request_kind=0, result=p.Result.UPLOAD_INCOMPLETE)
        if (q.size_bytes, q.crc32) != (up[1], up[2]):
            return p.Reply(request_kind=0, result=p.Result.UPLOAD_CHECKSUM)
        missing = [s for s in range(-(-up[1] // p.MAX_CHUNK_BYTES)) if s not in up[4]]
        if missing:
            return p.Reply(request_kind=0, result=p.Result.UPLOAD_INCOMPLETE, value=missing[0] * p.MAX_CHUNK_BYTES)
        image = bytes(up[3])
        if zlib.crc32(image) != up[2]:
            return p.Reply(request_kind=0, result=p.Result.UPLOAD_CHECKSUM)
        try:
            kind, record = read_image(image)
        except ImageError:
            return p.Reply(request_kind=0, result=p.Result.INVALID_IMAGE)
        wanted = "lookup_table" if up[0] == p.UploadTarget.TABLE else "pid_coefficients"
        if kind != wanted or not self._fits(kind, record):
            return p.Reply(request_kind=0, result=p.Result.INVALID_IMAGE)
        if kind == "lookup_table":
            self.table, self._table_sha = record, hashlib.sha256(image).digest()
        else:
            self._load_pid(record)
            self._pid_sha = hashlib.sha256(image).digest()
        self._done, self._upload = (up[0], up[1], up[2]), None
        return p.Reply(request_kind=0, result=p.Result.OK, value=len(image))

    def _fits(self, kind: str, record) -> bool:
        """An image for another DAC or ADC is refused rather than applied."""
        lim = self.config.limits
        if kind == "lookup_table":
            return record.dac_bits == self.config.supply.dac.bits and \
                record.adc_bits == self.config.temperature.front_end.adc_bits and record.dac_max <= lim.dac_full_scale
        return True

    def _load_pid(self, coefficients) -> None:
        from compensator.firmware.pid import FixedPid

        self._pid_coefficients = coefficients
        self._pid = FixedPid(coefficients)

    # ------------------------------------------------------------------ control
    def _mode_now(self) -> int:
        if self._tripped():
            return p.Mode.SAFE
        if not self.enabled:
            level = self.config.limits.level
            ramping = level(self.interlocks.dac_code) != level(self.config.limits.safe_dac_code)
            return p.Mode.RAMP_DOWN if ramping else p.Mode.OFF
        return self.mode if self.mode != p.Mode.OFF else p.Mode.FIXED

    def _request_code(self, adc_code: int) -> int:
        cfg = self.config
        if self.mode == p.Mode.LAW and self.table is not None:
            code = int(self.table.lookup(adc_code)[0])
            offset = (self.overvoltage_v - cfg.table_overvoltage_v) / cfg.supply.volts_per_code
            return min(max(code + int(round(offset)), 0), cfg.limits.dac_full_scale)
        if self.mode == p.Mode.FIXED:
            return self.fixed_code
        return cfg.limits.safe_dac_code

    def temp_mdegc(self, adc_code: int) -> int:
        """Temperature the firmware derives from an ADC code, milli-degree Celsius (0 for a rail code).

        Parameters
        ----------
        adc_code : int
        """
        t = float(self.config.temperature.temp_c(adc_code))
        return int(round(t * 1000.0)) if t == t else 0

    def tick(self, reading, *, hot_side_fault: bool = False):
        """One control period: interlocks, table, PID; the outputs to hold and any telemetry due.

        Parameters
        ----------
        reading : PlantReading
            The plant's state at the end of the last period.
        hot_side_fault : bool
            Injected fault: the hot-side sensor reads above its limit.

        Returns
        -------
        dac_code : int
        cooler_current_a : float
        telemetry : bytes
            A framed :class:`~compensator.link.protocol.TelemetryReport`, or ``b""``.
        """
        cfg, lim = self.config, self.config.limits
        self._reading = reading
        self._temp_mdegc = self.temp_mdegc(reading.sensor_adc_code)
        current_na = ABSENT
        if reading.current_adc_code is not None and cfg.current_lsb_a:
            current_na = min(int(round(reading.current_adc_code * cfg.current_lsb_a * 1e9)), (1 << 31) - 1)
        hot = ABSENT
        if reading.hot_side_temp_c is not None:
            hot = int(round(reading.hot_side_temp_c * 1000.0))
            if hot_side_fault:
                hot = lim.hot_side_max_mdegc + 5000
        cooler_request = 0
        if self._pid is not None and self.enabled:
            cooler_request = self._pid.step(cfg.cooler_setpoint_code, reading.sensor_adc_code)
        dew = ABSENT if cfg.dew_point_c is None else int(round(cfg.dew_point_c * 1000.0))
        # the read-back channel's ADC reads the supply output held over the last tick
        readback = ABSENT if cfg.readback is None else int(cfg.readback.adc_code(reading.supply_v))
        out = self.interlocks.step(InterlockInputs(
            now_ms=self.now_ms & 0xFFFFFFFF, adc_code=reading.sensor_adc_code, temp_mdegc=self._temp_mdegc,
            request_dac_code=self._request_code(reading.sensor_adc_code), outputs_enabled=int(self.enabled),
            last_host_ms=self.last_host_ms & 0xFFFFFFFF, sipm_current_na=current_na, hot_side_mdegc=hot,
            cold_side_mdegc=self._temp_mdegc if hot != ABSENT else ABSENT, dew_point_mdegc=dew,
            cooler_request=cooler_request, bias_readback_code=readback))
        if out.state != 0 and self._pid is not None:
            self._pid.reset(0)
        self._out = out
        telemetry = b""
        if self.telemetry_period_ms and self.now_ms >= self._next_telemetry_ms:
            self._next_telemetry_ms = self.now_ms + self.telemetry_period_ms
            report = p.TelemetryReport(seq=self._telemetry_seq, **self._sample(p.TelemetryReport))
            self._telemetry_seq = (self._telemetry_seq + 1) & 0xFFFF
            telemetry = encode_frame(p.Kind.TELEMETRY, report.seq, encode_payload(report))
        self.now_ms += lim.tick_ms
        return out.dac_code, out.cooler_drive * cfg.cooler_amps_per_count, telemetry

    def _sample(self, cls) -> dict:
        r = self._reading
        cfg = self.config
        sat = (lambda v: max(-(1 << 31) + 1, min((1 << 31) - 1, int(round(v)))))
        if r is None:
            return dict(uptime_ms=self.now_ms, sensor_adc_code=0, sensor_temp_mdegc=0,
                        bias_set_uv=sat(float(cfg.supply.output_v(self.interlocks.dac_code)) * 1e6),
                        overvoltage_target_uv=sat(self.overvoltage_v * 1e6),
                        faults_live=self.interlocks.faults_live, faults_latched=self.interlocks.faults_latched)
        return dict(
            uptime_ms=self.now_ms, sensor_adc_code=r.sensor_adc_code, sensor_temp_mdegc=self._temp_mdegc,
            bias_set_uv=sat(float(cfg.supply.output_v(self.interlocks.dac_code)) * 1e6),
            bias_measured_uv=sat(r.bias_v * 1e6),
            sipm_current_na=ABSENT if r.current_adc_code is None or not cfg.current_lsb_a
            else sat(r.current_adc_code * cfg.current_lsb_a * 1e9),
            cooler_current_ma=ABSENT if r.hot_side_temp_c is None else sat(r.cooler_current_a * 1e3),
            hot_side_temp_mdegc=ABSENT if r.hot_side_temp_c is None else sat(r.hot_side_temp_c * 1e3),
            overvoltage_target_uv=sat(self.overvoltage_v * 1e6),
            faults_live=self.interlocks.faults_live, faults_latched=self.interlocks.faults_latched,
            dark_peak_gain=p.ABSENT_U32 if r.dark_peak_gain is None else min(int(round(r.dark_peak_gain)),
                                                                           p.ABSENT_U32 - 1),
            dark_peak_gain_err=p.ABSENT_U32 if r.dark_peak_gain_err is None else min(
                int(round(r.dark_peak_gain_err)), p.ABSENT_U32 - 1))
