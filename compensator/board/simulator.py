"""The simulated controller board on a pseudo-terminal: firmware reference + field plant + fault injection.

:func:`build_board` assembles a :class:`~compensator.board.firmware.BoardFirmware`
and a :class:`~compensator.sim.plant.FieldPlant` from profiles or a scenario;
:class:`SimulatedBoard` runs them in real time (or faster, by a time-scale
factor) behind a pseudo-terminal made with ``os.openpty``. The host opens
the terminal with pyserial like any serial port.

The board publishes a stable path, a symbolic link in a private folder that
points at the current terminal, so that an injected disconnection (the
terminal closed and a new one made, as when a USB adapter is unplugged and
plugged in again) can be survived by a host that reopens the same path.

Fault injection (:class:`LineFaults`): each byte in either direction is
replaced by a random one with probability ``corrupt_rate``; each outgoing
frame and each incoming read is dropped with probability ``drop_rate``;
replies leave ``delay_ms`` late; the terminal goes away every
``disconnect_every_s`` seconds for ``disconnect_s``. Plant faults: the
temperature sensor open or short, the cooler's hot side over temperature,
from a chosen board time on. Everything random is seeded.

The heartbeat watchdog counts host silence in wall-clock time (its timeout
is scaled by the time-scale factor), so a host that polls once a second
keeps a board running days of weather in minutes alive.
"""

from __future__ import annotations

import dataclasses
import errno
import os
import random
import select
import shutil
import tempfile
import time
import tty
from collections import deque
from dataclasses import dataclass, replace

from compensator.board.firmware import BoardConfig, BoardFirmware
from compensator.errors import ModelError
from compensator.firmware.interlock_limits import build_interlock_limits
from compensator.firmware.interlocks import DEFAULT_HEARTBEAT_TIMEOUT_S
from compensator.link.images import pid_image, table_image

__all__ = ["LineFaults", "PlantFaults", "SimulatedBoard", "build_board", "MAX_CATCH_UP_TICKS"]

#: Ticks run at most per pass of the loop when the simulation falls behind the wall clock.
MAX_CATCH_UP_TICKS = 200


@dataclass(frozen=True, kw_only=True)
class LineFaults:
    """Faults injected on the line.

    Attributes
    ----------
    corrupt_rate : float
        Probability that a byte (either direction) is replaced by a random one.
    drop_rate : float
        Probability that an outgoing frame or an incoming read is lost.
    delay_ms : float
        Extra delay before each reply leaves, millisecond.
    disconnect_every_s : float
        Wall-clock period of simulated unplugs, second (0: never).
    disconnect_s : float
        How long the board stays unplugged, second.
    seed : int
    """

    corrupt_rate: float = 0.0
    drop_rate: float = 0.0
    delay_ms: float = 0.0
    disconnect_every_s: float = 0.0
    disconnect_s: float = 0.5
    seed: int = 1

    def __post_init__(self):
        for key in ("corrupt_rate", "drop_rate"):
            value = getattr(self, key)
            if not 0.0 <= value <= 1.0:
                raise ModelError(f"must be a probability between 0 and 1, got {value!r}", key=key)
        for key in ("delay_ms", "disconnect_every_s", "disconnect_s"):
            value = getattr(self, key)
            if not (value == value and 0.0 <= value < 1e9):
                raise ModelError(f"must be a non-negative number, got {value!r}", key=key)


@dataclass(frozen=True, kw_only=True)
class PlantFaults:
    """Faults injected into the plant.

    Attributes
    ----------
    sensor : {"open", "short"} or None
        Temperature sensor fault.
    hot_side : bool
        The cooler's hot side reads above its limit.
    supply : {"stuck", "high"} or None
        The bias supply stops following its DAC: ``"stuck"`` holds the
        output it had when the fault began, ``"high"`` goes to its highest
        output (a regulator failed high). Only a board with a bias read-back
        channel can notice (``SUPPLY_FAULT``).
    at_s : float
        Board time from which they hold, second.
    """

    sensor: str | None = None
    hot_side: bool = False
    supply: str | None = None
    at_s: float = 0.0

    def __post_init__(self):
        if self.sensor not in (None, "open", "short"):
            raise ModelError(f"must be open or short, got {self.sensor!r}", key="sensor")
        if self.supply not in (None, "stuck", "high"):
            raise ModelError(f"must be stuck or high, got {self.supply!r}", key="supply")


def build_board(sipm, board, thermal=None, *, scenario=None, overvoltage_v: float | None = None,
                ambient_temp_c: float | None = None, heartbeat_timeout_s: float = DEFAULT_HEARTBEAT_TIMEOUT_S,
                time_scale: float = 1.0, seed: int = 1, serial_number: str = "SIM-0001"):
    """The firmware and the plant of a simulated board.

    Parameters
    ----------
    sipm, board : SipmProfile, BoardProfile
        Ignored when ``scenario`` is given (it names its own).
    thermal : ThermalProfile, optional
        A cooler under the sensor, run by the cooler PID.
    scenario : ScenarioProfile, optional
        Weather, thermal path and profiles of a field scenario.
    overvoltage_v : float, optional
        The law's target (default: midway between the sensor's limits).
    ambient_temp_c : float, optional
        Constant outdoor temperature without a scenario (default 20 C, or the cooler profile's).
    heartbeat_timeout_s : float
        Wall-clock host silence that trips the safe state, second (0: off).
    time_scale : float
        Board seconds per wall-clock second.
    seed : int
    serial_number : str

    Returns
    -------
    firmware : BoardFirmware
    plant : FieldPlant
    findings : list of Finding
        Warnings about the safe state.
    """
    from compensator.law.safety import safe_bias
    from compensator.physics.thermal import dew_point_c
    from compensator.sim.environment import Weather
    from compensator.sim.plant import FieldPlant
    from compensator.sim.setup import prepare, setup_from_profiles

    if not (time_scale == time_scale and 0 < time_scale <= 1e6):
        raise ModelError(f"must be a positive factor up to 1e6, got {time_scale!r}", key="time_scale")
    if scenario is not None:
        strategies = ("compensated", "compensated_cooled") if scenario_has_cooler(scenario) else ("compensated",)
        setup = prepare(scenario, strategies=strategies)
        seed = scenario.section("run")["seed"]
    else:
        dev = sipm.device
        ov = overvoltage_v if overvoltage_v is not None else 0.5 * (dev.min_overvoltage_v + dev.max_overvoltage_v)
        if ambient_temp_c is None:
            ambient_temp_c = thermal.cooler.ambient_temp_c if thermal is not None else 20.0
        strategies = ("compensated", "compensated_cooled") if thermal is not None else ("compensated",)
        setup = setup_from_profiles(sipm, board, thermal_profile=thermal, overvoltage_v=ov,
                                    weather=Weather(mean_temp_c=float(ambient_temp_c)), duration_s=0.0,
                                    strategies=strategies, seed=seed)
    plant = FieldPlant(setup, seed=seed)
    cooler = setup.cooler
    limits = build_interlock_limits(setup.sipm, setup.board, cooler,
                                    heartbeat_timeout_s=heartbeat_timeout_s * time_scale)
    # the safe state: the code whose worst-case output lies furthest below the coldest breakdown (law.safety)
    safe = safe_bias(setup.law, setup.board)
    limits = dataclasses.replace(limits, safe_dac_code=int(safe.dac_code), safe_margin_v=float(safe.margin_v))
    dew = None
    if cooler is not None and cooler.ambient_relative_humidity_pct > 0:
        dew = float(dew_point_c(cooler.ambient_temp_c, cooler.ambient_relative_humidity_pct))
    sense = setup.board.current_sense
    config = BoardConfig(
        board_name=setup.board.name, serial_number=serial_number, limits=limits, supply=setup.law.supply,
        temperature=setup.board.temperature, current_lsb_a=None if sense is None else float(sense.lsb_a),
        min_overvoltage_v=setup.sipm.min_overvoltage_v, max_overvoltage_v=setup.sipm.max_overvoltage_v,
        table_overvoltage_v=float(setup.law.overvoltage_v), cooler_setpoint_code=int(setup.cooler_setpoint_code),
        cooler_amps_per_count=float(setup.pid.output_per_count) if setup.pid is not None else 1e-3, dew_point_c=dew,
        readback=setup.board.bias_readback)
    firmware = BoardFirmware(config, table=setup.table, pid=setup.pid if plant.cooled else None,
                             table_image=table_image(setup.table),
                             pid_image=pid_image(setup.pid) if setup.pid is not None and plant.cooled else b"")
    return firmware, plant, list(safe.findings)


def scenario_has_cooler(scenario) -> bool:
    """Whether a scenario names a thermal profile.

    Parameters
    ----------
    scenario : ScenarioProfile
    """
    return getattr(scenario, "thermal", None) is not None


class SimulatedBoard:
    """A board behind a pseudo-terminal.

    Parameters
    ----------
    firmware : BoardFirmware
    plant : FieldPlant
    time_scale : float
        Board seconds per wall-clock second.
    line : LineFaults, optional
    plant_faults : PlantFaults, optional
    clock : callable, optional
        Wall clock in seconds (``time.monotonic``).

    Attributes
    ----------
    path : str
        The stable path the host opens (a symbolic link to the present terminal).
    ticks : int
        Control ticks run so far.
    """

    def __init__(self, firmware: BoardFirmware, plant, *, time_scale: float = 1.0, line: LineFaults | None = None,
                 plant_faults: PlantFaults | None = None, clock=time.monotonic):
        self.firmware = firmware
        self.plant = plant
        self.time_scale = float(time_scale)
        self.line = line or LineFaults()
        self.plant_faults = plant_faults or PlantFaults()
        self._stuck_code = None
        self._clock = clock
        self._rng = random.Random(self.line.seed)
        self._dir = tempfile.mkdtemp(prefix="compensator-board-")
        self.path = os.path.join(self._dir, "port")
        self._master = self._slave = None
        self._pending = deque()   # (due wall time, bytes)
        self.ticks = 0
        self.unplugs = 0
        self._stop = False
        self._tick_wall_s = plant.tick_s / self.time_scale
        self._last_host_wall = clock()
        self._plug()

    # ------------------------------------------------------------------ the terminal
    def _plug(self) -> None:
        master, slave = os.openpty()
        tty.setraw(slave)
        os.set_blocking(master, False)
        self._master, self._slave = master, slave
        tmp = self.path + ".new"
        if os.path.lexists(tmp):
            os.unlink(tmp)
        os.symlink(os.ttyname(slave), tmp)
        os.replace(tmp, self.path)

    def _unplug(self) -> None:
        for fd in (self._master, self._slave):
            if fd is not None:
                try:
                    os.close(fd)
                except OSError:
                    pass
        self._master = self._slave = None
        self._pending.clear()
        if os.path.lexists(self.path):
            os.unlink(self.path)
        self.unplugs += 1

    @property
    def device(self) -> str:
        """The present terminal device (``/dev/pts/N``)."""
        return os.readlink(self.path)

    def stop(self) -> None:
        """Ask :meth:`run` to return at its next pass (safe from a signal handler)."""
        self._stop = True

    def close(self) -> None:
        """Close the terminal and remove the private folder."""
        self._unplug()
        shutil.rmtree(self._dir, ignore_errors=True)

    def __enter__(self):
        return self

    def __exit__(self, *exc):
        self.close()

    # ------------------------------------------------------------------ the line
    def _corrupt(self, data: bytes) -> bytes:
        rate = self.line.corrupt_rate
        if not rate:
            return data
        out = bytearray(data)
        for i in range(len(out)):
            if self._rng.random() < rate:
                out[i] = self._rng.randrange(256)
        return bytes(out)

    def _send(self, data: bytes, now: float, *, reply: bool) -> None:
        if not data or self._master is None:
            return
        if self.line.drop_rate and self._rng.random() < self.line.drop_rate:
            return
        due = now + (self.line.delay_ms / 1000.0 if reply else 0.0)
        self._pending.append((due, self._corrupt(data)))

    def _flush(self, now: float) -> None:
        while self._pending and self._pending[0][0] <= now and self._master is not None:
            due, data = self._pending[0]
            try:
                written = os.write(self._master, data)
            except BlockingIOError:
                return
            except OSError:
                self._pending.clear()
                return
            if written < len(data):
                self._pending[0] = (due, data[written:])
                return
            self._pending.popleft()

    def _read(self, now: float) -> None:
        try:
            data = os.read(self._master, 4096)
        except BlockingIOError:
            return
        except OSError as exc:
            if exc.errno == errno.EIO:  # no host has the terminal open
                return
            raise
        if not data:
            return
        if self.line.drop_rate and self._rng.random() < self.line.drop_rate:
            return
        before = self.firmware.requests
        self._send(self.firmware.receive(self._corrupt(data)), now, reply=True)
        if self.firmware.requests != before:
            self._last_host_wall = now

    # ------------------------------------------------------------------ time
    def step_ticks(self, count: int, now: float) -> None:
        """Run ``count`` control ticks of firmware and plant.

        Parameters
        ----------
        count : int
        now : float
            Wall-clock time, second (for the telemetry's departure).
        """
        faults = self.plant_faults
        fw = self.firmware
        silence_ms = int(round((now - self._last_host_wall) * 1000.0 * self.time_scale))
        for _ in range(count):
            # the watchdog counts wall-clock silence (scaled to board time), even when the simulation lags
            fw.last_host_ms = max(0, fw.now_ms - silence_ms)
            reading = self.plant.reading
            active = reading.time_s >= faults.at_s
            if faults.sensor is not None:
                self.plant.inject_sensor_fault(faults.sensor if active else None)
            dac, cooler_a, telemetry = self.firmware.tick(reading, hot_side_fault=faults.hot_side and active)
            self.plant.step(self._supply_code(dac, active), cooler_current_a=cooler_a)
            self.ticks += 1
            if telemetry:
                self._send(telemetry, now, reply=False)

    def _supply_code(self, dac_code: int, active: bool) -> int:
        """The DAC code the supply acts on: the firmware's, unless an injected supply fault ignores it."""
        kind = self.plant_faults.supply
        if kind is None or not active:
            return dac_code
        if self._stuck_code is None:
            lim = self.firmware.config.limits
            self._stuck_code = self.plant.reading.dac_code if kind == "stuck" else lim.code(lim.dac_full_scale)
        return self._stuck_code

    def run(self, *, duration_s: float | None = None) -> None:
        """Serve the host until :meth:`stop` (or ``duration_s`` of wall-clock time).

        Parameters
        ----------
        duration_s : float, optional
            Second.
        """
        start = self._clock()
        next_tick = start
        next_unplug = start + self.line.disconnect_every_s if self.line.disconnect_every_s else None
        replug_at = None
        while not self._stop:
            now = self._clock()
            if duration_s is not None and now - start >= duration_s:
                break
            if next_unplug is not None and now >= next_unplug and self._master is not None:
                self._unplug()
                replug_at = now + self.line.disconnect_s
                next_unplug = now + self.line.disconnect_every_s
            if replug_at is not None and now >= replug_at:
                self._plug()
                replug_at = None
                self._last_host_wall = now  # a fresh line: the watchdog starts over
            due = min(MAX_CATCH_UP_TICKS, int((now - next_tick) / self._tick_wall_s) + 1) if now >= next_tick else 0
            if due:
                self.step_ticks(due, now)
                next_tick += due * self._tick_wall_s
                if now - next_tick > 1.0:   # too far behind: run as fast as we can from here on
                    next_tick = now
            self._flush(now)
            wait = max(0.0, min(next_tick - self._clock(), 0.05))
            if self._pending:
                wait = min(wait, max(0.0, self._pending[0][0] - self._clock()))
            if self._master is None:
                time.sleep(wait)
                continue
            try:
                ready, _, _ = select.select([self._master], [], [], wait)
            except InterruptedError:
                continue
            if ready:
                self._read(self._clock())


def with_line(board: SimulatedBoard, **changes) -> None:
    """Change the line faults of a running board (tests turn corruption on and off).

    Parameters
    ----------
    board : SimulatedBoard
    **changes
        Fields of :class:`LineFaults`.
    """
    board.line = replace(board.line, **changes)
