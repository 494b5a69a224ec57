"""Monte Carlo yield: many units with drawn tolerances, in chunks, on local processes or an existing Dask cluster.

Units are simulated in chunks of ``chunk_units`` (vectorised over the units
of a chunk, never a Python loop per unit). A unit's draws depend only on the
seed and its index; a chunk's sensor noise only on the seed and the chunk's
index, so the result is the same on one process, on several, or on a Dask
cluster (``dask.distributed``, an optional extra: ``pip install
'compensator[cluster]'``). The cluster must already run; this module only
connects to it with ``Client(address)`` and gives it the chunks.
"""

from __future__ import annotations

import os
from concurrent.futures import ProcessPoolExecutor, as_completed
from dataclasses import dataclass, field

import numpy as np

from compensator.errors import CompensatorError, ModelError
from compensator.sim.chain import GROUPS, UnitDraws, draw_units
from compensator.sim.engine import STRATEGY_ORDER, simulate_units
from compensator.sim.setup import SimSetup

__all__ = ["ChunkResult", "WorstUnit", "StrategyYield", "MonteCarloResult", "run_chunk", "monte_carlo",
           "ClusterError"]


class ClusterError(CompensatorError, OSError):
    """The Dask scheduler could not be reached, or dask.distributed is not installed."""


@dataclass(frozen=True)
class ChunkResult:
    """What one chunk of units did.

    Attributes
    ----------
    first_unit : int
        Index of the chunk's first unit.
    draws : UnitDraws
    metrics : dict
        Strategy name -> :class:`~compensator.sim.engine.StrategyMetrics` (arrays over the chunk's units).
    """

    first_unit: int
    draws: UnitDraws = field(repr=False)
    metrics: dict = field(repr=False)


def run_chunk(setup: SimSetup, first_unit: int, count: int, *, seed: int, chunk_index: int, groups, strategies,
              firmware_library: str | None = None) -> ChunkResult:
    """Draw and simulate one chunk of units (runs in a worker process or on a cluster worker).

    Parameters
    ----------
    setup : SimSetup
    first_unit, count : int
        Units ``first_unit .. first_unit + count - 1``.
    seed : int
        Monte Carlo seed.
    chunk_index : int
        Seeds the chunk's sensor noise.
    groups : sequence of str
        Tolerance groups to draw.
    strategies : sequence of str
    firmware_library : str, optional
        Path of the compiled firmware library (``--firmware``); default the Python references.

    Returns
    -------
    ChunkResult
    """
    draws = draw_units(setup.board, setup.sipm, np.arange(first_unit, first_unit + count), seed=seed, groups=groups)
    firmware = None
    if firmware_library:
        from compensator.sim.firmware import CompiledFirmware

        firmware = CompiledFirmware(setup.table, firmware_library, setup.pid is not None)
    result = simulate_units(setup, draws, seed=seed * 1_000_003 + chunk_index + 1, strategies=strategies,
                            firmware=firmware)
    return ChunkResult(int(first_unit), draws, result.metrics)


@dataclass(frozen=True, kw_only=True)
class WorstUnit:
    """One of the units furthest from the target gain.

    Attributes
    ----------
    unit : int
        Unit index.
    gain_dev_max_abs_pct : float
        Largest absolute gain deviation over the run, percent.
    gain_dev_pk_pk_pct : float
        Peak-to-peak gain deviation, percent.
    draws : dict
        The deviations drawn for it (only those that are not zero).
    """

    unit: int
    gain_dev_max_abs_pct: float
    gain_dev_pk_pk_pct: float
    draws: dict


@dataclass(frozen=True, kw_only=True)
class StrategyYield:
    """The yield of one strategy.

    Attributes
    ----------
    name : str
    fraction_within : float
        Share of the units whose largest absolute gain deviation over the run stays within the band.
    gain_dev_max_abs_pct : ndarray
        Per unit, percent.
    gain_dev_max_abs_median_pct, gain_dev_max_abs_p95_pct : float
        Median and 95th percentile over the units of the per-unit largest absolute deviation, percent.
    """

    name: str
    fraction_within: float
    gain_dev_max_abs_pct: np.ndarray = field(repr=False)
    gain_dev_max_abs_median_pct: float
    gain_dev_max_abs_p95_pct: float


@dataclass(frozen=True, kw_only=True)
class MonteCarloResult:
    """The Monte Carlo over all units.

    Attributes
    ----------
    units : int
    band_pct : float
        The band, plus or minus percent.
    strategy : str
        The strategy the headline yield and the worst units are for.
    fraction_within : float
        Its yield.
    worst : list of WorstUnit
    strategies : list of StrategyYield
        Every strategy run.
    seed : int
    chunks : int
    executor : str
        ``"inline"``, ``"processes (N)"`` or ``"dask ADDRESS"``.
    groups : tuple of str
        Tolerance groups drawn.
    """

    units: int
    band_pct: float
    strategy: str
    fraction_within: float
    worst: list
    strategies: list
    seed: int
    chunks: int
    executor: str
    groups: tuple


def _combine(chunks, units, band, strategy, strategies, worst_count, seed, executor, groups) -> MonteCarloResult:
    chunks = sorted(chunks, key=lambda c: c.first_unit)
    yields = []
    for name in strategies:
        values = np.concatenate([c.metrics[name].gain_dev_max_abs_pct for c in chunks])
        yields.append(StrategyYield(name=name, fraction_within=float(np.mean(values <= band)),
                                    gain_dev_max_abs_pct=values,
                                    gain_dev_max_abs_median_pct=float(np.median(values)),
                                    gain_dev_max_abs_p95_pct=float(np.percentile(values, 95))))
    head = next(y for y in yields if y.name == strategy)
    pk = np.concatenate([c.metrics[strategy].gain_dev_pk_pk_pct for c in chunks])
    records = [r for c in chunks for r in c.draws.as_records()]
    order = np.argsort(-head.gain_dev_max_abs_pct, kind="stable")[:worst_count]
    worst = [WorstUnit(unit=int(i), gain_dev_max_abs_pct=float(head.gain_dev_max_abs_pct[i]),
                       gain_dev_pk_pk_pct=float(pk[i]), draws=records[i]) for i in order]
    return MonteCarloResult(units=units, band_pct=band, strategy=strategy, fraction_within=head.fraction_within,
                            worst=worst, strategies=yields, seed=seed, chunks=len(chunks), executor=executor,
                            groups=tuple(groups))


#: How long to wait for a Dask scheduler to answer, second.
CONNECT_TIMEOUT_S = 10.0


def _dask_client(address: str):
    try:
        from dask.distributed import Client
    except ImportError:
        raise ClusterError("--scheduler needs dask.distributed: pip install 'compensator[cluster]'") from None
    try:
        return Client(address, timeout=f"{CONNECT_TIMEOUT_S}s", set_as_default=False)
    except (OSError, TimeoutError, ValueError) as exc:
        raise ClusterError(f"cannot reach the Dask scheduler at {address}: {exc}") from None


def monte_carlo(setup: SimSetup, *, units: int, seed: int, chunk_units: int = 250, groups=tuple(GROUPS),
                strategies=None, strategy: str = "compensated", worst_count: int = 5, workers: int | None = None,
                scheduler: str | None = None, client=None, firmware_library: str | None = None,
                progress=None) -> MonteCarloResult:
    """Simulate ``units`` units with drawn tolerances and report the yield.

    Parameters
    ----------
    setup : SimSetup
    units : int
        Number of units.
    seed : int
    chunk_units : int
        Units per chunk (a chunk is one task).
    groups : sequence of str
        Tolerance groups to draw.
    strategies : sequence of str, optional
        Default: the setup's.
    strategy : str
        The strategy of the headline yield and the worst units.
    worst_count : int
        How many worst units to list.
    workers : int, optional
        Local processes (default: the CPUs available; 1 runs in this process).
    scheduler : str, optional
        Address of a running Dask scheduler (``tcp://host:8786``); the chunks go there.
    client : dask.distributed.Client, optional
        An open client to use instead of ``scheduler``.
    firmware_library : str, optional
        Run the compiled firmware (its path must be readable by the workers).
    progress : callable, optional
        Called with the number of units finished after each chunk.

    Returns
    -------
    MonteCarloResult

    Raises
    ------
    ClusterError
        The scheduler cannot be reached.
    """
    if units < 1:
        raise ModelError("units must be at least 1", key="units")
    strategies = tuple(s for s in STRATEGY_ORDER if s in (strategies or setup.strategies))
    if strategy not in strategies:
        raise ModelError(f"the yield strategy {strategy!r} is not among the strategies run", key="strategy")
    spans = [(start, min(chunk_units, units - start)) for start in range(0, units, chunk_units)]
    jobs = [dict(first_unit=a, count=n, seed=seed, chunk_index=i, groups=tuple(groups), strategies=strategies,
                 firmware_library=firmware_library) for i, (a, n) in enumerate(spans)]
    results = []

    def done(res):
        results.append(res)
        if progress is not None:
            progress(res.draws.count)

    if scheduler is not None or client is not None:
        own = client is None
        client = client or _dask_client(scheduler)
        try:
            from dask.distributed import as_completed as dask_completed

            futures = [client.submit(run_chunk, setup, pure=False, **job) for job in jobs]
            for fut in dask_completed(futures):
                done(fut.result())
        finally:
            if own:
                client.close()
        executor = f"dask {scheduler or client.scheduler.address}"
    else:
        workers = workers or _available_cpus()
        workers = max(1, min(workers, len(jobs)))
        if workers == 1:
            for job in jobs:
                done(run_chunk(setup, **job))
            executor = "inline"
        else:
            with ProcessPoolExecutor(max_workers=workers) as pool:
                futures = [pool.submit(run_chunk, setup, **job) for job in jobs]
                for fut in as_completed(futures):
                    done(fut.result())
            executor = f"processes ({workers})"
    return _combine(results, units, setup.band_pct, strategy, strategies, worst_count, seed, executor, groups)


def _available_cpus() -> int:
    try:
        return len(os.sched_getaffinity(0))
    except AttributeError:
        return os.cpu_count() or 1
