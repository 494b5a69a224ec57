"""One call from a loaded scenario to the whole field study: the nominal unit's strategies, and the yield.

:func:`simulate_scenario` runs the calibrated unit (no tolerances; the
scenario's own offsets and ageing) through every strategy on the same
weather, then, when asked for units, the Monte Carlo; it returns a
:class:`SimulationReport`, from which the command line prints its table and
JSON and the report module draws its figures.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from compensator.errors import ModelError
from compensator.sim.chain import GROUPS, nominal_units
from compensator.sim.engine import Traces, simulate_units
from compensator.sim.montecarlo import MonteCarloResult, monte_carlo
from compensator.sim.setup import SimSetup, prepare

__all__ = ["RunSummary", "SimulationReport", "simulate_scenario", "summarise_runs",
           "PUBLISHED_DARK_PULSE_FEEDBACK_PCT"]

#: Gain variation left by analog feedback on the mean dark-pulse amplitude over 20-30 C, percent
#: (Licciulli, Indiveri and Marzocca, IEEE Trans. Nucl. Sci. 60 (2013) 606: about 2 %).
PUBLISHED_DARK_PULSE_FEEDBACK_PCT = 2.0


@dataclass(frozen=True, kw_only=True)
class RunSummary:
    """One strategy on the nominal unit over the run (after ``settle_s``).

    Attributes
    ----------
    name : str
    gain_dev_max_abs_pct, gain_dev_pk_pk_pct, gain_dev_rms_pct, gain_dev_mean_pct : float
        Largest absolute, peak-to-peak, RMS and mean gain deviation over every tick, percent.
    time_outside_band_pct : float
        Share of the ticks outside the band, percent.
    overvoltage_dev_max_abs_v : float
        Largest absolute deviation of the overvoltage from the law's target, volt.
    sensor_fault_ticks, out_of_range_ticks : int
    cooler_energy_j : float
        Joule.
    cooler_mean_power_w : float
        Watt.
    hot_side_max_temp_c : float or None
        Degree Celsius (``None`` without a cooler).
    cooler_off_ticks : int
    dew_risk_ticks : int
        Ticks with the cold plate below the dew point plus margin (condensation).
    trim_v : float
        Final bias trim, volt.
    trim_converged_s : float or None
        End of convergence of the gain trim, second.
    trim_residual_rms_pct : float or None
        RMS gain deviation after convergence, percent.
    """

    name: str
    gain_dev_max_abs_pct: float
    gain_dev_pk_pk_pct: float
    gain_dev_rms_pct: float
    gain_dev_mean_pct: float
    time_outside_band_pct: float
    overvoltage_dev_max_abs_v: float
    sensor_fault_ticks: int
    out_of_range_ticks: int
    cooler_energy_j: float
    cooler_mean_power_w: float
    hot_side_max_temp_c: float | None
    cooler_off_ticks: int
    dew_risk_ticks: int
    trim_v: float
    trim_converged_s: float | None
    trim_residual_rms_pct: float | None


@dataclass(frozen=True, kw_only=True)
class SimulationReport:
    """Everything ``compensator simulate`` reports.

    Attributes
    ----------
    scenario, source, sha256 : str
        The scenario's name, file and hash.
    duration_days, tick_s : float
    ticks : int
    band_pct, settle_s : float
    runs : list of RunSummary
    uncompensated_over_compensated : float or None
        Ratio of the largest absolute gain deviations (both strategies run).
    trim_vs_published_factor : float or None
        Published analog dark-pulse feedback (2 %) over the gain trim's
        largest absolute deviation.
    yield_ : MonteCarloResult or None
    traces : Traces
    firmware : str
        "python" or "compiled C".
    table_entries, table_bytes : int
    table_bound_pct : float
    cooler_kp_a_per_k, cooler_ki_a_per_k_s : float or None
        The cooler's PI gains (parallel form).
    setup : SimSetup
    """

    scenario: str
    source: str
    sha256: str
    duration_days: float
    tick_s: float
    ticks: int
    band_pct: float
    settle_s: float
    runs: list
    uncompensated_over_compensated: float | None
    trim_vs_published_factor: float | None
    yield_: MonteCarloResult | None
    traces: Traces = field(repr=False)
    firmware: str
    table_entries: int
    table_bytes: int
    table_bound_pct: float
    cooler_kp_a_per_k: float | None
    cooler_ki_a_per_k_s: float | None
    setup: SimSetup = field(repr=False)


def _opt(value):
    value = float(value)
    return value if np.isfinite(value) else None


def summarise_runs(result, tick_s: float) -> list[RunSummary]:
    """One :class:`RunSummary` per strategy of a one-unit result.

    Parameters
    ----------
    result : UnitsResult
    tick_s : float
        Second.
    """
    out = []
    for name, m in result.metrics.items():
        energy = float(m.cooler_energy_j[0])
        out.append(RunSummary(
            name=name, gain_dev_max_abs_pct=float(m.gain_dev_max_abs_pct[0]),
            gain_dev_pk_pk_pct=float(m.gain_dev_pk_pk_pct[0]), gain_dev_rms_pct=float(m.gain_dev_rms_pct[0]),
            gain_dev_mean_pct=float(m.gain_dev_mean_pct[0]),
            time_outside_band_pct=float(m.time_outside_band_pct[0]),
            overvoltage_dev_max_abs_v=float(m.overvoltage_dev_max_abs_v[0]),
            sensor_fault_ticks=int(m.sensor_fault_ticks[0]), out_of_range_ticks=int(m.out_of_range_ticks[0]),
            cooler_energy_j=energy, cooler_mean_power_w=energy / (result.ticks * tick_s),
            hot_side_max_temp_c=_opt(m.hot_side_max_temp_c[0]), cooler_off_ticks=int(m.cooler_off_ticks[0]),
            dew_risk_ticks=int(m.dew_risk_ticks[0]), trim_v=float(m.trim_v[0]), trim_converged_s=_opt(m.trim_converged_s[0]),
            trim_residual_rms_pct=_opt(m.trim_residual_rms_pct[0])))
    return out


def simulate_scenario(scenario, *, days: float | None = None, units: int | None = None, strategies=None,
                      firmware_dir=None, scheduler: str | None = None, workers: int | None = None,
                      progress=None, mc_progress=None) -> SimulationReport:
    """Run a scenario: the nominal unit through every strategy, then the Monte Carlo yield.

    Parameters
    ----------
    scenario : ScenarioProfile
    days : float, optional
        Overrides ``run.duration_days``.
    units : int, optional
        Overrides ``monte_carlo.units`` (0: no Monte Carlo).
    strategies : sequence of str, optional
        Overrides the scenario's strategies.
    firmware_dir : str or path-like, optional
        Write the generated C there, compile it with ``cc`` and run the loop
        through it (default: the Python references).
    scheduler : str, optional
        Dask scheduler address for the Monte Carlo.
    workers : int, optional
        Local processes for the Monte Carlo.
    progress : callable, optional
        Called with ticks done (nominal run).
    mc_progress : callable, optional
        Called with units done (Monte Carlo).

    Returns
    -------
    SimulationReport
    """
    setup = prepare(scenario, days=days, strategies=strategies)
    firmware = firmware_library = None
    if firmware_dir is not None:
        from compensator.sim.firmware import compile_firmware

        profiles = [p for p in (scenario.sipm, scenario.board, scenario.thermal) if p is not None]
        firmware = compile_firmware(setup, firmware_dir, profiles)
        firmware_library = str(firmware.library)
    result = simulate_units(setup, nominal_units(1), seed=setup.seed, traces=True, firmware=firmware,
                            progress=progress)
    runs = summarise_runs(result, setup.tick_s)
    by = {r.name: r for r in runs}
    ratio = None
    if "uncompensated" in by and "compensated" in by and by["compensated"].gain_dev_max_abs_pct > 0:
        ratio = by["uncompensated"].gain_dev_max_abs_pct / by["compensated"].gain_dev_max_abs_pct
    factor = None
    if "gain_trimmed" in by and by["gain_trimmed"].gain_dev_max_abs_pct > 0:
        factor = PUBLISHED_DARK_PULSE_FEEDBACK_PCT / by["gain_trimmed"].gain_dev_max_abs_pct
    mc = scenario.section("monte_carlo")
    count = mc["units"] if units is None else int(units)
    yield_ = None
    if count:
        groups = tuple(g for g in GROUPS if mc[f"draw_{g}"])
        strategy = mc["strategy"]
        if strategy not in setup.strategies or (strategy == "compensated_cooled" and not mc["cooled"]):
            raise ModelError(f"the yield strategy {strategy!r} is not among the strategies run",
                             key="monte_carlo.strategy").at(scenario.source,
                                                            scenario.lines.get("monte_carlo.strategy", 0))
        chosen = tuple(s for s in setup.strategies if s != "compensated_cooled" or mc["cooled"])
        yield_ = monte_carlo(setup, units=count, seed=mc["seed"], chunk_units=mc["chunk_units"], groups=groups,
                             strategies=chosen, strategy=strategy, worst_count=mc["worst_units"], workers=workers,
                             scheduler=scheduler, firmware_library=firmware_library, progress=mc_progress)
    gains = setup.pid_gains
    return SimulationReport(
        scenario=scenario.name, source=scenario.source, sha256=scenario.sha256,
        duration_days=setup.duration_s / 86400.0, tick_s=setup.tick_s, ticks=setup.ticks, band_pct=setup.band_pct,
        settle_s=setup.settle_s, runs=runs, uncompensated_over_compensated=ratio, trim_vs_published_factor=factor,
        yield_=yield_, traces=result.traces, firmware=result.firmware, table_entries=setup.table.entries,
        table_bytes=setup.table.table_bytes, table_bound_pct=float(setup.table.max_gain_error_pct),
        cooler_kp_a_per_k=None if gains is None else gains.kp,
        cooler_ki_a_per_k_s=None if gains is None else gains.ki_per_s, setup=setup)
