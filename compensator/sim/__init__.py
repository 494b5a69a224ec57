"""Field simulation: the instrument in the loop over weeks of weather, running the firmware as generated.

* :mod:`~compensator.sim.environment`: weather (diurnal, seasonal, random, steps, replay), sun, light and the
  thermal path to the die;
* :mod:`~compensator.sim.chain`: the signal chain of many units at once (sensor -> ADC code, DAC code -> bias
  at the SiPM -> gain) and the units' tolerance draws;
* :mod:`~compensator.sim.cooler`: the cooler's nonlinear heat balance, one tick at a time;
* :mod:`~compensator.sim.firmware`: the firmware's integer path by its Python references or the compiled C;
* :mod:`~compensator.sim.setup`: from a scenario to a :class:`SimSetup` (law, table, cooler controller);
* :mod:`~compensator.sim.engine`: the strategies over the whole run, block after block;
* :mod:`~compensator.sim.metrics`: per-unit metrics accumulated as the run goes, and the decimated traces;
* :mod:`~compensator.sim.blocks`: supply lags, the measured drop correction and the dark-peak measurement per block;
* :mod:`~compensator.sim.cooled`: the compensated_cooled strategy, tick by tick;
* :mod:`~compensator.sim.plant`: :class:`FieldPlant`, one unit one tick at a time, for a simulated board.
"""

from compensator.sim.chain import UnitDraws, draw_units, nominal_units
from compensator.sim.engine import SimOptions, StrategyMetrics, Traces, UnitsResult, measure_dark_peak, simulate_units
from compensator.sim.environment import AmbientStream, ThermalPath, Weather
from compensator.sim.firmware import CompiledFirmware, PythonFirmware, VectorPid
from compensator.sim.plant import FieldPlant, PlantReading
from compensator.sim.setup import SimSetup, TrimSettings, prepare, setup_from_profiles

__all__ = [
    "AmbientStream", "CompiledFirmware", "FieldPlant", "PlantReading", "PythonFirmware", "SimOptions", "SimSetup",
    "StrategyMetrics", "ThermalPath", "Traces", "TrimSettings", "UnitDraws", "UnitsResult", "VectorPid", "Weather",
    "draw_units", "measure_dark_peak", "nominal_units", "prepare", "setup_from_profiles", "simulate_units",
]
