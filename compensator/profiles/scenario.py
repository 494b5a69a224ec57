"""Field scenarios (``kind: scenario``): the schema, and loading them with their profiles and ambient recording.

A scenario names the hardware (sipm, board and, optionally, thermal profiles,
as paths relative to the scenario file), the weather the instrument lives in,
the thermal path from the outdoor air to the SiPM die, the light level, the
strategies to compare, the run length and the Monte Carlo settings. It is
validated by the same machinery as the hardware profiles, so ``compensator
profile check`` checks it and ``hardware_profiles/README.md`` documents it.

Errors are located like profile errors (``FILE:LINE: key.path: reason``): a
referenced profile that is missing or of another kind is reported at the key
that names it, and an ambient recording with gaps or time that does not rise
at the line of the recording where it happens.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from compensator.errors import Problem, ProfileError
from compensator.profiles.schema import BOOL, CHOICE, FLOAT, INT, STR, KindSchema, Key, Section

__all__ = [
    "SCENARIO", "STRATEGIES", "ScenarioProfile", "AmbientRecording", "build_scenario", "load_scenario",
    "read_ambient_csv",
]

#: Strategies a scenario can compare, in report order.
STRATEGIES = ("uncompensated", "compensated", "compensated_cooled", "gain_trimmed")

#: Tolerance groups the Monte Carlo can draw, in report order (``monte_carlo.draw_<group>``).
TOLERANCE_GROUPS = ("sensor", "front_end", "dac", "supply", "breakdown", "sensor_to_die", "self_heating",
                    "current_sense")

#: Longest run a scenario may ask for, days (a year and a day).
MAX_DURATION_DAYS = 366.0


def _f(name, doc, **kw):
    return Key(name, FLOAT, doc, **kw)


def _opt(name, doc, default, **kw):
    return Key(name, FLOAT, doc, required=False, default=default, **kw)


def _flag(name, doc, default):
    return Key(name, BOOL, doc, required=False, default=default)


SCENARIO = KindSchema(
    "scenario",
    "A field scenario for `compensator simulate`: hardware, weather, thermal path, light, strategies, run and "
    "Monte Carlo settings.",
    (
        Section("hardware", "The instrument: profiles (paths relative to this file) and the compensation law.", (
            Key("sipm", STR, "path of the sipm profile"),
            Key("board", STR, "path of the board profile"),
            Key("thermal", STR, "path of the thermal profile (needed by the compensated_cooled strategy)",
                required=False, default=""),
            _f("overvoltage_v", "target overvoltage at the breakdown reference temperature, volt", gt=0, le=50),
            Key("law", CHOICE, "compensation law", required=False, default="constant_gain",
                choices=("constant_overvoltage", "constant_gain")),
            Key("drop_correction", CHOICE, "series-resistor drop correction of the law and table",
                required=False, default="modelled", choices=("none", "modelled", "measured")),
            _opt("table_bound_pct", "gain-error bound the lookup table is sized for, percent", 0.05, gt=0, le=10),
            Key("table_layout", CHOICE, "lookup table layout", required=False, default="optimised",
                choices=("uniform", "optimised")),
            _opt("cooler_setpoint_temp_c", "cold-plate setpoint of the compensated_cooled strategy, degree Celsius "
                 "(default: the thermal profile's)", None, ge=-100, le=100),
        )),
        Section("run", "Length and rate of the simulation.", (
            _f("duration_days", "simulated time, days", gt=0, le=MAX_DURATION_DAYS),
            _opt("control_rate_hz", "control tick rate of the simulation (table, trim and cooler loop), hertz "
                 "(default: the board's control.rate_hz)", None, gt=0, le=1000),
            _opt("band_pct", "gain band for the time outside it and for the yield, plus or minus percent", 0.25,
                 gt=0, le=100),
            Key("trace_points", INT, "points kept per trace for plots (decimated)", required=False, default=2000,
                ge=10, le=1000000),
            Key("seed", INT, "seed of the sensor noise and dark-peak statistics of the nominal run",
                required=False, default=1, ge=0),
        )),
        Section("ambient", "Outdoor air temperature: mean + seasonal offset and ramp + diurnal sinusoid + "
                "Ornstein-Uhlenbeck weather + steps, or a recorded CSV `time_s,temp_c` replayed instead.", (
            _opt("mean_temp_c", "mean outdoor temperature, degree Celsius", 10.0, ge=-90, le=60),
            _opt("seasonal_offset_k", "offset of this season from the mean, kelvin", 0.0, ge=-60, le=60),
            _opt("ramp_k_per_day", "slow seasonal ramp, kelvin per day", 0.0, ge=-10, le=10),
            _opt("diurnal_amplitude_k", "amplitude of the daily sinusoid, kelvin", 0.0, ge=0, le=40),
            _opt("diurnal_peak_hour", "hour of the day of the warmest air, hour", 15.0, ge=0, lt=24),
            _opt("weather_sigma_k", "standard deviation of the random weather (stationary), kelvin", 0.0,
                 ge=0, le=30),
            _opt("weather_time_constant_s", "correlation time of the random weather, second", 43200.0, gt=0),
            _opt("step_k", "size of a temperature step, kelvin", 0.0, ge=-60, le=60),
            _opt("step_at_s", "time of the first step, second", 0.0, ge=0),
            _opt("step_period_s", "0: one step; otherwise the step is on for half of each period, second", 0.0,
                 ge=0),
            _opt("sun_peak_k", "warming of the enclosure by the sun at noon, kelvin", 0.0, ge=0, le=60),
            _opt("sunrise_hour", "hour of sunrise (also when the day light level starts), hour", 6.0, ge=0, lt=24),
            _opt("sunset_hour", "hour of sunset, hour", 18.0, gt=0, le=24),
            Key("replay_csv", STR, "recorded outdoor temperature, CSV with columns time_s,temp_c (path relative "
                "to this file); replaces the synthetic weather", required=False, default=""),
            _opt("replay_max_gap_s", "largest time step allowed in the recording, second", 3600.0, gt=0),
            Key("seed", INT, "seed of the random weather", required=False, default=1, ge=0),
        )),
        Section("thermal_path", "From the outdoor air to the SiPM die and its temperature sensor.", (
            _f("enclosure_time_constant_s", "first-order lag from outdoor air to enclosure air, second", gt=0),
            _opt("internal_heat_k", "steady warming of the enclosure air by the electronics, kelvin", 0.0,
                 ge=-20, le=40),
            _f("die_time_constant_s", "first-order lag from enclosure air to the SiPM die (uncooled), second", gt=0),
            _opt("sensor_lag_s", "first-order lag of the temperature sensor behind the die, second", 0.0, ge=0),
            _opt("sensor_offset_k", "steady offset of the sensor from the die in this unit, kelvin", 0.0,
                 ge=-10, le=10),
            _opt("sensor_noise_k", "white noise of the temperature reading, kelvin (1 sigma per tick)", 0.0,
                 ge=0, le=10),
        )),
        Section("light", "Photons reaching the SiPM (they add to its current and so to the series-resistor drop).", (
            _opt("day_photon_rate_hz", "photon rate between sunrise and sunset, hertz", 0.0, ge=0, le=1e12),
            _opt("night_photon_rate_hz", "photon rate at night, hertz", 0.0, ge=0, le=1e12),
        ), required=False),
        Section("strategies", "Which strategies run side by side on the same weather.", (
            _flag("uncompensated", "fixed bias, set for the target at the breakdown reference temperature", True),
            _flag("compensated", "the lookup table (the firmware's integer path)", True),
            _flag("compensated_cooled", "the table plus the cooler loop (needs hardware.thermal)", False),
            _flag("gain_trimmed", "the table plus a slow trim of the overvoltage from the dark-count "
                  "single-photon peak", False),
        ), required=False),
        Section("gain_trim", "The slow outer loop of the gain_trimmed strategy.", (
            _opt("window_s", "length of one dark-peak gain measurement, second", 600.0, gt=0, le=86400),
            _opt("loop_gain", "fraction of the measured gain error corrected per window", 0.5, gt=0, le=1),
            _opt("single_pe_spread_pct", "width of the single-photon peak (1 sigma) relative to the gain, percent",
                 10.0, gt=0, le=100),
            _opt("captured_pulse_rate_hz", "most dark pulses per second the board can capture for the "
                 "measurement, hertz", 1000.0, gt=0, le=1e9),
            _opt("max_trim_v", "largest trim of the bias either way, volt", 0.5, gt=0, le=10),
        ), required=False),
        Section("unit", "How the simulated unit differs from its profiles (the nominal run; the Monte Carlo adds "
                "its draws).", (
            _opt("breakdown_error_v", "true breakdown voltage minus the profile's, volt", 0.0, ge=-5, le=5),
            _opt("ageing_mv_per_day", "drift of the breakdown voltage with time, millivolt per day", 0.0,
                 ge=-100, le=100),
        ), required=False),
        Section("monte_carlo", "Units with tolerances drawn from the profiles, for the yield.", (
            Key("units", INT, "number of units (0: no Monte Carlo)", required=False, default=0, ge=0,
                le=10_000_000),
            Key("seed", INT, "seed of the draws and of each chunk's noise", required=False, default=7, ge=0),
            Key("chunk_units", INT, "units simulated together in one chunk (one task)", required=False,
                default=250, ge=1, le=100000),
            Key("strategy", CHOICE, "strategy the yield is reported for", required=False, default="compensated",
                choices=STRATEGIES),
            Key("worst_units", INT, "how many of the worst units to list with their draws", required=False,
                default=5, ge=0, le=1000),
            _flag("draw_sensor", "temperature sensor tolerance (NTC R25 and Beta, or RTD class)", True),
            _flag("draw_front_end", "divider resistor, ADC reference and excitation", True),
            _flag("draw_dac", "DAC reference", True),
            _flag("draw_supply", "supply network resistors or amplifier gain", True),
            _flag("draw_breakdown", "breakdown and tempco calibration (Gaussian, the profile's 1 sigma)", True),
            _flag("draw_sensor_to_die", "sensor-to-die offset (the board's limit)", True),
            _flag("draw_self_heating", "sensor self-heating (0 to twice the board's value)", True),
            _flag("draw_current_sense", "current-sense gain, reference and offset", True),
        ), required=False),
    ),
)


@dataclass(frozen=True)
class AmbientRecording:
    """A recorded outdoor temperature to replay.

    Attributes
    ----------
    source : str
        The CSV file.
    time_s : ndarray
        Strictly increasing times, second.
    temp_c : ndarray
        Temperatures, degree Celsius.
    """

    source: str
    time_s: np.ndarray = field(repr=False)
    temp_c: np.ndarray = field(repr=False)


@dataclass(frozen=True)
class ScenarioProfile:
    """A loaded ``scenario``: its values, the profiles it names and the ambient recording.

    Attributes
    ----------
    name, description, source, sha256 : str
        Metadata of the scenario file.
    values : dict
        Validated values by section (every optional key filled with its default).
    lines : dict
        Dotted key path -> line, to locate later errors.
    sipm, board : SipmProfile, BoardProfile
    thermal : ThermalProfile or None
    recording : AmbientRecording or None
    """

    name: str
    description: str
    source: str
    sha256: str
    values: dict = field(repr=False, compare=False)
    lines: dict = field(repr=False, compare=False)
    sipm: object = None
    board: object = None
    thermal: object = None
    recording: AmbientRecording | None = None

    def section(self, name: str) -> dict:
        """The values of one section (defaults filled in for an absent optional section)."""
        if name in self.values:
            return self.values[name]
        keys = next(s for s in SCENARIO.sections if s.name == name).keys
        return {k.name: k.default for k in keys}

    def problem(self, keypath: str, reason: str) -> Problem:
        """A :class:`~compensator.errors.Problem` located at ``keypath`` in the scenario file."""
        line = self.lines.get(keypath) or self.lines.get(keypath.split(".", 1)[0], 1)
        return Problem(self.source, line, keypath, reason)

    @property
    def strategies(self) -> tuple[str, ...]:
        """The strategies switched on, in report order."""
        chosen = self.section("strategies")
        return tuple(s for s in STRATEGIES if chosen[s])


def read_ambient_csv(path, max_gap_s: float = 3600.0) -> AmbientRecording:
    """Read a recorded ambient temperature (CSV with columns ``time_s,temp_c``).

    Parameters
    ----------
    path : str or path-like
        The CSV file.
    max_gap_s : float
        Largest time step allowed between two rows, second.

    Returns
    -------
    AmbientRecording

    Raises
    ------
    InputError
        A missing or bad cell, fewer than two rows, time that does not rise
        or a step larger than ``max_gap_s`` (naming the file and line), or a
        temperature below absolute zero.
    """
    from compensator.csvio import fail, read_table

    table = read_table(path, ["time_s", "temp_c"])
    t, temp = table.columns["time_s"], table.columns["temp_c"]
    if t.size < 2:
        fail(path, int(table.lines[0]), "time_s", "need at least two rows to replay")
    step = np.diff(t)
    bad = np.flatnonzero(step <= 0)
    if bad.size:
        i = int(bad[0]) + 1
        fail(path, int(table.lines[i]), table.names["time_s"],
             f"time must rise from row to row: {t[i]:g} s follows {t[i - 1]:g} s")
    gap = np.flatnonzero(step > max_gap_s)
    if gap.size:
        i = int(gap[0]) + 1
        fail(path, int(table.lines[i]), table.names["time_s"],
             f"gap of {step[i - 1]:g} s in the recording (more than {max_gap_s:g} s)")
    cold = np.flatnonzero(temp <= -273.15)
    if cold.size:
        fail(path, int(table.lines[cold[0]]), table.names["temp_c"], "below absolute zero")
    return AmbientRecording(str(path), t, temp)


def _referenced(raw, keypath: str, kind: str):
    """Load the profile a scenario key names (relative to the scenario's folder); locate failures at the key."""
    from compensator.profiles.models import load_profile

    section, key = keypath.split(".")
    text = raw.values[section][key]
    path = Path(text)
    if not path.is_absolute():
        path = Path(raw.path).parent / path
    if not path.is_file():
        raise ProfileError(raw.problem(keypath, f"no such {kind} profile: {text} (looked for {path})"))
    try:
        return load_profile(path, kind)
    except ProfileError as exc:
        wrong_kind = [p for p in exc.problems if p.key == "kind" and "expected a" in p.reason]
        if wrong_kind:
            raise ProfileError(raw.problem(keypath, f"{text} is not a {kind} profile ({wrong_kind[0].reason})")) \
                from None
        raise


def build_scenario(raw) -> ScenarioProfile:
    """Build a :class:`ScenarioProfile` from a validated raw ``scenario`` profile.

    Loads the profiles it names and the ambient recording, and checks what
    involves more than one key.

    Parameters
    ----------
    raw : compensator.profiles.loader.RawProfile

    Returns
    -------
    ScenarioProfile

    Raises
    ------
    ProfileError
        Located at the scenario key at fault (or in the referenced file).
    InputError
        The ambient recording is malformed (located in the recording).
    """
    v = raw.values
    hw = v["hardware"]
    sipm = _referenced(raw, "hardware.sipm", "sipm")
    board = _referenced(raw, "hardware.board", "board")
    thermal = _referenced(raw, "hardware.thermal", "thermal") if hw["thermal"] else None
    problems = []
    dev = sipm.device
    if not dev.min_overvoltage_v <= hw["overvoltage_v"] <= dev.max_overvoltage_v:
        problems.append(raw.problem("hardware.overvoltage_v", f"{hw['overvoltage_v']:g} V is outside "
                                    f"{sipm.name}'s limits {dev.min_overvoltage_v:g} to {dev.max_overvoltage_v:g} V"))
    if hw["drop_correction"] == "measured" and board.current_sense is None:
        problems.append(raw.problem("hardware.drop_correction", f"'measured' needs a current_sense section in "
                                    f"{board.name}'s profile"))
    strategies = v.get("strategies") or {k.name: k.default for k in SCENARIO.sections[4].keys}
    chosen = [s for s in STRATEGIES if strategies[s]]
    if strategies["compensated_cooled"] and thermal is None:
        problems.append(raw.problem("strategies.compensated_cooled", "needs hardware.thermal (a thermal profile)"))
    if not chosen:
        problems.append(raw.problem("strategies", "switch on at least one strategy"))
    amb = v["ambient"]
    if amb["sunset_hour"] <= amb["sunrise_hour"]:
        problems.append(raw.problem("ambient.sunset_hour", "must be after ambient.sunrise_hour"))
    run = v["run"]
    rate = run["control_rate_hz"] if run["control_rate_hz"] is not None else board.control_rate_hz
    ticks = run["duration_days"] * 86400.0 * rate
    if ticks < 2:
        problems.append(raw.problem("run.duration_days", f"{ticks:g} ticks at {rate:g} Hz: the run needs at least "
                                    "two control ticks"))
    elif ticks > 2e9:
        problems.append(raw.problem("run.duration_days", f"{ticks:.3g} ticks at {rate:g} Hz is more than 2e9; "
                                    "shorten the run or lower run.control_rate_hz"))
    mc = v.get("monte_carlo")
    if mc and mc["units"] and chosen and mc["strategy"] not in chosen:
        problems.append(raw.problem("monte_carlo.strategy", f"{mc['strategy']!r} is not among the strategies run"))
    trim = v.get("gain_trim")
    if trim and trim["window_s"] * rate < 1:
        problems.append(raw.problem("gain_trim.window_s", f"shorter than one control tick at {rate:g} Hz"))
    if problems:
        raise ProfileError(problems)
    recording = None
    if amb["replay_csv"]:
        path = Path(amb["replay_csv"])
        if not path.is_absolute():
            path = Path(raw.path).parent / path
        if not path.is_file():
            raise ProfileError(raw.problem("ambient.replay_csv", f"no such file: {amb['replay_csv']} (looked for "
                                           f"{path})"))
        recording = read_ambient_csv(path, amb["replay_max_gap_s"])
        span_s = float(recording.time_s[-1] - recording.time_s[0])
        if span_s < run["duration_days"] * 86400.0 - 1e-6:
            raise ProfileError(raw.problem("run.duration_days", f"{run['duration_days']:g} days is longer than the "
                                           f"recording {recording.source} ({span_s / 86400.0:.4g} days)"))
    return ScenarioProfile(name=v["name"], description=v.get("description", ""), source=raw.path, sha256=raw.sha256,
                           values=v, lines=raw.lines, sipm=sipm, board=board, thermal=thermal, recording=recording)


def load_scenario(path) -> ScenarioProfile:
    """Load a ``scenario`` file with the profiles and recording it names.

    Parameters
    ----------
    path : str or path-like
        The scenario YAML.

    Returns
    -------
    ScenarioProfile

    Raises
    ------
    ProfileError, InputError
        One located problem per line (``FILE:LINE: key.path: reason``).
    """
    from compensator.profiles.models import load_profile

    return load_profile(path, "scenario")

