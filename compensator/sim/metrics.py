"""What a simulated run keeps: switches of the checks, per-unit metrics accumulated as the run goes, traces.

Metrics are accumulated block by block (largest, smallest, sum, sum of
squares, ticks outside the band) from ``settle_s`` on, so that a run of any
length needs memory for its units only; only decimated traces are kept.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from compensator.firmware.tables import STATUS_SENSOR_FAULT, TableStatus

__all__ = ["SimOptions", "StrategyMetrics", "Traces", "UnitsResult", "RunningMetrics"]


@dataclass(frozen=True, kw_only=True)
class SimOptions:
    """Switches for checks against linear references (all on for a real run).

    Attributes
    ----------
    quantise : bool
        ADC and DAC quantisation and the integer table; off: the law is
        applied to the continuous sensor reading and the DAC is continuous.
    noise : bool
        Sensor noise and dark-peak statistics.
    limits : bool
        Regulator output limits.
    drop : bool
        The series-resistor drop (off: the bias at the SiPM is the supply output).
    """

    quantise: bool = True
    noise: bool = True
    limits: bool = True
    drop: bool = True


@dataclass(frozen=True, kw_only=True)
class StrategyMetrics:
    """What one strategy did over the run, per unit (arrays of shape ``(units,)``).

    Attributes
    ----------
    name : str
    gain_dev_max_abs_pct, gain_dev_min_pct, gain_dev_max_pct, gain_dev_pk_pk_pct : ndarray
        Largest absolute, smallest, largest and peak-to-peak gain deviation
        over every tick of the run, percent.
    gain_dev_rms_pct, gain_dev_mean_pct : ndarray
        RMS and mean over every tick, percent.
    time_outside_band_pct : ndarray
        Share of the ticks with ``|gain deviation| > band``, percent.
    overvoltage_dev_max_abs_v : ndarray
        Largest absolute difference between the overvoltage and the law's
        target at the die temperature, volt.
    sensor_fault_ticks, out_of_range_ticks : ndarray of int
        Ticks with a sensor fault, ticks with a reading outside the operating range.
    cooler_energy_j : ndarray
        Electrical energy into the cooler, joule (0 without one).
    hot_side_max_temp_c : ndarray
        Highest hot-side temperature (NaN without a cooler), degree Celsius.
    cooler_off_ticks : ndarray of int
        Ticks the cooler was forced off (sensor fault or hot side over its limit).
    dew_risk_ticks : ndarray of int
        Ticks with the cold plate below the dew point of the enclosure air
        (at the thermal profile's relative humidity) plus the profile's margin:
        condensation (Magnus formula, Alduchov and Eskridge 1996).
    trim_v : ndarray
        Final trim of the bias, volt (0 unless gain_trimmed).
    trim_converged_s : ndarray
        End of the first window after which the gain never left the band
        (NaN if it did to the end), second.
    trim_residual_rms_pct : ndarray
        RMS gain deviation after convergence, percent (NaN if never converged).
    """

    name: str
    gain_dev_max_abs_pct: np.ndarray
    gain_dev_min_pct: np.ndarray
    gain_dev_max_pct: np.ndarray
    gain_dev_pk_pk_pct: np.ndarray
    gain_dev_rms_pct: np.ndarray
    gain_dev_mean_pct: np.ndarray
    time_outside_band_pct: np.ndarray
    overvoltage_dev_max_abs_v: np.ndarray
    sensor_fault_ticks: np.ndarray
    out_of_range_ticks: np.ndarray
    cooler_energy_j: np.ndarray
    hot_side_max_temp_c: np.ndarray
    cooler_off_ticks: np.ndarray
    dew_risk_ticks: np.ndarray
    trim_v: np.ndarray
    trim_converged_s: np.ndarray
    trim_residual_rms_pct: np.ndarray


@dataclass(frozen=True)
class Traces:
    """Decimated traces of the first unit (every ``stride``-th tick).

    Attributes
    ----------
    time_s, outdoor_temp_c, enclosure_temp_c, die_temp_c, sensor_temp_c : ndarray
        Shared by the uncooled strategies.
    strategies : dict
        Strategy name -> dict of arrays ``gain_dev_pct``, ``bias_v``, ``die_temp_c``.
    stride : int
    """

    time_s: np.ndarray
    outdoor_temp_c: np.ndarray
    enclosure_temp_c: np.ndarray
    die_temp_c: np.ndarray
    sensor_temp_c: np.ndarray
    strategies: dict = field(default_factory=dict)
    stride: int = 1


@dataclass(frozen=True)
class UnitsResult:
    """The result of :func:`simulate_units`.

    Attributes
    ----------
    metrics : dict
        Strategy name -> :class:`StrategyMetrics`.
    traces : Traces or None
    ticks : int
    tick_s : float
    firmware : str
        Which back end ran the firmware ("python" or "compiled C").
    """

    metrics: dict
    traces: Traces | None
    ticks: int
    tick_s: float
    firmware: str = "python"


class RunningMetrics:
    """Running per-unit statistics of one strategy (:meth:`add` per block, :meth:`metrics` at the end)."""

    def __init__(self, n, band, cooled=False, settle=0):
        self.n = n
        self.band = band
        self.settle = settle
        self.max = np.full(n, -np.inf)
        self.min = np.full(n, np.inf)
        self.sum = np.zeros(n)
        self.sumsq = np.zeros(n)
        self.outside = np.zeros(n, dtype=np.int64)
        self.ov_max = np.zeros(n)
        self.fault = np.zeros(n, dtype=np.int64)
        self.out_of_range = np.zeros(n, dtype=np.int64)
        self.last_outside = np.full(n, -1, dtype=np.int64)
        self.energy = np.zeros(n)
        self.hot_max = np.full(n, np.nan if not cooled else -np.inf)
        self.off = np.zeros(n, dtype=np.int64)
        self.dew = np.zeros(n, dtype=np.int64)
        self.windows = []  # (end tick, sum, sumsq, count) per trim window
        self.trim_v = np.zeros(n)

    def add(self, dev, ov_dev, status, first_tick):
        """Take in one block of ticks.

        Parameters
        ----------
        dev : ndarray, shape (units, ticks)
            Gain deviation, percent.
        ov_dev : ndarray
            Overvoltage minus the law's target, volt (broadcast to ``dev``).
        status : ndarray of int or None
            The table's status per tick.
        first_tick : int
            Index of the block's first tick in the run.
        """
        out = np.abs(dev) > self.band
        any_out = out.any(axis=1)
        if np.any(any_out):  # tracked from the start: the trim's convergence
            last = out.shape[1] - 1 - np.argmax(out[:, ::-1], axis=1)
            self.last_outside = np.where(any_out, first_tick + last, self.last_outside)
        skip = self.settle - first_tick
        if skip > 0:  # ticks before the metrics start
            if skip >= dev.shape[1]:
                return
            dev, out = dev[:, skip:], out[:, skip:]
            ov_dev = np.broadcast_to(ov_dev, (ov_dev.shape[0], dev.shape[1] + skip))[:, skip:]
            status = None if status is None else status[:, skip:]
        self.max = np.maximum(self.max, dev.max(axis=1))
        self.min = np.minimum(self.min, dev.min(axis=1))
        self.sum += dev.sum(axis=1)
        self.sumsq += np.einsum("ij,ij->i", dev, dev)
        self.outside += out.sum(axis=1)
        self.ov_max = np.maximum(self.ov_max, np.abs(ov_dev).max(axis=1))
        if status is not None:
            self.fault += (status == STATUS_SENSOR_FAULT).sum(axis=1)
            self.out_of_range += np.isin(status, (TableStatus.COLDER_THAN_RANGE, TableStatus.HOTTER_THAN_RANGE)).sum(axis=1)

    def metrics(self, name, ticks, tick_s) -> StrategyMetrics:
        """The strategy's metrics over the run.

        Parameters
        ----------
        name : str
            The strategy.
        ticks : int
            Ticks of the whole run.
        tick_s : float
            Tick length, second.
        """
        ticks = max(ticks - self.settle, 1)
        mean = self.sum / ticks
        rms = np.sqrt(self.sumsq / ticks)
        converged = np.full(self.n, np.nan)
        residual = np.full(self.n, np.nan)
        if self.windows:
            ends = np.array([w[0] for w in self.windows])
            sums = np.array([w[1] for w in self.windows])
            sqs = np.array([w[2] for w in self.windows])
            counts = np.array([w[3] for w in self.windows])
            starts = np.concatenate([[0], ends[:-1]])
            for u in range(self.n):
                clean = np.flatnonzero(starts > self.last_outside[u])  # windows wholly after the last excursion
                if clean.size == 0:
                    continue
                first = int(clean[0])
                converged[u] = starts[first] * tick_s
                cnt = counts[first:].sum()
                if cnt:
                    residual[u] = np.sqrt(sqs[first:, u].sum() / cnt)
        return StrategyMetrics(
            name=name, gain_dev_max_abs_pct=np.maximum(np.abs(self.max), np.abs(self.min)),
            gain_dev_min_pct=self.min, gain_dev_max_pct=self.max, gain_dev_pk_pk_pct=self.max - self.min,
            gain_dev_rms_pct=rms, gain_dev_mean_pct=mean, time_outside_band_pct=100.0 * self.outside / ticks,
            overvoltage_dev_max_abs_v=self.ov_max, sensor_fault_ticks=self.fault,
            out_of_range_ticks=self.out_of_range, cooler_energy_j=self.energy,
            hot_side_max_temp_c=self.hot_max, cooler_off_ticks=self.off, dew_risk_ticks=self.dew, trim_v=self.trim_v,
            trim_converged_s=converged, trim_residual_rms_pct=residual)
