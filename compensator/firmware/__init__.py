"""Firmware artefacts: integer tables, fixed-point PID, C99 code and their bit-exact Python references.

The public names of the submodules are re-exported here, loaded on first use
(so that importing a light submodule such as ``faults`` stays cheap).
"""

from __future__ import annotations

from compensator._lazy import lazy_exports

_EXPORTS = {
    "tables": ("LookupTable", "TableStatus", "TableSweep", "TableError", "LayoutCandidate", "LayoutReport",
               "build_table", "compare_layouts", "sweep_table", "ideal_dac_code", "adc_quantisation_gain_pct",
               "DEFAULT_FAULT_MARGIN_K"),
    "layouts": ("LAYOUTS", "LAYOUT_CHOICES"),
    "current": ("CurrentCorrection", "build_current_correction"),
    "safe_state": ("SafeState", "safe_state"),
    "table_c": ("render_table_c", "render_sweep_csv", "c_function_signature", "c_current_function_signature",
                "default_sweep_mode", "SWEEP_MODES"),
    "c_names": ("check_function_name", "check_prefix"),
    "table_files": ("TableFiles", "prepare_table_files"),
    "integer_path": ("IntegerPathGainError", "PathPoints", "WITHIN_CODE", "integer_path_gain_error",
                     "integer_path_points"),
    "pid": ("PidSettings", "DiscretePid", "discretise_pid", "FloatPid", "PidRun", "ANTI_WINDUP_MODES"),
    "pid_coefficients": ("FixedPidCoefficients", "quantise_pid"),
    "pid_fixed": ("FixedPidState", "FixedPid", "agreement_bound_count"),
    "pid_c": ("render_pid_c",),
    "fixed_point": ("floor_shift", "rshift_round", "saturate"),
}

_WHERE = {name: module for module, names in _EXPORTS.items() for name in names}

__all__ = sorted(_WHERE)


__getattr__ = lazy_exports(globals(), {name: f"{__name__}.{module}" for name, module in _WHERE.items()})


def __dir__():
    return sorted(set(globals()) | set(__all__))
