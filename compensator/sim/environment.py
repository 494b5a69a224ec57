"""The world around the instrument: outdoor weather, sun, light, and the thermal path to the SiPM die.

Outdoor air temperature (all terms optional, summed)::

    T_out(t) = mean + seasonal offset + ramp t + A cos(2 pi (t - t_peak) / 1 day)
               + OU(t) + step(t)

where ``OU`` is an Ornstein-Uhlenbeck process with stationary standard
deviation ``sigma`` and correlation time ``tau``, sampled exactly:
``x[k+1] = x[k] e^(-h/tau) + sigma sqrt(1 - e^(-2h/tau)) xi[k]`` (Gillespie,
Phys. Rev. E 54, 2084, 1996, from memory). A recorded CSV replaces all of it
(linear interpolation between the recorded points, so the recording is
reproduced exactly at its own times).

The enclosure air follows ``T_out + internal heat + sun load`` through a
first-order lag; the die follows the enclosure air through a second one and
the sensor the die through a third (when it lags). The sun load is a half
sine between sunrise and sunset. The three lags form one linear system whose
input is taken as piecewise linear between ticks (first-order hold), sampled
exactly through one augmented matrix exponential (common practice; the same
assumption python-control's ``forced_response`` makes for continuous
systems), and run over whole blocks of ticks with scipy's ``sosfilt``.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
from scipy import signal
from scipy.linalg import expm

from compensator.errors import ModelError

__all__ = [
    "SECONDS_PER_DAY", "Weather", "ThermalPath", "ThermalDiscretisation", "discretise_thermal_path",
    "AmbientBlock", "AmbientStream", "sun_load_k", "is_day", "outdoor_temp_c",
]

SECONDS_PER_DAY = 86400.0


@dataclass(frozen=True, kw_only=True)
class Weather:
    """Outdoor temperature, sun and light of a scenario.

    Attributes
    ----------
    mean_temp_c, seasonal_offset_k : float
        Degree Celsius, kelvin.
    ramp_k_per_day : float
        Slow drift, kelvin per day.
    diurnal_amplitude_k, diurnal_peak_hour : float
        Daily sinusoid: amplitude (kelvin), hour of the maximum.
    weather_sigma_k, weather_time_constant_s : float
        Ornstein-Uhlenbeck weather: stationary 1 sigma (kelvin), correlation time (second).
    step_k, step_at_s, step_period_s : float
        Step of ``step_k`` kelvin at ``step_at_s``; with a period it is on for
        the first half of each period from there.
    sun_peak_k, sunrise_hour, sunset_hour : float
        Sun load on the enclosure at noon (kelvin) and the daylight hours.
    day_photon_rate_hz, night_photon_rate_hz : float
        Light on the SiPM by day and by night, hertz.
    seed : int
        Seed of the random weather.
    recording_time_s, recording_temp_c : ndarray or None
        A recorded outdoor temperature that replaces the synthetic one.
    """

    mean_temp_c: float = 20.0
    seasonal_offset_k: float = 0.0
    ramp_k_per_day: float = 0.0
    diurnal_amplitude_k: float = 0.0
    diurnal_peak_hour: float = 15.0
    weather_sigma_k: float = 0.0
    weather_time_constant_s: float = 43200.0
    step_k: float = 0.0
    step_at_s: float = 0.0
    step_period_s: float = 0.0
    sun_peak_k: float = 0.0
    sunrise_hour: float = 6.0
    sunset_hour: float = 18.0
    day_photon_rate_hz: float = 0.0
    night_photon_rate_hz: float = 0.0
    seed: int = 1
    recording_time_s: np.ndarray | None = field(default=None, repr=False)
    recording_temp_c: np.ndarray | None = field(default=None, repr=False)


@dataclass(frozen=True, kw_only=True)
class ThermalPath:
    """First-order lags from the outdoor air to the temperature sensor.

    Attributes
    ----------
    enclosure_time_constant_s : float
        Outdoor air to enclosure air, second.
    internal_heat_k : float
        Steady warming of the enclosure air by the electronics, kelvin.
    die_time_constant_s : float
        Enclosure air to the (uncooled) die, second.
    sensor_lag_s : float
        Die to sensor, second (0: the sensor sees the die at once).
    """

    enclosure_time_constant_s: float
    internal_heat_k: float = 0.0
    die_time_constant_s: float
    sensor_lag_s: float = 0.0

    def __post_init__(self):
        for name in ("enclosure_time_constant_s", "die_time_constant_s"):
            if not getattr(self, name) > 0:
                raise ModelError(f"{name} must be positive", key=name)
        if not self.sensor_lag_s >= 0:
            raise ModelError("sensor_lag_s must be at least 0", key="sensor_lag_s")

    def continuous_matrices(self):
        """``(A, B)`` of the lags: states enclosure, die[, sensor]; input the enclosure drive, kelvin.

        Returns
        -------
        a, b : ndarray
        """
        te, td, ts = self.enclosure_time_constant_s, self.die_time_constant_s, self.sensor_lag_s
        if ts > 0:
            a = np.array([[-1 / te, 0, 0], [1 / td, -1 / td, 0], [0, 1 / ts, -1 / ts]])
        else:
            a = np.array([[-1 / te, 0], [1 / td, -1 / td]])
        b = np.zeros((a.shape[0], 1))
        b[0, 0] = 1 / te
        return a, b


@dataclass(frozen=True)
class ThermalDiscretisation:
    """The thermal path sampled with a first-order hold: ``x[k+1] = phi x[k] + gamma_a u[k] + gamma_b u[k+1]``.

    Attributes
    ----------
    tick_s : float
    phi : ndarray
    gamma_a, gamma_b : ndarray
        Column vectors.

    Notes
    -----
    The lags form a cascade, so ``phi`` is lower triangular and each state is
    a first-order recursion driven by the input and the states before it.
    """

    tick_s: float
    phi: np.ndarray = field(repr=False)
    gamma_a: np.ndarray = field(repr=False)
    gamma_b: np.ndarray = field(repr=False)

    @property
    def states(self) -> int:
        """2 without sensor lag, 3 with."""
        return self.phi.shape[0]


def discretise_thermal_path(path: ThermalPath, tick_s: float) -> ThermalDiscretisation:
    """Sample the thermal path exactly for an input that is linear between ticks.

    Parameters
    ----------
    path : ThermalPath
    tick_s : float
        Tick, second.

    Returns
    -------
    ThermalDiscretisation
    """
    if not tick_s > 0:
        raise ModelError("tick_s must be positive", key="tick_s")
    a, b = path.continuous_matrices()
    n = a.shape[0]
    big = np.zeros((n + 2, n + 2))
    big[:n, :n] = a * tick_s
    big[:n, n:n + 1] = b * tick_s
    big[n, n + 1] = 1.0
    e = expm(big)
    phi, g1, g2 = e[:n, :n], e[:n, n:n + 1], e[:n, n + 1:n + 2]
    phi = np.tril(phi)  # exactly zero above the diagonal for a cascade
    return ThermalDiscretisation(float(tick_s), phi, g1 - g2, g2)


def sun_load_k(weather: Weather, time_s):
    """Warming of the enclosure by the sun, kelvin: a half sine between sunrise and sunset.

    Parameters
    ----------
    weather : Weather
    time_s : array_like
        Seconds since midnight of the first day.
    """
    hour = np.mod(np.asarray(time_s, dtype=float), SECONDS_PER_DAY) / 3600.0
    phase = (hour - weather.sunrise_hour) / (weather.sunset_hour - weather.sunrise_hour)
    return weather.sun_peak_k * np.where((phase > 0) & (phase < 1), np.sin(np.pi * np.clip(phase, 0, 1)), 0.0)


def is_day(weather: Weather, time_s):
    """True between sunrise and sunset.

    Parameters
    ----------
    weather : Weather
    time_s : array_like
        Seconds since midnight of the first day.
    """
    hour = np.mod(np.asarray(time_s, dtype=float), SECONDS_PER_DAY) / 3600.0
    return (hour >= weather.sunrise_hour) & (hour < weather.sunset_hour)


def outdoor_temp_c(weather: Weather, time_s, weather_k=0.0):
    """The deterministic part of the outdoor temperature plus a given random part, degree Celsius.

    Parameters
    ----------
    weather : Weather
    time_s : array_like
        Seconds since midnight of the first day.
    weather_k : array_like
        The Ornstein-Uhlenbeck part at those times, kelvin.
    """
    t = np.asarray(time_s, dtype=float)
    if weather.recording_time_s is not None:
        return np.interp(t + weather.recording_time_s[0], weather.recording_time_s, weather.recording_temp_c)
    out = (weather.mean_temp_c + weather.seasonal_offset_k + weather.ramp_k_per_day * t / SECONDS_PER_DAY
           + weather.diurnal_amplitude_k * np.cos(2 * np.pi * (t / SECONDS_PER_DAY - weather.diurnal_peak_hour / 24.0))
           + weather_k)
    if weather.step_k:
        since = t - weather.step_at_s
        on = since >= 0
        if weather.step_period_s > 0:
            on &= np.mod(since, weather.step_period_s) < 0.5 * weather.step_period_s
        out = out + weather.step_k * on
    return out


@dataclass(frozen=True)
class AmbientBlock:
    """The shared world over a block of ticks (arrays of shape ``(ticks,)``).

    Attributes
    ----------
    tick : ndarray of int64
        Tick indices.
    time_s : ndarray
        Seconds since the start.
    outdoor_temp_c, enclosure_temp_c, die_temp_c, sensor_temp_c : ndarray
        Degree Celsius (``die`` and ``sensor`` for the uncooled die).
    photon_rate_hz : ndarray
        Light on the SiPM, hertz.
    """

    tick: np.ndarray
    time_s: np.ndarray
    outdoor_temp_c: np.ndarray
    enclosure_temp_c: np.ndarray
    die_temp_c: np.ndarray
    sensor_temp_c: np.ndarray
    photon_rate_hz: np.ndarray


class AmbientStream:
    """The outdoor weather and the thermal path, block after block (deterministic for a seed).

    Parameters
    ----------
    weather : Weather
    path : ThermalPath
    tick_s : float
        Tick, second.

    Notes
    -----
    The states start in equilibrium with the first tick's input. Blocks may
    have any length; the result does not depend on how the run is cut (one
    random draw per tick, in tick order).
    """

    def __init__(self, weather: Weather, path: ThermalPath, tick_s: float):
        self.weather = weather
        self.path = path
        self.disc = discretise_thermal_path(path, tick_s)
        self.tick_s = float(tick_s)
        self._rng = np.random.default_rng([int(weather.seed), 0x0A3B])
        self._k = 0
        sigma = weather.weather_sigma_k if weather.recording_time_s is None else 0.0
        self._ou_a = float(np.exp(-self.tick_s / weather.weather_time_constant_s))
        self._ou_scale = sigma * float(np.sqrt(-np.expm1(-2 * self.tick_s / weather.weather_time_constant_s)))
        self._ou = sigma * float(self._rng.standard_normal()) if sigma else 0.0
        self._u0 = float(self._drive(np.array([0.0]), np.array([self._ou]))[0])
        self._x = np.zeros(self.disc.states)  # state deviations from the first input, kelvin

    def _drive(self, time_s, ou):
        w = self.weather
        return outdoor_temp_c(w, time_s, ou) + self.path.internal_heat_k + sun_load_k(w, time_s)

    def _ou_block(self, n: int):
        """The weather at the next ``n`` ticks; draws one normal number per tick."""
        if not self._ou_scale:
            return np.zeros(n)
        xi = self._rng.standard_normal(n)
        values = np.empty(n)
        values[0] = self._ou
        if n > 1:
            values[1:], _ = signal.lfilter([self._ou_scale], [1.0, -self._ou_a], xi[:-1], zi=[self._ou_a * self._ou])
        self._ou = self._ou_a * values[-1] + self._ou_scale * xi[-1]
        return values

    def next_block(self, ticks: int) -> AmbientBlock:
        """The next ``ticks`` ticks of the shared world.

        Parameters
        ----------
        ticks : int
            Block length (at least 1).

        Returns
        -------
        AmbientBlock
        """
        k = np.arange(self._k, self._k + ticks + 1, dtype=np.int64)
        t = k * self.tick_s
        ou = np.append(self._ou_block(ticks), self._ou)  # one tick of look-ahead for the hold
        u = self._drive(t, ou) - self._u0
        d = self.disc
        states = []
        for i in range(d.states):
            drive = d.gamma_a[i, 0] * u[:-1] + d.gamma_b[i, 0] * u[1:]
            for j in range(i):
                drive += d.phi[i, j] * states[j]
            y, _ = signal.lfilter([1.0], [1.0, -d.phi[i, i]], drive, zi=[d.phi[i, i] * self._x[i]])
            states.append(np.concatenate([[self._x[i]], y[:-1]]))
            self._x[i] = y[-1]
        states = [x + self._u0 for x in states]
        k, t, ou = k[:-1], t[:-1], ou[:-1]
        self._k += ticks
        w = self.weather
        rate = np.where(is_day(w, t), w.day_photon_rate_hz, w.night_photon_rate_hz).astype(float)
        sensor = states[2] if len(states) > 2 else states[1]
        return AmbientBlock(k, t, outdoor_temp_c(w, t, ou), states[0], states[1], sensor, rate)
