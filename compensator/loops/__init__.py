"""The two control loops: plant models, identification, PID tuning, verification.

No I/O here except :mod:`compensator.loops.measurements` (reads CSV) and
:mod:`compensator.loops.plots` (writes figures).

The public names below are re-exported from their modules on first use, so
that ``import compensator.loops.choices`` (what the command line needs to
build its help) does not load python-control and scipy.
"""

from __future__ import annotations

from compensator._lazy import lazy_exports

#: Public name -> the module that defines it.
_HOME = {
    **dict.fromkeys(("LoopDesign", "LoopUnits", "CoolerConditions", "design_cooler_loop", "design_bias_loop",
                     "design_model_loop", "design_ultimate_loop"), "design"),
    **dict.fromkeys(("METHODS", "DEFAULT_MS"), "choices"),
    **dict.fromkeys(("TuningResult", "tune", "robust", "simc", "amigo", "imc", "ziegler_nichols_step",
                     "ziegler_nichols_ultimate", "ms_point_ultimate", "fopdt_from_ultimate"), "tuning"),
    **dict.fromkeys(("Margins", "StepData", "LoopReport", "LoopFigures", "verify_loop", "loop_figures",
                     "closed_loop_stable"), "verify"),
    **dict.fromkeys(("PidGains", "controller_tf", "controller_frequency_response"), "controller"),
    **dict.fromkeys(("frequency_grid", "loop_frequency_grid", "max_sensitivity", "ultimate_point"), "frequency"),
    **dict.fromkeys(("Plant", "FopdtModel", "SopdtModel", "fopdt_plant", "sopdt_plant", "model_plant",
                     "linearise_cooler", "linearise_cooler_over_ambient", "bias_supply_plant"), "plants"),
    **dict.fromkeys(("AmbientCheck", "AmbientRangeReport", "ambient_grid_c", "check_cooler_ambient_range"),
                    "cooler"),
    **dict.fromkeys(("discretise", "discrete_frequency_response", "step_response"), "sampled"),
    **dict.fromkeys(("StepFit", "RelayResult", "fit_step", "relay_experiment", "approximate_plant"), "identify"),
    **dict.fromkeys(("LoopRecord", "read_loop_csv"), "measurements"),
}

__all__ = sorted(_HOME)


__getattr__ = lazy_exports(globals(), {name: f"{__name__}.{home}" for name, home in _HOME.items()})


def __dir__():
    return sorted(set(globals()) | set(__all__))
