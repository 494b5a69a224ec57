"""The simulated board over a real pty with pyserial: commands, refusals, faults, heartbeat loss, uploads, 1 % corruption."""

from __future__ import annotations

import contextlib
import hashlib
import threading
import time

import pytest
from hypothesis import settings
from hypothesis import strategies as st
from hypothesis.stateful import RuleBasedStateMachine, initialize, invariant, rule

from compensator.board import LineFaults, PlantFaults, SimulatedBoard, build_board
from compensator.firmware.faults import FaultFlag
from compensator.link import protocol as p
from compensator.link.client import BoardClient, BoardRefused, LinkEvent, LinkTimeout
from compensator.link.images import pid_image, table_image
from compensator.link.messages import Telemetry
from compensator.physics.sipm import breakdown_v


@contextlib.contextmanager
def running(sipm, board, thermal=None, *, line=None, plant_faults=None, time_scale=20.0, heartbeat_timeout_s=0.0,
            ambient_temp_c=15.0):
    firmware, plant, _ = build_board(sipm, board, thermal, overvoltage_v=3.0, ambient_temp_c=ambient_temp_c,
                                     heartbeat_timeout_s=heartbeat_timeout_s, time_scale=time_scale, seed=3)
    sim = SimulatedBoard(firmware, plant, time_scale=time_scale, line=line, plant_faults=plant_faults)
    thread = threading.Thread(target=sim.run, daemon=True)
    thread.start()
    try:
        yield sim
    finally:
        sim.stop()
        thread.join(5.0)
        sim.close()


def _client(sim, **options):
    """A client with retries to spare: the simulated board is a Python thread that a loaded machine may stall."""
    return BoardClient.open(sim.path, retries=options.pop("retries", 30), **options)


def _wait_until(predicate, timeout_s=10.0):
    end = time.monotonic() + timeout_s
    while time.monotonic() < end:
        value = predicate()
        if value:
            return value
        time.sleep(0.02)
    raise AssertionError("condition not reached")


def test_law_holds_the_overvoltage_against_the_physics(sipm_a, board_ntc):
    with running(sipm_a, board_ntc, time_scale=60.0) as sim, _client(sim) as board:
        ident = board.identify()
        assert ident.board_name == "hut-board-ntc" and ident.protocol_version == 1
        assert ident.table_sha256 == hashlib.sha256(table_image(sim.firmware.table)).hexdigest()
        assert board.set_overvoltage(3.0) == pytest.approx(3.0)
        board.enable()
        _wait_until(lambda: board.status().bias_dac_code == sim.firmware.interlocks.dac_code and
                    abs(board.status().telemetry.overvoltage_target_v - 3.0) < 1e-9 and
                    sim.plant.reading.time_s > 40)
        s = board.status()
        reading = sim.plant.reading
        # independent check: bias at the SiPM minus the breakdown at the die temperature (physics.sipm)
        overvoltage = s.telemetry.bias_measured_v - float(breakdown_v(sipm_a.device, reading.die_temp_c))
        assert overvoltage == pytest.approx(3.0, abs=0.03)
        assert s.telemetry.sensor_temp_c == pytest.approx(reading.sensor_temp_c, abs=0.1)
        assert s.mode == "law" and s.outputs_enabled
        assert s.telemetry.bias_set_v == pytest.approx(float(board_ntc.supply.output_v(s.bias_dac_code)), abs=1e-5)
    # leaving the block ramped the bias down at the slew limit to the safe code
    assert sim.firmware.interlocks.dac_code == sim.firmware.config.limits.safe_dac_code


def test_unsafe_requests_are_refused_with_the_limit(sipm_a, board_ntc):
    with running(sipm_a, board_ntc) as sim, _client(sim, ramp_down_on_exit=False) as board:
        temp_c = board.status().telemetry.sensor_temp_c
        ceiling_v = float(breakdown_v(sipm_a.device, temp_c)) + sipm_a.device.max_overvoltage_v  # physics.sipm
        with pytest.raises(BoardRefused) as info:
            board.set_bias(ceiling_v + 0.05)
        assert info.value.result == p.Result.REFUSED_LIMIT
        limit_v = info.value.value * 1e-6
        assert ceiling_v - 0.1 < limit_v <= ceiling_v
        assert board.set_bias(ceiling_v - 0.2) == pytest.approx(ceiling_v - 0.2, abs=board_ntc.supply.lsb_v)
        with pytest.raises(BoardRefused) as info:
            board.set_overvoltage(7.5)            # hut-sipm-a max_overvoltage_v 7
        assert info.value.value == 7_000_000
        with pytest.raises(BoardRefused) as info:
            board.set_overvoltage(0.5)            # min_overvoltage_v 1
        assert info.value.value == 1_000_000
        assert "request_refused" in board.faults().latched
        assert board.clear_faults() == []
        assert sim.firmware.executed["set_bias"] == 2 and sim.firmware.executed["set_overvoltage"] == 2


def test_heartbeat_loss_reaches_the_safe_state(sipm_a, board_ntc):
    with running(sipm_a, board_ntc, heartbeat_timeout_s=0.3) as sim, \
            _client(sim, ramp_down_on_exit=False) as board:
        board.set_bias(27.0)
        board.enable()
        _wait_until(lambda: board.status().bias_dac_code == int(board_ntc.supply.dac_code(27.0)))
        time.sleep(0.6)                              # the host falls silent for twice the timeout
        s = board.status()
        assert s.mode == "safe" and "heartbeat_lost" in board.faults().latched
        assert s.bias_dac_code == sim.firmware.config.limits.safe_dac_code
        trip = next(t for t in board.faults().trips if t.fault == "heartbeat_lost")
        assert trip.trip_value > 300 * 20                 # silence in board milliseconds (time scale 20)
        with pytest.raises(BoardRefused) as info:
            board.enable()
        assert info.value.result == p.Result.REFUSED_FAULT
        # live flags are re-evaluated at the next tick after the host spoke again; then the clear takes
        _wait_until(lambda: board.clear_faults() == [], timeout_s=2.0)
        board.enable()
        assert board.status().mode == "fixed"


@pytest.mark.parametrize("fault, flag", [("open", "sensor_open"), ("short", "sensor_short")])
def test_sensor_fault_reaches_the_safe_state(sipm_a, board_ntc, fault, flag):
    with running(sipm_a, board_ntc, plant_faults=PlantFaults(sensor=fault, at_s=5.0)) as sim, \
            _client(sim, ramp_down_on_exit=False) as board:
        board.set_bias(27.0)
        board.enable()
        _wait_until(lambda: board.status().mode == "safe")
        state = board.faults()
        assert flag in state.latched
        rail = board_ntc.temperature.front_end.full_scale_code if fault == "open" else 0
        assert next(t for t in state.trips if t.fault == flag).trip_value == rail
        assert board.status().bias_dac_code == sim.firmware.config.limits.safe_dac_code
        assert board.clear_faults() == [flag]      # the cause is still there


def test_hot_side_fault_and_cooler(sipm_a, board_ntc, cooler):
    # ambient 25 C: the cold plate stays above the dew point (13.9 C at 25 C, 50 % RH) plus the 3 K margin
    with running(sipm_a, board_ntc, cooler, plant_faults=PlantFaults(hot_side=True, at_s=30.0),
                 ambient_temp_c=25.0) as sim, \
            _client(sim, ramp_down_on_exit=False) as board:
        board.set_overvoltage(3.0)
        board.enable()
        _wait_until(lambda: (board.status().telemetry.cooler_current_a or 0) != 0)
        _wait_until(lambda: board.status().mode == "safe")
        assert "hot_side_over_temp" in board.faults().latched
        # the sample reports the current held over the last tick: zero from the tick after the trip on
        _wait_until(lambda: board.status().telemetry.cooler_current_a == 0.0, timeout_s=2.0)
        value = next(t for t in board.faults().trips if t.fault == "hot_side_over_temp").trip_value
        assert value == 70_000 + 5000             # hut-cooler max_hot_temp_c 70 C plus the injected 5 K


def test_uploads_are_checked_and_atomic(sipm_a, board_ntc, cooler):
    with running(sipm_a, board_ntc, cooler) as sim, _client(sim, ramp_down_on_exit=False) as board:
        image = table_image(sim.firmware.table)
        assert board.upload(p.UploadTarget.TABLE, image) == len(image)
        assert board.identify().table_sha256 == hashlib.sha256(image).hexdigest()
        coeff = pid_image(sim.plant.setup.pid)
        with pytest.raises(BoardRefused) as info:
            board.upload(p.UploadTarget.TABLE, coeff)      # coefficients are not a table
        assert info.value.result == p.Result.INVALID_IMAGE
        with pytest.raises(BoardRefused):
            board.upload(p.UploadTarget.COEFFICIENTS, b"{not json" + bytes(400))
        assert board.identify().table_sha256 == hashlib.sha256(image).hexdigest()   # unchanged
        assert board.upload(p.UploadTarget.COEFFICIENTS, coeff) == len(coeff)
        assert board.identify().coefficients_sha256 == hashlib.sha256(coeff).hexdigest()
        # a commit before every chunk arrived is refused and names the first missing offset
        board.command(p.UploadBegin(target=1, size_bytes=500, crc32=0))
        board.command(p.UploadChunk(target=1, offset_bytes=0, data=bytes(192)))
        with pytest.raises(BoardRefused) as info:
            board.command(p.UploadCommit(target=1, size_bytes=500, crc32=0))
        assert info.value.result == p.Result.UPLOAD_INCOMPLETE and info.value.value == 192


def test_one_percent_corruption_every_command_succeeds_or_fails_never_twice(sipm_a, board_ntc):
    line = LineFaults(corrupt_rate=0.01, seed=11)
    with running(sipm_a, board_ntc, line=line) as sim, \
            _client(sim, ramp_down_on_exit=False, first_seq=1) as board:
        supply = board_ntc.supply
        issued = ok = failed = 0
        for k in range(100):
            volts = 26.0 + 0.01 * k
            issued += 1
            try:
                applied = board.set_bias(volts)
            except (LinkTimeout, BoardRefused):
                failed += 1
                continue
            ok += 1
            assert applied == pytest.approx(float(supply.output_v(supply.dac_code(volts))), abs=1e-6)
            assert sim.firmware.fixed_code == int(supply.dac_code(volts))   # executed as asked, not another value
        executed = sim.firmware.executed["set_bias"]
        assert ok + failed == issued and ok >= 95
        assert ok <= executed <= issued                    # a retry is answered, never executed again
        assert board.retried > 0 and sim.firmware.replays > 0
        assert sim.firmware.codec.frames_bad > 0


def test_reconnects_after_an_unplug(sipm_a, board_ntc):
    line = LineFaults(disconnect_every_s=0.6, disconnect_s=0.2)
    with running(sipm_a, board_ntc, line=line) as sim, \
            _client(sim, ramp_down_on_exit=False, reconnect_timeout_s=5.0) as board:
        board.set_telemetry_period(0.5)
        items = list(board.stream(duration_s=1.6, heartbeat_s=0.1))
        events = [i for i in items if isinstance(i, LinkEvent)]
        assert any(e.kind == "reconnected" and e.gap_s > 0 for e in events)
        assert any(isinstance(i, Telemetry) for i in items)
        assert sim.unplugs >= 1
        board.set_telemetry_period(0)
        assert board.status().telemetry.uptime_s > 0


# ---------------------------------------------------------------- stateful

class ClientAgainstBoard(RuleBasedStateMachine):
    """Random command sequences with 0.5 % line corruption: the board's state always matches the model."""

    sipm = board_profile = None

    @initialize()
    def start(self):
        self._ctx = running(self.sipm, self.board_profile, line=LineFaults(corrupt_rate=0.005, seed=5))
        self.sim = self._ctx.__enter__()
        self.client = _client(self.sim, ramp_down_on_exit=False, first_seq=1)
        self.client.__enter__()
        self.enabled = False
        self.fixed_code = None

    def _try(self, call):
        try:
            return True, call()
        except LinkTimeout:
            return False, None

    @rule(volts=st.floats(20.0, 40.0))
    def set_bias(self, volts):
        temp_c = self.sim.firmware._temp_mdegc / 1000.0
        ceiling = float(breakdown_v(self.sipm.device, temp_c)) + self.sipm.device.max_overvoltage_v
        try:
            done, _ = self._try(lambda: self.client.set_bias(volts))
        except BoardRefused as exc:
            assert volts > ceiling - 0.1 or volts < 25.2   # hut-board-ntc's lowest output is 25.19 V
            assert exc.result == p.Result.REFUSED_LIMIT
            return
        if done:
            assert volts <= ceiling + 1e-6
            self.fixed_code = int(self.board_profile.supply.dac_code(volts))
        else:
            self.fixed_code = None   # lost every answer: the board may or may not have it

    @rule(on=st.booleans())
    def outputs(self, on):
        done, _ = self._try(self.client.enable if on else self.client.disable)
        self.enabled = on if done else None

    @invariant()
    def board_matches_model(self):
        if getattr(self, "sim", None) is None:
            return
        fw = self.sim.firmware
        if self.enabled is not None:
            assert fw.enabled == self.enabled
        if self.fixed_code is not None:
            assert fw.fixed_code == self.fixed_code
        assert not fw.interlocks.faults_latched & ~(FaultFlag.REQUEST_REFUSED | FaultFlag.BIAS_LIMIT)

    def teardown(self):
        if getattr(self, "sim", None) is not None:
            self.client.__exit__(None, None, None)
            self._ctx.__exit__(None, None, None)


def test_stateful_client_against_board(sipm_a, board_ntc):
    ClientAgainstBoard.sipm, ClientAgainstBoard.board_profile = sipm_a, board_ntc
    machine = ClientAgainstBoard.TestCase
    machine.settings = settings(max_examples=4, stateful_step_count=12, deadline=None, derandomize=True,
                                database=None)
    machine().runTest()


def test_board_from_a_scenario(tmp_path, profiles_dir):
    from compensator.profiles.scenario import load_scenario

    path = tmp_path / "hut-scenario.yaml"
    path.write_text(f"""kind: scenario
name: test-hut
hardware:
  sipm: {profiles_dir / 'hut-sipm-a.yaml'}
  board: {profiles_dir / 'hut-board-ntc.yaml'}
  thermal: {profiles_dir / 'hut-cooler.yaml'}
  overvoltage_v: 3.0
run:
  duration_days: 1
ambient:
  mean_temp_c: 10
thermal_path:
  enclosure_time_constant_s: 3600
  die_time_constant_s: 300
strategies:
  uncompensated: false
  compensated: true
  compensated_cooled: true
""")
    firmware, plant, findings = build_board(None, None, scenario=load_scenario(path))
    assert plant.cooled and firmware.config.board_name == "hut-board-ntc"
    assert [f.code for f in findings] == ["safe_state_above_breakdown"]   # hut-board-ntc cannot reach below 25.19 V
    firmware.enabled, firmware.mode = True, p.Mode.LAW
    for _ in range(50):
        dac, cooler_a, _ = firmware.tick(plant.reading)
        plant.step(dac, cooler_current_a=cooler_a)
    assert plant.reading.outdoor_temp_c == pytest.approx(10.0)
    assert cooler_a != 0.0 and plant.reading.time_s == pytest.approx(5.0)


@pytest.mark.parametrize("kind", ["stuck", "high"])
def test_a_supply_that_stops_following_its_dac_latches_supply_fault(sipm_a, board_ntc, kind):
    # From board time 2 s the supply ignores its DAC: stuck at the safe output it holds then (unseen until the set
    # value moves away), or failed high (seen at once). The host sees the latched flag and the safe state over the
    # pty; the recorded value is the read-back minus the expected code, beyond the limit (84 codes on this board).
    with running(sipm_a, board_ntc, plant_faults=PlantFaults(supply=kind, at_s=2.0)) as sim, \
            _client(sim, ramp_down_on_exit=False) as board:
        lim = sim.firmware.config.limits
        _wait_until(lambda: sim.plant.reading.time_s > 3.0)
        if kind == "stuck":
            assert board.faults().latched == []
            board.set_bias(28.0)
            board.enable()
        _wait_until(lambda: "supply_fault" in board.faults().latched)
        s = board.status()
        assert s.mode == "safe" and s.bias_dac_code == lim.safe_dac_code
        trip = next(t for t in board.faults().trips if t.fault == "supply_fault")
        assert abs(trip.trip_value) > lim.supply_fault_codes == 84
        assert (trip.trip_value < 0) == (kind == "stuck")   # stuck reads low (the set bias rose), high reads high
        with pytest.raises(BoardRefused) as info:
            board.enable()
        assert info.value.result == p.Result.REFUSED_FAULT
        if kind == "high":
            # the measured bias shows what the supply gives, well above the set (safe) value; the cause holds
            assert s.telemetry.bias_measured_v > s.telemetry.bias_set_v + 1.0
            assert "supply_fault" in board.clear_faults()
        else:
            # back at the safe code the stuck supply agrees again: the cause has gone and the fault clears
            _wait_until(lambda: board.clear_faults() == [], timeout_s=2.0)


def test_a_healthy_supply_never_raises_supply_fault(sipm_a, board_ntc):
    # A full ramp up and down at the slew limit with the unit's drawn tolerances: no supply fault.
    with running(sipm_a, board_ntc, time_scale=60.0) as sim, _client(sim) as board:
        board.set_bias(30.0)
        board.enable()
        _wait_until(lambda: board.status().bias_dac_code == int(board_ntc.supply.dac_code(30.0)))
        board.disable()
        _wait_until(lambda: board.status().mode == "off")
        assert "supply_fault" not in board.faults().latched and sim.firmware.config.readback is not None


def test_without_a_readback_channel_a_supply_fault_goes_unseen(sipm_b, board_pt1000):
    # hut-board-pt1000 has no bias read-back: the firmware cannot tell (the documented limit of the check).
    with running(sipm_b, board_pt1000, plant_faults=PlantFaults(supply="high")) as sim, \
            _client(sim, ramp_down_on_exit=False) as board:
        board.set_bias(float(board_pt1000.supply.output_range_v()[0]) + 0.5)
        board.enable()
        _wait_until(lambda: sim.plant.reading.time_s > 5.0)
        assert "supply_fault" not in board.faults().latched and board.status().mode == "fixed"
