"""Pure device models: SiPM, temperature sensors and front ends, bias supply.

No I/O here: frozen dataclasses and numpy arrays in, arrays out.
"""

from compensator.physics.bias_readback import BiasReadback
from compensator.physics.sipm import (
    Breakdown,
    Sipm,
    SipmState,
    breakdown_v,
    crosstalk_probability,
    dark_rate_hz,
    evaluate,
    fired_cells,
    gain,
    pde,
    relative_gain_change_per_k,
    steady_current_a,
)

__all__ = [
    "BiasReadback", "Breakdown", "Sipm", "SipmState", "breakdown_v", "crosstalk_probability", "dark_rate_hz",
    "evaluate", "fired_cells", "gain", "pde", "relative_gain_change_per_k", "steady_current_a",
]
