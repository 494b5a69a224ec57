"""Seeded synthetic runs with a known drift and residual temperature coefficient (invented data).

For tests, demos and benchmarks only: an outdoor radiation monitor in a
mountain hut, enclosure temperature following a daily cycle and the weather,
gain drifting at a set rate and following the temperature with a set
residual coefficient, plus white and slowly correlated noise. Every number
here is invented.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy.signal import lfilter

from compensator.firmware.faults import FaultFlag
from compensator.logbook.records import EventKind, EventRecord, RunSeries, SessionRecord

__all__ = ["SyntheticTruth", "synthetic_run", "START_UNIX_S"]

#: First sample of every synthetic run: 2025-06-15 00:00:00 UTC.
START_UNIX_S = 1_749_945_600.0
_GAIN0 = 1.6e6            # electrons per photoelectron (invented)
_BREAKDOWN_25C_V = 24.0   # invented sensor
_TEMPCO_V_PER_K = 0.035


@dataclass(frozen=True, kw_only=True)
class SyntheticTruth:
    """What a synthetic run was made with.

    Attributes
    ----------
    drift_pct_per_day : float
    tempco_pct_per_k : float
    white_noise_pct : float
        White gain noise per sample, percent (1 sigma).
    correlated_noise_pct : float
        Stationary 1-sigma amplitude of the slowly correlated gain noise, percent.
    correlation_time_s : float
        Its correlation time, seconds.
    """

    drift_pct_per_day: float
    tempco_pct_per_k: float
    white_noise_pct: float
    correlated_noise_pct: float
    correlation_time_s: float


def _ar1(rng, n, step_s, tau_s, sigma):
    if sigma == 0 or n == 0:
        return np.zeros(n)
    phi = np.exp(-step_s / tau_s)
    drive = rng.normal(0.0, sigma * np.sqrt(1.0 - phi ** 2), n)
    out = lfilter([1.0], [1.0, -phi], drive)
    return out + (rng.normal(0.0, sigma) - out[0]) * phi ** np.arange(n)  # start in the stationary state


def synthetic_run(*, days: float, rate_hz: float, drift_pct_per_day: float = -0.02,
                  tempco_pct_per_k: float = 0.03, white_noise_pct: float = 0.2,
                  correlated_noise_pct: float = 0.03, correlation_time_s: float = 7200.0,
                  mean_temp_c: float = 5.0, daily_swing_k: float = 8.0, weather_k: float = 3.0,
                  seasonal_k_per_day: float = 0.0, dark_peak_every: int = 0, bias_readback: bool = True,
                  gaps=(), restarts=(), faults=(), unit_id: str = "hut-07", seed: int = 0) -> tuple[RunSeries, SyntheticTruth]:
    """A seeded synthetic telemetry run (invented data).

    Parameters
    ----------
    days : float
        Length of the run, days.
    rate_hz : float
        Telemetry rate, hertz.
    drift_pct_per_day : float
        True gain drift, percent per day.
    tempco_pct_per_k : float
        True residual temperature coefficient, percent per kelvin.
    white_noise_pct : float
        White gain noise per sample, percent (1 sigma).
    correlated_noise_pct : float
        1-sigma amplitude of an AR(1) gain noise, percent.
    correlation_time_s : float
        Its correlation time, seconds.
    mean_temp_c : float
        Mean enclosure temperature, degree C.
    daily_swing_k : float
        Amplitude of the daily temperature cycle, kelvin.
    weather_k : float
        1-sigma amplitude of the weather (AR(1), two-day correlation time), kelvin.
    seasonal_k_per_day : float
        A steady warming or cooling, kelvin per day (makes time and temperature collinear).
    dark_peak_every : int
        Log a dark-peak gain on every n-th sample (0: none; the overvoltage
        then stands in for the gain).
    bias_readback : bool
        Log a bias read-back (needed by the overvoltage proxy).
    gaps : sequence of (float, float)
        (start day, length in seconds) link outages: no samples, and a
        ``link_lost`` and ``link_restored`` event.
    restarts : sequence of (float, float)
        (day, length in seconds) logger restarts: no samples, then a new session.
    faults : sequence of (float, float, int)
        (start day, length in seconds, fault bits) stretches under a live fault;
        the gain is wrong there (outputs in the safe state).
    unit_id : str
    seed : int

    Returns
    -------
    run : RunSeries
    truth : SyntheticTruth
    """
    rng = np.random.default_rng(seed)
    step_s = 1.0 / rate_hz
    n = int(round(days * 86400.0 * rate_hz))
    t_s = np.arange(n) * step_s
    keep = np.ones(n, dtype=bool)
    for start_day, length_s in (*gaps, *restarts):
        keep &= ~((t_s >= start_day * 86400.0) & (t_s < start_day * 86400.0 + length_s))
    day = t_s / 86400.0
    true_temp = (mean_temp_c + seasonal_k_per_day * day
                 + daily_swing_k * np.sin(2 * np.pi * (day - 0.375))
                 + _ar1(rng, n, step_s, 2 * 86400.0, weather_k))
    rel_pct = (drift_pct_per_day * day + tempco_pct_per_k * (true_temp - mean_temp_c)
               + _ar1(rng, n, step_s, correlation_time_s, correlated_noise_pct)
               + rng.normal(0.0, white_noise_pct, n))
    temp_c = true_temp + rng.normal(0.0, 0.02, n)
    fault_bits = np.zeros(n, dtype=np.int64)
    for start_day, length_s, bits in faults:
        fault_bits[(t_s >= start_day * 86400.0) & (t_s < start_day * 86400.0 + length_s)] |= int(bits)
    spoiled = (fault_bits & ~int(FaultFlag.REQUEST_REFUSED)) != 0
    rel_pct = np.where(spoiled, -60.0, rel_pct)  # safe state: bias lowered, gain collapses
    target_v = 3.0
    breakdown_v = _BREAKDOWN_25C_V + _TEMPCO_V_PER_K * (temp_c - 25.0)
    bias_set_v = breakdown_v + target_v
    bias_measured_v = bias_set_v + target_v * rel_pct / 100.0
    gain = np.full(n, np.nan)
    gain_err = np.full(n, np.nan)
    if dark_peak_every:
        every = np.arange(n) % dark_peak_every == 0
        gain[every] = _GAIN0 * (1.0 + rel_pct[every] / 100.0)
        gain_err[every] = _GAIN0 * white_noise_pct / 100.0
    kept_t = t_s[keep]
    session_index = np.zeros(kept_t.size, dtype=np.int64)
    for day_restart, length_s in sorted(restarts):
        session_index[kept_t >= day_restart * 86400.0 + length_s] += 1
    sessions = tuple(
        SessionRecord(session_id=k + 1, started_unix_s=START_UNIX_S + (kept_t[session_index == k][0]
                                                                       if np.any(session_index == k) else 0.0),
                      unit_id=unit_id, firmware_version="0.0-synthetic", board_name="synthetic-board",
                      protocol_version=1, table_sha256="", coefficients_sha256="", serial_number=unit_id,
                      port="synthetic", rate_hz=float(rate_hz), rows=int(np.sum(session_index == k)))
        for k in range(len(restarts) + 1))
    events = []
    for start_day, length_s in gaps:
        lost = START_UNIX_S + start_day * 86400.0
        session = int(session_index[min(np.searchsorted(kept_t, start_day * 86400.0), kept_t.size - 1)])
        events.append(EventRecord(session_id=session + 1, time_unix_s=lost, kind=EventKind.LINK_LOST, faults=0,
                                  duration_s=float("nan"), detail="no answer from the board"))
        events.append(EventRecord(session_id=session + 1, time_unix_s=lost + length_s,
                                  kind=EventKind.LINK_RESTORED, faults=0, duration_s=float(length_s), detail=""))
    run = RunSeries(source=f"synthetic:{unit_id}:{seed}", unit_id=unit_id, time_unix_s=START_UNIX_S + t_s[keep],
                    temp_c=temp_c[keep], bias_set_v=bias_set_v[keep],
                    bias_measured_v=(bias_measured_v if bias_readback else np.full(n, np.nan))[keep],
                    overvoltage_target_v=np.full(int(keep.sum()), target_v), faults_live=fault_bits[keep],
                    dark_peak_gain=gain[keep], dark_peak_gain_err=gain_err[keep],
                    session_index=session_index, sessions=sessions, events=tuple(events))
    truth = SyntheticTruth(drift_pct_per_day=drift_pct_per_day, tempco_pct_per_k=tempco_pct_per_k,
                           white_noise_pct=white_noise_pct, correlated_noise_pct=correlated_noise_pct,
                           correlation_time_s=correlation_time_s)
    return run, truth
