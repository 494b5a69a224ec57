"""Pure device models: SiPM, temperature sensors and front ends, bias supply, current and read-back
channels, scintillator light yield.

No I/O here: frozen dataclasses and numpy arrays in, arrays out. Every public name of the modules
below is re-exported here (the cooler heat balance stays in :mod:`compensator.physics.thermal`).
"""

from compensator.physics.bias_readback import BiasReadback
from compensator.physics.current_sense import (
    CurrentSense,
    centred_adc_code,
)
from compensator.physics.scintillator import (
    Scintillator,
    overvoltage_for_response,
    relative_light_yield,
    response_per_photon,
)
from compensator.physics.sensors import (
    CVD_A,
    CVD_B,
    CVD_C,
    RTD_MAX_TEMP_C,
    RTD_MIN_TEMP_C,
    RTD_TOLERANCE_CLASSES,
    T25_K,
    FrontEnd,
    NtcSensor,
    RtdSensor,
    SteinhartHart,
    TemperatureChannel,
    fit_steinhart_hart,
    ntc_beta_resistance_ohm,
    ntc_beta_temp_c,
    rtd_resistance_ohm,
    rtd_temp_c,
    rtd_tolerance_k,
    steinhart_hart_resistance_ohm,
    steinhart_hart_temp_c,
)
from compensator.physics.sipm import (
    CROSSTALK_MODELS,
    EVALUATE_BLOCK,
    Breakdown,
    Sipm,
    SipmState,
    breakdown_v,
    cell_capacitance_f,
    crosstalk_branching_ratio,
    crosstalk_mean_multiplier,
    crosstalk_probability,
    dark_rate_hz,
    evaluate,
    fired_cells,
    gain,
    pde,
    relative_gain_change_per_k,
    steady_current_a,
)
from compensator.physics.supply import (
    DEFAULT_REGULATOR_TIME_CONSTANT_S,
    ROUNDING_MODES,
    BiasSupply,
    Dac,
    network_output_v,
    sipm_bias_v,
    solve_operating_point_v,
)

__all__ = [
    "BiasReadback", "CurrentSense", "centred_adc_code", "Scintillator", "overvoltage_for_response",
    "relative_light_yield", "response_per_photon", "CVD_A", "CVD_B", "CVD_C", "RTD_MAX_TEMP_C", "RTD_MIN_TEMP_C",
    "RTD_TOLERANCE_CLASSES", "T25_K", "FrontEnd", "NtcSensor", "RtdSensor", "SteinhartHart", "TemperatureChannel",
    "fit_steinhart_hart", "ntc_beta_resistance_ohm", "ntc_beta_temp_c", "rtd_resistance_ohm", "rtd_temp_c",
    "rtd_tolerance_k", "steinhart_hart_resistance_ohm", "steinhart_hart_temp_c", "CROSSTALK_MODELS",
    "EVALUATE_BLOCK", "Breakdown", "Sipm", "SipmState", "breakdown_v", "cell_capacitance_f",
    "crosstalk_branching_ratio", "crosstalk_mean_multiplier", "crosstalk_probability", "dark_rate_hz", "evaluate",
    "fired_cells", "gain", "pde", "relative_gain_change_per_k", "steady_current_a",
    "DEFAULT_REGULATOR_TIME_CONSTANT_S", "ROUNDING_MODES", "BiasSupply", "Dac", "network_output_v", "sipm_bias_v",
    "solve_operating_point_v",
]
