"""Compensation laws, the gain-error budget they leave and the safe bias (pure numerics, no I/O)."""

from compensator.law.budget import (
    BudgetTerm,
    GainBudget,
    MonteCarloSummary,
    electronics_terms,
    gain_error_at_light_pct,
    gain_error_budget,
)
from compensator.law.error_chain import ErrorSource, chain_gain_error_pct, error_sources, sensor_lag_k
from compensator.law.laws import (
    DROP_CORRECTIONS,
    LAW_KINDS,
    LIMIT_NAMES,
    CompensationLaw,
    build_law,
    check_law_in_range,
    constant_gain_law,
    constant_overvoltage_law,
    constant_response_law,
)
from compensator.law.safety import SafeBias, lowest_breakdown_v, safe_bias

__all__ = [
    "BudgetTerm", "GainBudget", "MonteCarloSummary", "electronics_terms", "gain_error_at_light_pct", "gain_error_budget",
    "DROP_CORRECTIONS", "LAW_KINDS", "LIMIT_NAMES", "CompensationLaw", "build_law", "check_law_in_range",
    "constant_gain_law", "constant_overvoltage_law", "constant_response_law", "SafeBias", "lowest_breakdown_v",
    "safe_bias", "ErrorSource", "chain_gain_error_pct", "error_sources", "sensor_lag_k",
]
